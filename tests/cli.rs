//! End-to-end runs of the `morbus score` command: nothing lost, pass-through
//! bytes untouched, clear messages and exit codes for bad input.

mod common;

use std::io::Write;
use std::path::PathBuf;

use common::column;

pub struct Run {
    pub code: i32,
    pub stdout: Vec<u8>,
    pub stderr: String,
}

impl Run {
    fn out(&self) -> String {
        String::from_utf8_lossy(&self.stdout).into_owned()
    }
}

fn morbus(args: &[&str], stdin: &[u8]) -> Run {
    let out = common::pipe(args, stdin);
    Run {
        code: out.status.code().unwrap_or(-1),
        stdout: out.stdout,
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// `morbus ARGS` on `stdin` exits with `code` and says `message`.
fn refused(args: &[&str], stdin: &[u8], code: i32, message: &str) -> Run {
    let r = morbus(args, stdin);
    assert_eq!(r.code, code, "{}", r.stderr);
    assert!(r.stderr.contains(message), "{}", r.stderr);
    r
}

fn tmp(name: &str) -> PathBuf {
    common::scratch("cli", name)
}

fn demo() -> PathBuf {
    common::root().join("demo-data/episodes.csv")
}

const SMALL: &str = "episode,age,dx1,dx2,dx3\n\
e1,72,I21.9,E11.2,E11.9\n\
e2,45,C78.0,C18.7,N/A\n\
\"e3, with comma\",,,,\n\
e4,88,F00.1,R29.6,W19\n";

#[test]
fn wide_scores_and_passes_rows_through() {
    let r = morbus(&["score", "--dx", "dx*", "--age", "age"], SMALL.as_bytes());
    assert_eq!(r.code, 0, "{}", r.stderr);
    let out = r.out();
    let lines: Vec<&str> = out.lines().collect();
    let input: Vec<&str> = SMALL.lines().collect();
    assert_eq!(lines.len(), input.len());
    for (o, i) in lines.iter().zip(&input) {
        assert!(o.starts_with(i), "{o} does not start with {i}");
    }
    assert!(lines[0].ends_with(
        ",charlson_quan2011,charlson_quan2011_age,elixhauser_vanwalraven2009,hfrs_gilbert2018,hfrs_gilbert2018_band"
    ));
    // Hand-worked: e1 MI 0 + diabetes with complication 1 (Quan et al., Am J
    // Epidemiol 2011;173:676-82), age 72 adds 3 (Charlson et al., J Clin
    // Epidemiol 1994;47:1245-51); e2 metastatic 6; e4 dementia 2, age 88 adds
    // 4; HFRS e4 F00 7.1 + R29 3.6 + W19 3.2 = 13.9 (Gilbert et al., Lancet
    // 2018;391:1775-82).
    assert_eq!(column(&out, "charlson_quan2011"), ["1", "6", "0", "2"]);
    assert_eq!(column(&out, "charlson_quan2011_age"), ["4", "6", "", "6"]);
    assert_eq!(
        column(&out, "hfrs_gilbert2018"),
        ["0.0", "0.0", "0.0", "13.9"]
    );
    assert_eq!(
        column(&out, "hfrs_gilbert2018_band"),
        ["low", "low", "low", "intermediate"]
    );
    assert!(
        r.stderr.contains("4 rows read, 4 rows written"),
        "{}",
        r.stderr
    );
    assert!(r.stderr.contains("1 invalid codes"), "{}", r.stderr);
    assert!(r.stderr.contains("'N/A' (1)"), "{}", r.stderr);
    assert!(r.stderr.contains("ages missing: 1"), "{}", r.stderr);
}

#[test]
fn index_specs_flags_and_no_hierarchy() {
    let r = morbus(
        &[
            "score",
            "--dx",
            "dx1,dx2,dx3",
            "--index",
            "charlson:charlson1987",
            "--index",
            "elixhauser:count",
            "--flags",
        ],
        SMALL.as_bytes(),
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let out = r.out();
    // Charlson et al., J Chronic Dis 1987;40:373-83 weights: e1 MI 1 +
    // diabetes with complications 2 = 3; e2 metastatic 6.
    assert_eq!(column(&out, "charlson_charlson1987"), ["3", "6", "0", "1"]);
    assert_eq!(
        column(&out, "charlson_diabetes_without_chronic_complication"),
        ["0", "0", "0", "0"]
    );
    assert_eq!(
        column(&out, "charlson_diabetes_with_chronic_complication"),
        ["1", "0", "0", "0"]
    );
    assert_eq!(
        column(&out, "elixhauser_metastatic_cancer"),
        ["0", "1", "0", "0"]
    );
    let header = out.lines().next().unwrap();
    assert!(!header.contains("hfrs"));
    assert_eq!(header.split(',').count(), 5 + 2 + 17 + 31);

    let r = morbus(
        &[
            "score",
            "--dx",
            "dx*",
            "--index",
            "charlson:charlson1987",
            "--flags",
            "--no-hierarchy",
        ],
        SMALL.as_bytes(),
    );
    let out = r.out();
    assert_eq!(column(&out, "charlson_charlson1987"), ["4", "8", "0", "1"]);
    assert_eq!(
        column(&out, "charlson_diabetes_without_chronic_complication"),
        ["1", "0", "0", "0"]
    );
}

#[test]
fn bare_list_name_takes_its_default_weighting() {
    let r = morbus(
        &["score", "--dx", "dx*", "--index", "charlson,hfrs"],
        SMALL.as_bytes(),
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let header = r.out().lines().next().unwrap().to_string();
    assert!(header.ends_with(",charlson_quan2011,hfrs_gilbert2018,hfrs_gilbert2018_band"));
}

#[test]
fn long_layout_one_row_per_id_in_first_appearance_order() {
    let long = "pid,code,age\n\
b,I50.9,81\n\
a,,60\n\
b,N18.4,81\n\
c,UNKNOWN,\n\
a,C78.1,60\n\
\"d,1\",I21.0,55\n";
    let r = morbus(
        &[
            "score",
            "--layout",
            "long",
            "--id",
            "pid",
            "--dx",
            "code",
            "--age",
            "age",
            "--index",
            "charlson:charlson1987",
        ],
        long.as_bytes(),
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let out = r.out();
    assert_eq!(
        out,
        "pid,charlson_charlson1987,charlson_charlson1987_age\n\
b,3,7\n\
a,6,8\n\
c,0,\n\
\"d,1\",1,2\n"
    );
    assert!(
        r.stderr.contains("6 rows read, 4 rows written"),
        "{}",
        r.stderr
    );
}

#[test]
fn dx_sep_splits_fields() {
    let input = "id,codes\n1,I21.9|E11.2|C78.0\n2,\n";
    let r = morbus(
        &[
            "score",
            "--dx",
            "codes",
            "--dx-sep",
            "|",
            "--index",
            "charlson:charlson1987",
        ],
        input.as_bytes(),
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    // MI 1 + diabetes with complications 2 + metastatic 6 (Charlson et al.,
    // J Chronic Dis 1987;40:373-83).
    assert_eq!(column(&r.out(), "charlson_charlson1987"), ["9", "0"]);
}

#[test]
fn missing_column_lists_the_columns_that_exist() {
    let r = refused(
        &["score", "--dx", "diag1"],
        SMALL.as_bytes(),
        2,
        "'diag1' not found",
    );
    assert!(
        r.stderr.contains("episode, age, dx1, dx2, dx3"),
        "{}",
        r.stderr
    );
    refused(
        &["score", "--dx", "diag*"],
        SMALL.as_bytes(),
        2,
        "matches no column",
    );
    refused(
        &["score", "--dx", "dx*", "--age", "years"],
        SMALL.as_bytes(),
        2,
        "age column 'years' not found",
    );
}

#[test]
fn unknown_list_or_weighting_lists_the_valid_ones() {
    refused(
        &["score", "--dx", "dx*", "--index", "charlsen"],
        SMALL.as_bytes(),
        2,
        "unknown list 'charlsen'; available lists: charlson, elixhauser, hfrs",
    );
    refused(
        &["score", "--dx", "dx*", "--index", "elixhauser:quan2011"],
        SMALL.as_bytes(),
        2,
        "its weightings: vanwalraven2009, count",
    );
}

#[test]
fn malformed_record_reports_its_line() {
    let input = "id,dx1,dx2\n1,I21,I50\n2,I10\n3,C78,\n";
    refused(
        &["score", "--dx", "dx*"],
        input.as_bytes(),
        1,
        "line 3: record has 2 fields but the header has 3",
    );
    // A quoted field spanning lines counts its lines.
    let input = "id,note,dx1\n1,\"two\nlines\",I21\n2,x\n";
    refused(&["score", "--dx", "dx1"], input.as_bytes(), 1, "line 4:");
}

#[test]
fn non_utf8_and_quoting_pass_through_unchanged() {
    let mut input = b"name,dx1\n".to_vec();
    input.extend_from_slice(b"Ren\xe9e M\xfcller,I21.9\n");
    input.extend_from_slice(b"\"quoted \"\"name\"\"\",E11.2\n");
    input.extend_from_slice(b"\"multi\nline\",\n");
    let r = morbus(
        &["score", "--dx", "dx1", "--index", "charlson:count"],
        &input,
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let mut expected = b"name,dx1,charlson_count\n".to_vec();
    expected.extend_from_slice(b"Ren\xe9e M\xfcller,I21.9,1\n");
    expected.extend_from_slice(b"\"quoted \"\"name\"\"\",E11.2,1\n");
    expected.extend_from_slice(b"\"multi\nline\",,0\n");
    assert_eq!(r.stdout, expected);
}

#[test]
fn crlf_bom_and_missing_final_newline() {
    let input = b"\xef\xbb\xbfid,dx1\r\n1,I21.9\r\n2,E11.2";
    let r = morbus(
        &["score", "--dx", "dx1", "--index", "charlson:count"],
        input,
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(
        r.stdout,
        b"\xef\xbb\xbfid,dx1,charlson_count\r\n1,I21.9,1\r\n2,E11.2,1\r\n".to_vec()
    );
}

#[test]
fn empty_and_header_only_inputs() {
    refused(&["score", "--dx", "dx1"], b"", 1, "the input is empty");
    let r = morbus(
        &["score", "--dx", "dx1", "--index", "charlson:count"],
        b"id,dx1\n",
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(r.out(), "id,dx1,charlson_count\n");
    assert!(r.stderr.contains("0 rows read, 0 rows written"));
}

#[test]
fn gzip_input_and_output_files() {
    use flate2::write::GzEncoder;
    let gz = tmp("small.csv.gz");
    let mut enc = GzEncoder::new(
        std::fs::File::create(&gz).unwrap(),
        flate2::Compression::default(),
    );
    enc.write_all(SMALL.as_bytes()).unwrap();
    enc.finish().unwrap();
    let out = tmp("scored.csv.gz");
    let r = morbus(
        &[
            "score",
            gz.to_str().unwrap(),
            "--dx",
            "dx*",
            "-o",
            out.to_str().unwrap(),
        ],
        b"",
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let mut text = String::new();
    use std::io::Read;
    flate2::read::MultiGzDecoder::new(std::fs::File::open(&out).unwrap())
        .read_to_string(&mut text)
        .unwrap();
    let plain = morbus(&["score", "--dx", "dx*"], SMALL.as_bytes());
    assert_eq!(text, plain.out());
}

#[test]
fn output_column_clash_is_refused() {
    let input = "id,dx1,charlson_quan2011\n1,I21,5\n";
    refused(
        &["score", "--dx", "dx1"],
        input.as_bytes(),
        2,
        "'charlson_quan2011' already exists",
    );
}

#[test]
fn strict_stops_at_the_first_invalid_code() {
    refused(
        &["score", "--dx", "dx*", "--strict"],
        SMALL.as_bytes(),
        3,
        "line 3: invalid code 'N/A' in column 'dx3'",
    );
}

#[test]
fn blocks_do_not_change_results() {
    // Many rows with a quoted multi-line field now and then: scoring must not
    // depend on where the input is cut into blocks.
    let mut input = String::from("id,note,dx1,dx2\n");
    for i in 0..20_000 {
        if i % 97 == 0 {
            input.push_str(&format!(
                "{i},\"a\nb, \"\"c\"\"\",I21.{},E11.{}\n",
                i % 10,
                i % 10
            ));
        } else {
            input.push_str(&format!("{i},,C{:02}.1,F00\n", i % 100));
        }
    }
    let r = morbus(&["score", "--dx", "dx1,dx2"], input.as_bytes());
    assert_eq!(r.code, 0, "{}", r.stderr);
    let out = r.out();
    let mut rdr = csv::Reader::from_reader(out.as_bytes());
    let mut inp = csv::Reader::from_reader(input.as_bytes());
    let mut n = 0;
    for (o, i) in rdr.records().zip(inp.records()) {
        let (o, i) = (o.unwrap(), i.unwrap());
        for k in 0..4 {
            assert_eq!(o.get(k), i.get(k));
        }
        n += 1;
    }
    assert_eq!(n, 20_000);
}

#[test]
fn demo_data_every_row_out_in_order() {
    let path = demo();
    if !path.exists() {
        panic!("demo data missing: {}", path.display());
    }
    let input = std::fs::read(&path).unwrap();
    let r = morbus(
        &[
            "score",
            path.to_str().unwrap(),
            "--dx",
            "dx*",
            "--age",
            "age",
            "--flags",
        ],
        b"",
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let in_lines: Vec<&[u8]> = input
        .split(|&b| b == b'\n')
        .filter(|l| !l.is_empty())
        .collect();
    let out_lines: Vec<&[u8]> = r
        .stdout
        .split(|&b| b == b'\n')
        .filter(|l| !l.is_empty())
        .collect();
    assert_eq!(in_lines.len(), out_lines.len());
    for (i, o) in in_lines.iter().zip(&out_lines) {
        assert!(o.starts_with(i));
        assert_eq!(o[i.len()], b',');
    }
    let rows = in_lines.len() - 1;
    assert!(
        r.stderr
            .contains(&format!("{rows} rows read, {rows} rows written")),
        "{}",
        r.stderr
    );
}

/// Score columns of an output keyed by a column, as text.
fn scores_by(out: &str, key: &str, first_score: usize) -> Vec<(String, Vec<String>)> {
    let mut rdr = csv::Reader::from_reader(out.as_bytes());
    let k = rdr
        .headers()
        .unwrap()
        .iter()
        .position(|h| h == key)
        .unwrap();
    rdr.records()
        .map(|r| {
            let r = r.unwrap();
            let scores = r.iter().skip(first_score).map(String::from).collect();
            (r.get(k).unwrap().to_string(), scores)
        })
        .collect()
}

#[test]
fn demo_wide_and_long_files_give_the_same_scores() {
    let dir = common::root().join("demo-data");
    let wide = dir.join("episodes.csv");
    let long = dir.join("episodes-long.csv");
    let specs = "charlson:charlson1987,charlson:quan2011,elixhauser,hfrs";
    let w = morbus(
        &[
            "score",
            wide.to_str().unwrap(),
            "--dx",
            "dx*",
            "--index",
            specs,
            "--flags",
        ],
        b"",
    );
    assert_eq!(w.code, 0, "{}", w.stderr);
    let l = morbus(
        &[
            "score",
            long.to_str().unwrap(),
            "--layout",
            "long",
            "--id",
            "episode_id",
            "--dx",
            "code",
            "--index",
            specs,
            "--flags",
        ],
        b"",
    );
    assert_eq!(l.code, 0, "{}", l.stderr);
    let wide_header_len = String::from_utf8_lossy(&std::fs::read(&wide).unwrap())
        .lines()
        .next()
        .unwrap()
        .split(',')
        .count();
    let ws = scores_by(&w.out(), "episode_id", wide_header_len);
    let ls = scores_by(&l.out(), "episode_id", 1);
    assert_eq!(ws.len(), 4000);
    assert_eq!(ws, ls);

    // With a lookback, the wide file and the long file grouped into episodes
    // agree too.
    let w = morbus(
        &[
            "score",
            wide.to_str().unwrap(),
            "--dx",
            "dx*",
            "--index",
            specs,
            "--id",
            "patient_id",
            "--date",
            "admission_date",
            "--lookback",
            "365",
        ],
        b"",
    );
    let l = morbus(
        &[
            "score",
            long.to_str().unwrap(),
            "--layout",
            "long",
            "--id",
            "patient_id",
            "--episode",
            "episode_id",
            "--date",
            "admission_date",
            "--dx",
            "code",
            "--index",
            specs,
            "--lookback",
            "365",
        ],
        b"",
    );
    assert_eq!(w.code, 0, "{}", w.stderr);
    assert_eq!(l.code, 0, "{}", l.stderr);
    let ws = scores_by(&w.out(), "episode_id", wide_header_len);
    let ls = scores_by(&l.out(), "episode_id", 2);
    assert_eq!(ws, ls);
    // Without hierarchies, a lookback adds conditions and removes none.
    let plain = scores_by(
        &morbus(
            &[
                "score",
                wide.to_str().unwrap(),
                "--dx",
                "dx*",
                "--index",
                "charlson:count",
                "--no-hierarchy",
            ],
            b"",
        )
        .out(),
        "episode_id",
        wide_header_len,
    );
    let back = scores_by(
        &morbus(
            &[
                "score",
                wide.to_str().unwrap(),
                "--dx",
                "dx*",
                "--index",
                "charlson:count",
                "--id",
                "patient_id",
                "--date",
                "admission_date",
                "--lookback",
                "365",
                "--no-hierarchy",
            ],
            b"",
        )
        .out(),
        "episode_id",
        wide_header_len,
    );
    let mut raised = 0;
    for ((_, a), (_, b)) in plain.iter().zip(&back) {
        let (a, b): (i64, i64) = (a[0].parse().unwrap(), b[0].parse().unwrap());
        assert!(b >= a, "lookback lowered a count from {a} to {b}");
        raised += (b > a) as usize;
    }
    assert!(
        raised > 100,
        "only {raised} episodes gained from the lookback"
    );
}
