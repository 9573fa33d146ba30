//! Values that could give a quietly wrong number (issue: "no silent wrong
//! numbers"): present-on-admission indicators, unreadable and ambiguous
//! dates, date patterns, ages past any plausible range, list weights whose
//! sums could leave the exact-decimal range. Each case gives its exact
//! message and exit code; accepted input is checked for nothing lost (every
//! input record passed through byte for byte, in order).
//!
//! Weights used in the hand-worked scores, Charlson et al., J Chronic Dis
//! 1987;40:373-83 (from memory, as in `code-lists/charlson.tsv`):
//! myocardial infarction 1, congestive heart failure 1, diabetes with
//! chronic complication 2, metastatic solid tumour 6. Age points, Charlson
//! et al., J Clin Epidemiol 1994;47:1245-51 (from memory): 80 and over +4.

mod common;

use std::process::Command;

use common::TempDir;

/// The result of one `morbus` run on an input file.
struct Out {
    code: i32,
    stdout: Vec<u8>,
    stderr: String,
    provenance: Option<serde_json::Value>,
}

/// Runs `morbus CMD INPUT ARGS --provenance P` with `input` written to a
/// file named `name`.
fn run_on(cmd: &str, name: &str, input: &[u8], args: &[&str]) -> Out {
    let dir = TempDir::new("values");
    let path = dir.path().join(name);
    std::fs::write(&path, input).unwrap();
    let prov = dir.path().join("provenance.json");
    let mut c = Command::new(env!("CARGO_BIN_EXE_morbus"));
    c.arg(cmd).arg(&path).args(args);
    if cmd == "score" {
        c.arg("--provenance").arg(&prov);
    }
    let o = c.output().expect("morbus runs");
    let stderr = String::from_utf8_lossy(&o.stderr).into_owned();
    assert!(!stderr.contains("panicked"), "{stderr}");
    Out {
        code: o.status.code().unwrap_or(-1),
        stdout: o.stdout,
        stderr,
        provenance: std::fs::read_to_string(&prov)
            .ok()
            .map(|t| serde_json::from_str(&t).unwrap()),
    }
}

fn score(input: &str, args: &[&str]) -> Out {
    run_on("score", "in.csv", input.as_bytes(), args)
}

/// Exit `code` and `message` as one line of standard error.
fn refused(o: &Out, code: i32, message: &str) {
    assert_eq!(o.code, code, "stderr: {}", o.stderr);
    assert!(
        o.stderr.lines().any(|l| l == message),
        "expected the line {message:?}; stderr: {}",
        o.stderr
    );
    assert!(
        o.provenance.is_none(),
        "a failed run left a provenance file"
    );
}

/// Exit 0, and the output is every input record, byte for byte and in
/// order, each followed by score fields (nothing lost).
fn accepted(o: &Out, input: &str) {
    assert_eq!(o.code, 0, "stderr: {}", o.stderr);
    let out = String::from_utf8(o.stdout.clone()).unwrap();
    let lines: Vec<&str> = out.lines().collect();
    let records: Vec<&str> = input.lines().collect();
    assert_eq!(lines.len(), records.len(), "{out}");
    for (l, r) in lines.iter().zip(&records) {
        assert!(
            l.starts_with(r) && l[r.len()..].starts_with(','),
            "record {r:?} not passed through: {l:?}"
        );
    }
}

/// The summary line of a run.
fn summary(o: &Out) -> &str {
    o.stderr
        .lines()
        .find(|l| l.starts_with("morbus: ") && l.contains(" rows read"))
        .unwrap_or_else(|| panic!("no summary: {}", o.stderr))
}

/// Values of an output column (CSV).
fn col(o: &Out, name: &str) -> Vec<String> {
    common::column(&String::from_utf8_lossy(&o.stdout), name)
}

const CHARLSON: &[&str] = &["--index", "charlson:charlson1987"];

fn with<'a>(a: &[&'a str], b: &[&'a str]) -> Vec<&'a str> {
    a.iter().chain(b).copied().collect()
}

// ---- present on admission ------------------------------------------------

/// Wide layout: `poa1` belongs to `dx1`, `poa2` to `dx2`. Defaults: Y, W,
/// 1 and blank count; N and U do not; `E` is none of the guidelines'
/// values.
const WIDE_POA: &str = "id,dx1,dx2,poa1,poa2
1,I21.9,E11.2,Y,N
2,I50.9,C78.0,,1
3,I21,I50,E,u
4,I21,,W,
";

#[test]
fn wide_poa_pairs_columns_in_order() {
    let o = score(WIDE_POA, &with(CHARLSON, &["--dx", "dx*", "--poa", "poa*"]));
    accepted(&o, WIDE_POA);
    // 1: I21.9 (Y) counts 1, E11.2 (N) does not. 2: I50.9 (blank, exempt
    // by convention) 1 + C78.0 ('1', exempt) 6. 3: 'E' unrecognised and
    // 'u' (U) do not count. 4: I21 (W) 1; dx2 empty, its blank is not read.
    assert_eq!(col(&o, "charlson_charlson1987"), ["1", "7", "0", "1"]);
    // Counts by value, most frequent first, ties in byte order.
    assert!(
        summary(&o).ends_with(
            "; present-on-admission indicators: blank 1, '1' 1, 'E' 1, 'N' 1, 'W' 1, 'Y' 1, 'u' 1; unrecognised present-on-admission indicators: 1 (their codes count as not present on admission); codes not present on admission left out: 3"
        ),
        "{}",
        summary(&o)
    );
    let p = o.provenance.unwrap();
    let poa = &p["present_on_admission"];
    assert_eq!(poa["columns"], "poa*");
    assert_eq!(
        poa["values_counting"],
        serde_json::json!(["Y", "W", "1", "BLANK"])
    );
    assert!(poa["rule"].as_str().unwrap().contains("Appendix I"));
    assert_eq!(poa["unrecognised"], 1);
    let by_value: u64 = poa["indicators"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v["count"].as_u64().unwrap())
        .sum();
    // One indicator per non-empty diagnosis field: 7.
    assert_eq!(by_value, 7);
    assert_eq!(p["excluded"]["not_on_admission"], 3);
}

#[test]
fn the_summary_counts_indicators_by_value() {
    let o = score(WIDE_POA, &with(CHARLSON, &["--dx", "dx*", "--poa", "poa*"]));
    let s = summary(&o);
    for part in [
        "present-on-admission indicators: ",
        "'E' 1",
        "'N' 1",
        "'W' 1",
        "'Y' 1",
        "'u' 1",
        "'1' 1",
        "blank 1",
        "; unrecognised present-on-admission indicators: 1 (their codes count as not present on admission)",
        "; codes not present on admission left out: 3",
    ] {
        assert!(s.contains(part), "{part:?} not in {s}");
    }
}

#[test]
fn poa_values_can_say_otherwise() {
    // Only Y counts: the blank and '1' of row 2 and the W of row 4 no longer do.
    let o = score(
        WIDE_POA,
        &with(
            CHARLSON,
            &common::words("--dx dx* --poa poa* --poa-values Y", &[]),
        ),
    );
    accepted(&o, WIDE_POA);
    assert_eq!(col(&o, "charlson_charlson1987"), ["1", "0", "0", "0"]);
    // 'blank' names the empty field; 'E' made a counting value is no longer
    // unrecognised.
    let o = score(
        WIDE_POA,
        &with(
            CHARLSON,
            &common::words("--dx dx* --poa poa* --poa-values blank,e", &[]),
        ),
    );
    accepted(&o, WIDE_POA);
    assert_eq!(col(&o, "charlson_charlson1987"), ["0", "1", "1", "0"]);
    assert!(!summary(&o).contains("unrecognised"), "{}", summary(&o));
}

#[test]
fn wide_poa_count_mismatch_is_a_usage_error() {
    let o = score(WIDE_POA, &["--dx", "dx*", "--poa", "poa1"]);
    refused(
        &o,
        2,
        "morbus: error: --poa 'poa1' names 1 present-on-admission columns (poa1) but --dx names 2 diagnosis columns (dx1, dx2); in the wide layout they pair in order, one each",
    );
    let o = run_on(
        "explain",
        "in.csv",
        WIDE_POA.as_bytes(),
        &["--dx", "dx1", "--poa", "poa*"],
    );
    refused(
        &o,
        2,
        "morbus: error: --poa 'poa*' names 2 present-on-admission columns (poa1, poa2) but --dx names 1 diagnosis columns (dx1); in the wide layout they pair in order, one each",
    );
    let o = run_on(
        "compare",
        "in.csv",
        WIDE_POA.as_bytes(),
        &["--dx", "dx*", "--poa", "poa2", "--outcome", "id"],
    );
    refused(
        &o,
        2,
        "morbus: error: --poa 'poa2' names 1 present-on-admission columns (poa2) but --dx names 2 diagnosis columns (dx1, dx2); in the wide layout they pair in order, one each",
    );
    let o = score(WIDE_POA, &["--dx", "dx*", "--poa", "dx1,poa2"]);
    refused(
        &o,
        2,
        "morbus: error: column 'dx1' is named by both --poa and --dx",
    );
}

#[test]
fn strict_stops_at_an_unrecognised_indicator() {
    let o = score(
        WIDE_POA,
        &with(CHARLSON, &["--dx", "dx*", "--poa", "poa*", "--strict"]),
    );
    assert_eq!(o.code, 3);
    assert!(o.stderr.contains(
        "morbus: error: line 4: unrecognised present-on-admission value 'E' (not Y, N, U, W, 1, blank or one of --poa-values) in column 'poa1' (--strict)"
    ), "{}", o.stderr);
    // The long layout, the same message with its column.
    let long = "id,code,flag\np1,I21,Y\np1,I50,Q\n";
    let o = score(
        long,
        &[
            "--layout", "long", "--id", "id", "--dx", "code", "--poa", "flag", "--strict",
        ],
    );
    assert_eq!(o.code, 3);
    assert!(o.stderr.contains(
        "morbus: error: line 3: unrecognised present-on-admission value 'Q' (not Y, N, U, W, 1, blank or one of --poa-values) in column 'flag' (--strict)"
    ), "{}", o.stderr);
}

#[test]
fn poa_applies_to_the_episode_being_scored_only_long() {
    // p1: episode e1 (January) I21 with N, episode e2 (March) I50 with Y.
    // e1: I21 left out (N) -> 0. e2: I50 (Y) 1, and I21 from the earlier
    // episode counts regardless of its indicator -> 2.
    let long = "pid,ep,date,code,poa
p1,e1,2024-01-10,I21,N
p1,e2,2024-03-01,I50,Y
";
    let o = score(
        long,
        &with(
            CHARLSON,
            &common::words(
                "--layout long --id pid --episode ep --date date --lookback 365 \
                 --dx code --poa poa",
                &[],
            ),
        ),
    );
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert_eq!(col(&o, "ep"), ["e1", "e2"]);
    assert_eq!(col(&o, "charlson_charlson1987"), ["0", "2"]);
    // Without the lookback the earlier code does not reach e2.
    let o = score(
        long,
        &with(
            CHARLSON,
            &common::words(
                "--layout long --id pid --episode ep --dx code --poa poa",
                &[],
            ),
        ),
    );
    assert_eq!(col(&o, "charlson_charlson1987"), ["0", "1"]);
}

#[test]
fn poa_applies_to_the_episode_being_scored_only_wide() {
    // Row 1 (January): I21 with N; row 2 (March): I50 with Y, C78.0 with U.
    // Row 1 scores 0; row 2: I50 1 + I21 of row 1 (regardless of its
    // indicator) 1; C78.0 (U) left out -> 2.
    let wide = "pid,date,dx1,dx2,poa1,poa2
p1,2024-01-10,I21,,N,
p1,2024-03-01,I50,C78.0,Y,U
";
    let args = with(
        CHARLSON,
        &common::words(
            "--id pid --date date --lookback 365 --dx dx* --poa poa*",
            &[],
        ),
    );
    let o = score(wide, &args);
    accepted(&o, wide);
    assert_eq!(col(&o, "charlson_charlson1987"), ["0", "2"]);
    // explain gives each code's status.
    let o = run_on("explain", "in.csv", wide.as_bytes(), &args);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let text = String::from_utf8_lossy(&o.stdout);
    let statuses: Vec<String> = common::column(&text, "status");
    let codes: Vec<String> = common::column(&text, "code");
    let rows: Vec<String> = common::column(&text, "row");
    let got: Vec<(String, String, String)> = rows
        .into_iter()
        .zip(codes)
        .zip(statuses)
        .map(|((r, c), s)| (r, c, s))
        .filter(|(_, _, s)| !s.starts_with("total"))
        .collect();
    let want = [
        ("1", "I21", "excluded:not_present_on_admission"),
        ("2", "I50", "counted"),
        ("2", "C780", "excluded:not_present_on_admission"),
        ("2", "I21", "counted"),
    ];
    for w in want {
        assert!(
            got.iter()
                .any(|g| (g.0.as_str(), g.1.as_str(), g.2.as_str()) == w),
            "{w:?} not in {got:?}"
        );
    }
}

#[test]
fn an_extract_without_indicators_is_not_scored_zero() {
    // Every indicator blank (a site that records none): blank counts, so
    // the scores equal those of the run without --poa.
    let wide = "id,dx1,dx2,poa1,poa2\n1,I21,C78.0,,\n2,I50,,,\n";
    let with_poa = score(wide, &with(CHARLSON, &["--dx", "dx*", "--poa", "poa*"]));
    let without = score(wide, &with(CHARLSON, &["--dx", "dx*"]));
    accepted(&with_poa, wide);
    assert_eq!(col(&with_poa, "charlson_charlson1987"), ["7", "1"]);
    assert_eq!(
        col(&with_poa, "charlson_charlson1987"),
        col(&without, "charlson_charlson1987")
    );
}

// ---- dates -----------------------------------------------------------------

/// `n` episodes of one patient with ISO dates, of which the last
/// `unreadable` are written day first.
fn dated(n: usize, unreadable: usize) -> String {
    let mut s = String::from("pid,date,dx1\n");
    for i in 0..n {
        let day = 1 + i % 28;
        let month = 1 + (i / 28) % 12;
        if i >= n - unreadable {
            s.push_str(&format!("p1,{day:02}/{month:02}/2023,I21\n"));
        } else {
            s.push_str(&format!("p1,2023-{month:02}-{day:02},I21\n"));
        }
    }
    s
}

const LOOKBACK: &[&str] = &[
    "--dx",
    "dx1",
    "--id",
    "pid",
    "--date",
    "date",
    "--lookback",
    "365",
];

#[test]
fn exactly_one_percent_of_unreadable_dates_passes() {
    let input = dated(100, 1);
    let o = score(&input, LOOKBACK);
    accepted(&o, &input);
    let s = summary(&o);
    assert!(
        s.contains("; dates missing: 0, unreadable: 1 (e.g. '16/04/2023'; expected %Y-%m-%d) (those episodes scored from their own codes alone)"),
        "{s}"
    );
    let p = o.provenance.unwrap();
    assert_eq!(p["dates"]["unreadable"], 1);
    assert_eq!(
        p["dates"]["unreadable_examples"],
        serde_json::json!(["16/04/2023"])
    );
    assert_eq!(p["dates"]["max_unreadable_percent"], 1.0);
}

#[test]
fn just_over_one_percent_stops() {
    // 2 of 199: 1.005%.
    let input = dated(199, 2);
    let o = score(&input, LOOKBACK);
    refused(
        &o,
        1,
        "morbus: error: 2 of 199 episodes with a date (1.01%) have an unreadable date, more than the 1% allowed by --max-unreadable-dates; e.g. '02/08/2023', '03/08/2023' (expected %Y-%m-%d); give the dates' format with --date-format, or raise --max-unreadable-dates",
    );
    assert!(o.stdout.is_empty());
    // The limit is an option.
    let o = score(&input, &with(LOOKBACK, &["--max-unreadable-dates", "2"]));
    accepted(&o, &input);
    // explain reads dates the same way.
    let o = run_on("explain", "in.csv", input.as_bytes(), LOOKBACK);
    assert_eq!(o.code, 1, "{}", o.stderr);
    assert!(o.stderr.contains("2 of 199 episodes with a date (1.01%)"));
    let o = score(&input, &with(LOOKBACK, &["--max-unreadable-dates", "x"]));
    refused(
        &o,
        2,
        "morbus: error: --max-unreadable-dates takes a percentage from 0 to 100 (e.g. 1 or 0.5), not 'x'",
    );
}

#[test]
fn every_date_in_another_format_stops_the_run() {
    // Before, this exit 0 with every episode scored alone.
    let input = "pid,date,dx1\np1,05/01/2021,I21\np1,06/01/2021,I50\n";
    let o = score(input, LOOKBACK);
    refused(
        &o,
        1,
        "morbus: error: 2 of 2 episodes with a date (100.00%) have an unreadable date, more than the 1% allowed by --max-unreadable-dates; e.g. '05/01/2021', '06/01/2021' (expected %Y-%m-%d); give the dates' format with --date-format, or raise --max-unreadable-dates",
    );
}

#[test]
fn day_month_order_left_open_is_said() {
    // Every date has a day of 12 or less: read day first or month first,
    // both are dates.
    let input = "pid,date,dx1\np1,03/04/2024,I21\np1,05/06/2024,I50\np1,07/07/2024,I10\n";
    let args = with(LOOKBACK, &["--date-format", "%d/%m/%Y"]);
    let o = score(input, &args);
    accepted(&o, input);
    assert!(summary(&o).contains(
        "; warning: 2 of 3 dates read would also be valid dates with day and month swapped, and none proves the order of %d/%m/%Y (a day over 12): check --date-format"
    ), "{}", summary(&o));
    let p = o.provenance.unwrap();
    assert_eq!(p["dates"]["read"], 3);
    assert_eq!(p["dates"]["day_month_either"], 2);
    assert_eq!(p["dates"]["day_month_proven"], 0);
    // One date with a day over 12 proves the order: no warning.
    let input = "pid,date,dx1\np1,03/04/2024,I21\np1,25/06/2024,I50\n";
    let o = score(input, &args);
    accepted(&o, input);
    assert!(!summary(&o).contains("warning"), "{}", summary(&o));
    // ISO dates say nothing about it.
    let input = "pid,date,dx1\np1,2024-04-03,I21\n";
    let o = score(input, LOOKBACK);
    assert!(!summary(&o).contains("warning"), "{}", summary(&o));
}

#[test]
fn a_day_month_swap_shows_as_unreadable_dates() {
    // Month-first dates read with a day-first format: 13/.. and later are
    // not dates, so they are unreadable and the run stops instead of
    // reading the rest with day and month swapped.
    let input = "pid,date,dx1\np1,01/02/2024,I21\np1,01/13/2024,I50\np1,03/25/2024,I10\n";
    let o = score(input, &with(LOOKBACK, &["--date-format", "%d/%m/%Y"]));
    refused(
        &o,
        1,
        "morbus: error: 2 of 3 episodes with a date (66.67%) have an unreadable date, more than the 1% allowed by --max-unreadable-dates; e.g. '01/13/2024', '03/25/2024' (expected %d/%m/%Y); give the dates' format with --date-format, or raise --max-unreadable-dates",
    );
}

#[test]
fn a_date_pattern_with_a_repeated_directive_is_refused() {
    let input = "pid,date,dx1\np1,2024-01-01,I21\n";
    let o = score(input, &with(LOOKBACK, &["--date-format", "%d/%m/%d/%Y"]));
    refused(
        &o,
        2,
        "morbus: error: --date-format '%d/%m/%d/%Y' names %d twice; give each of %Y, %m (or %b) and %d once",
    );
    let o = score(input, &with(LOOKBACK, &["--date-format", "%d %b %m %Y"]));
    refused(
        &o,
        2,
        "morbus: error: --date-format '%d %b %m %Y' names the month twice (%b and %m); give each of %Y, %m (or %b) and %d once",
    );
}

#[test]
fn too_few_digits_for_a_packed_pattern_are_unreadable() {
    // 2024011 has seven digits: before, %Y%m%d read it as 2024-01-01.
    let input = "pid,date,dx1\np1,20240110,I21\np1,2024011,I50\n";
    let args = with(LOOKBACK, &["--date-format", "%Y%m%d", "--strict"]);
    let o = score(input, &args);
    assert_eq!(o.code, 3);
    assert!(o.stderr.contains(
        "morbus: error: line 3: unreadable date '2024011' (expected the --date-format, by default YYYY-MM-DD) (--strict)"
    ), "{}", o.stderr);
}

// ---- ages ------------------------------------------------------------------

#[test]
fn ages_past_130_are_unreadable() {
    // 4294967366 is 2^32 + 70: read with wrapping arithmetic it was 70.
    let input = "id,age,dx1\n1,4294967366,I21\n2,130,I21\n3,131,I21\n4,99999999999,I21\n";
    let o = score(input, &with(CHARLSON, &["--dx", "dx1", "--age", "age"]));
    accepted(&o, input);
    // 130: I21 1 + 4 age points (80 and over).
    assert_eq!(col(&o, "charlson_charlson1987_age"), ["", "5", "", ""]);
    assert!(
        summary(&o).contains("; ages missing: 0, unreadable: 3"),
        "{}",
        summary(&o)
    );
    let o = score(
        input,
        &with(CHARLSON, &["--dx", "dx1", "--age", "age", "--strict"]),
    );
    assert_eq!(o.code, 3);
    assert!(
        o.stderr
            .contains("morbus: error: line 2: unreadable age '4294967366' (--strict)"),
        "{}",
        o.stderr
    );
}

#[cfg(feature = "parquet")]
#[test]
fn parquet_ages_past_130_are_unreadable() {
    use arrow_array::{ArrayRef, Int64Array, RecordBatch, StringArray};
    use std::sync::Arc;
    let dir = TempDir::new("values-parquet");
    let path = dir.path().join("ages.parquet");
    let batch = RecordBatch::try_from_iter([
        (
            "age",
            Arc::new(Int64Array::from(vec![4_294_967_366, 130, 131])) as ArrayRef,
        ),
        (
            "dx1",
            Arc::new(StringArray::from(vec!["I21", "I21", "I21"])) as ArrayRef,
        ),
    ])
    .unwrap();
    common::write_parquet(&path, &batch, None);
    let r = common::morbus(&[
        "score",
        path.to_str().unwrap(),
        "--dx",
        "dx1",
        "--age",
        "age",
        "--index",
        "charlson:charlson1987",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(
        common::column(&r.stdout, "charlson_charlson1987_age"),
        ["", "5", ""]
    );
    assert!(r.stderr.contains("; ages missing: 0, unreadable: 2"));
}

// ---- weights past the exact-decimal range ---------------------------------

/// An invented list of `n` conditions, each with one code and a weight of
/// 999,999,999,999.9999 points (the largest a weight may be written with).
fn heavy_list(n: usize) -> String {
    let mut s = String::from(
        "list\theavy\nversion\t1\ntitle\tInvented heavy list\nsource\tInvented for tests\n",
    );
    let code = |k: usize| format!("{}{:02}", (b'A' + (k / 100) as u8) as char, k % 100);
    for k in 0..n {
        s.push_str(&format!("condition\tc{k}\tC{k}\tInvented\n"));
        s.push_str(&format!("code\t{}\tc{k}\tInvented\n", code(k)));
    }
    s.push_str("weighting\tbig\tBig\tInvented\n");
    for k in 0..n {
        s.push_str(&format!("weight\tbig\tc{k}\t999999999999.9999\n"));
    }
    s
}

#[test]
fn weights_that_can_sum_past_the_range_are_refused() {
    // 922 weights of 9,999,999,999,999,999 units sum to
    // 9,219,999,999,999,999,078 <= i64::MAX (9,223,372,036,854,775,807);
    // 923 sum to 9,229,999,999,999,999,077 > i64::MAX.
    let dir = TempDir::new("values-lists");
    let ok = dir.write("heavy.tsv", &heavy_list(922));
    let r = common::morbus(&["lists", "check", &ok]);
    assert_eq!(r.code, 0, "{}", r.stdout);

    let bad_dir = dir.path().join("bad");
    std::fs::create_dir_all(&bad_dir).unwrap();
    let bad = bad_dir.join("heavy.tsv");
    std::fs::write(&bad, heavy_list(923)).unwrap();
    let bad = bad.display().to_string();
    let r = common::morbus(&["lists", "check", &bad]);
    assert_eq!(r.code, 2, "{}", r.stdout);
    let line = 4 + 2 * 923 + 1;
    let msg = format!(
        "{bad}:{line}: error: weighting 'big': its positive weights and age points can sum to 922999999999999.9077 points, past the exact-decimal range of a score (±922337203685477 points); use smaller weights"
    );
    assert!(r.stdout.lines().any(|l| l == msg), "{}", r.stdout);
    // The loader refuses it too.
    let input = "id,dx1\n1,A00\n";
    let o = score(
        input,
        &[
            "--dx",
            "dx1",
            "--lists",
            bad_dir.to_str().unwrap(),
            "--index",
            "heavy",
        ],
    );
    assert_eq!(o.code, 2, "{}", o.stderr);
    assert!(
        o.stderr
            .contains("its positive weights and age points can sum to 922999999999999.9077 points"),
        "{}",
        o.stderr
    );
}

#[test]
fn a_score_at_the_edge_of_the_range_is_exact() {
    // Every one of the 922 conditions present: the score is the exact sum.
    let dir = TempDir::new("values-edge");
    std::fs::create_dir_all(dir.path().join("lists")).unwrap();
    dir.write("lists/heavy.tsv", &heavy_list(922));
    let mut input = String::from("id,code\n");
    for k in 0..922 {
        input.push_str(&format!(
            "1,{}{:02}\n",
            (b'A' + (k / 100) as u8) as char,
            k % 100
        ));
    }
    let o = score(
        &input,
        &[
            "--layout",
            "long",
            "--id",
            "id",
            "--dx",
            "code",
            "--lists",
            &dir.join("lists"),
            "--index",
            "heavy",
        ],
    );
    assert_eq!(o.code, 0, "{}", o.stderr);
    // 922 x 999,999,999,999.9999 = 921,999,999,999,999.9078
    assert_eq!(col(&o, "heavy_big"), ["921999999999999.9078"]);
}

#[cfg(feature = "parquet")]
#[test]
fn parquet_wide_poa_reads_the_paired_columns() {
    use arrow_array::{ArrayRef, RecordBatch, StringArray};
    use std::sync::Arc;
    // WIDE_POA as Parquet text columns (empty fields null).
    let text = |v: [&str; 4]| {
        Arc::new(StringArray::from(
            v.iter()
                .map(|s| (!s.is_empty()).then_some(*s))
                .collect::<Vec<_>>(),
        )) as ArrayRef
    };
    let batch = RecordBatch::try_from_iter([
        ("id", text(["1", "2", "3", "4"])),
        ("dx1", text(["I21.9", "I50.9", "I21", "I21"])),
        ("dx2", text(["E11.2", "C78.0", "I50", ""])),
        ("poa1", text(["Y", "", "E", "W"])),
        ("poa2", text(["N", "1", "u", ""])),
    ])
    .unwrap();
    let dir = TempDir::new("values-parquet-poa");
    let path = dir.path().join("wide.parquet");
    common::write_parquet(&path, &batch, None);
    let bytes = std::fs::read(&path).unwrap();
    // explain reads only the columns the run uses (the paired ones here).
    let o = run_on(
        "explain",
        "wide.parquet",
        &bytes,
        &with(CHARLSON, &["--dx", "dx*", "--poa", "poa*"]),
    );
    assert_eq!(o.code, 0, "{}", o.stderr);
    let text = String::from_utf8_lossy(&o.stdout);
    let status = common::column(&text, "status");
    let weight = common::column(&text, "weight");
    let totals: Vec<&str> = status
        .iter()
        .zip(&weight)
        .filter(|(s, _)| s.as_str() == "total")
        .map(|(_, w)| w.as_str())
        .collect();
    // As the CSV run: 1, 7, 0, 1.
    assert_eq!(totals, ["1", "7", "0", "1"]);
    let o = run_on(
        "score",
        "wide.parquet",
        &bytes,
        &with(CHARLSON, &["--dx", "dx*", "--poa", "poa*"]),
    );
    assert_eq!(col(&o, "charlson_charlson1987"), ["1", "7", "0", "1"]);
}

#[test]
fn a_field_indicator_covers_every_code_of_a_split_field() {
    // I21 (1) and C78.0 (6) share one field and one indicator: N leaves both
    // out, Y counts both. One indicator per field is counted.
    let input = "id,dx1,poa1\n1,I21|C78.0,N\n2,I21|C78.0,Y\n";
    let o = score(
        input,
        &with(
            CHARLSON,
            &common::words("--dx dx1 --dx-sep | --poa poa*", &[]),
        ),
    );
    accepted(&o, input);
    assert_eq!(col(&o, "charlson_charlson1987"), ["0", "7"]);
    assert!(
        summary(&o).ends_with(
            "; present-on-admission indicators: 'N' 1, 'Y' 1; codes not present on admission left out: 2"
        ),
        "{}",
        summary(&o)
    );
}
