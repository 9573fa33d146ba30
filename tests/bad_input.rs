//! The bad-input matrix: damaged extracts, each generated here, run through
//! `morbus score` with the outcome it must have.
//!
//! - A refused input: the exact exit code and the message (with its line
//!   number where there is one); no provenance file is left behind.
//! - An accepted input: exit 0 and proof that nothing was lost: every record
//!   comes out in order with its bytes untouched and the score columns
//!   appended, the row count and the invalid-code count agree in the summary
//!   line and in the provenance JSON, and, where the case says so, the
//!   scores are the published weights of the codes it holds.
//!
//! Scores use `charlson:charlson1987` (Charlson et al. 1987 weights):
//! myocardial infarction (I21) 1, congestive heart failure (I50) 1,
//! diabetes without complication (E11.9) 1, with complication (E11.2) 2,
//! metastatic solid tumour (C78) 6.

mod common;

use std::io::Write;
use std::process::Command;

use common::TempDir;

/// What a case must do.
enum Expect {
    /// Exit `code` with `message` (and every item of `also`) on stderr.
    Refused {
        code: i32,
        message: &'static str,
        also: &'static [&'static str],
    },
    /// Exit 0, nothing lost.
    Accepted(Accepted),
}

struct Accepted {
    /// The data records as written (without line ends), in order. The
    /// header is the first element.
    records: Vec<Vec<u8>>,
    /// Line end of the output (the header's).
    eol: &'static [u8],
    /// Non-empty diagnosis values that are not ICD-10-shaped.
    invalid: u64,
    /// `charlson_charlson1987` per data record, when checked.
    scores: Option<Vec<&'static str>>,
    /// Further text the summary line must hold.
    summary: &'static [&'static str],
    /// Provenance fields (JSON pointer, value) to check.
    provenance: Vec<(&'static str, serde_json::Value)>,
    /// Long layout: rows read and units out (`records` then holds the
    /// header and the ids out).
    long_units: Option<(u64, u64)>,
}

struct Case {
    name: &'static str,
    /// File name (`.gz` gets compressed unless `raw_file`).
    file: &'static str,
    input: Vec<u8>,
    args: Vec<String>,
    expect: Expect,
}

fn args(a: &[&str]) -> Vec<String> {
    a.iter().map(|s| s.to_string()).collect()
}

fn wide() -> Vec<String> {
    args(&["--dx", "dx*"])
}

fn with(mut base: Vec<String>, more: &[&str]) -> Vec<String> {
    base.extend(more.iter().map(|s| s.to_string()));
    base
}

/// Joins records with a line end after each.
fn lines(records: &[&[u8]], eol: &[u8]) -> Vec<u8> {
    let mut v = Vec::new();
    for r in records {
        v.extend_from_slice(r);
        v.extend_from_slice(eol);
    }
    v
}

fn owned(records: &[&[u8]]) -> Vec<Vec<u8>> {
    records.iter().map(|r| r.to_vec()).collect()
}

fn accepted(records: &[&[u8]], invalid: u64) -> Accepted {
    Accepted {
        records: owned(records),
        eol: b"\n",
        invalid,
        scores: None,
        summary: &[],
        provenance: Vec::new(),
        long_units: None,
    }
}

fn refused(code: i32, message: &'static str) -> Expect {
    Expect::Refused {
        code,
        message,
        also: &[],
    }
}

fn leak(s: String) -> &'static [&'static str] {
    Box::leak(vec![&*Box::leak(s.into_boxed_str())].into_boxed_slice())
}

fn gzip(data: &[u8]) -> Vec<u8> {
    let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::default());
    e.write_all(data).unwrap();
    e.finish().unwrap()
}

/// Every case of the matrix.
fn cases() -> Vec<Case> {
    let mut v = Vec::new();
    let mut add = |name, file, input: Vec<u8>, args, expect| {
        v.push(Case {
            name,
            file,
            input,
            args,
            expect,
        })
    };

    // ---- accepted -----------------------------------------------------
    let r: &[&[u8]] = &[b"id,dx1,dx2", b"1,I21.9,E11.2", b"2,C78.0,"];
    add(
        "clean baseline",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["3", "6"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1,dx2", b"1,I21.9,E11.2", b"2,C78.0,"];
    add(
        "CRLF line ends",
        "in.csv",
        lines(r, b"\r\n"),
        wide(),
        Expect::Accepted(Accepted {
            eol: b"\r\n",
            scores: Some(vec!["3", "6"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1", b"1,I21", b"2,I50.9", b"3,C78"];
    add(
        "mixed LF, CRLF and CR-less last line",
        "in.csv",
        b"id,dx1\n1,I21\r\n2,I50.9\n3,C78".to_vec(),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "1", "6"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1", b"1,I21", b"2,\"I50\r9\"", b"3,C78"];
    add(
        "carriage returns alone as line ends (old Mac), a CR inside quotes",
        "in.csv",
        lines(r, b"\r"),
        wide(),
        Expect::Accepted(Accepted {
            eol: b"\r\n",
            scores: Some(vec!["1", "0", "6"]),
            ..accepted(r, 1)
        }),
    );

    let mut big: Vec<Vec<u8>> = vec![b"id,dx1".to_vec()];
    for i in 0..80_000 {
        big.push(format!("{i},{}", ["I21", "I50.9", "C78"][i % 3]).into_bytes());
    }
    add(
        "1 MB with carriage returns alone, read in several blocks",
        "in.csv",
        lines(&big.iter().map(|x| &x[..]).collect::<Vec<_>>(), b"\r"),
        wide(),
        Expect::Accepted(Accepted {
            records: big,
            eol: b"\r\n",
            provenance: vec![("/codes/read", 80_000.into())],
            ..accepted(&[], 0)
        }),
    );

    let r: &[&[u8]] = &[b"\xef\xbb\xbfage,dx1", b"72,I21"];
    add(
        "byte-order mark before the header",
        "in.csv",
        lines(r, b"\n"),
        with(wide(), &["--age", "age"]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1"]),
            provenance: vec![("/ages/missing", 0.into()), ("/ages/unreadable", 0.into())],
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"\xef\xbb\xbf\"age\",dx1", b"72,I21"];
    add(
        "byte-order mark before a quoted first column name",
        "in.csv",
        lines(r, b"\n"),
        with(wide(), &["--age", "age"]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[
        b"name,dx1",
        b"Ren\xe9e M\xfcller,I21.9",
        b"\"Jos\xe9 Pe\xf1a, jr\",I50",
    ];
    add(
        "Latin-1 names in a pass-through column",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "1"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"pr\xe9nom,dx1", b"Zo\xe9,C78.0"];
    add(
        "non-UTF-8 header name of a pass-through column",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["6"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1,dx2", b"1,I21,I50", b"2,C78,E11.9"];
    add(
        "truncated last line (no line end)",
        "in.csv",
        b"id,dx1,dx2\n1,I21,I50\n2,C78,E11.9".to_vec(),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["2", "7"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1", b"1,I21", b"2,I50"];
    add(
        "blank lines before, between and after rows",
        "in.csv",
        b"id,dx1\n\n\r\n1,I21\n\n\n2,I50\n\n\r\n\n".to_vec(),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "1"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1,dx2,dx3", b"1,,,", b"2, , ,I21", b"3,,C78,"];
    add(
        "empty and blank diagnosis fields",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["0", "1", "6"]),
            provenance: vec![("/codes/read", 2.into())],
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[
        b"id,dx1,dx2",
        b"1,I21.9 Acute MI,I50",
        b"2,C78.0 secondary,",
    ];
    add(
        "codes with descriptions glued on",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "0"]),
            summary: &["'I21.9 Acute MI' (1)", "'C78.0 secondary' (1)"],
            provenance: vec![("/codes/read", 1.into())],
            ..accepted(r, 2)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1,dx2", b"1,I21\"9,I50", b"2,C78,x\"\"y"];
    add(
        "stray quotes inside unquoted fields",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "6"]),
            summary: &["'I21\"9' (1)"],
            ..accepted(r, 2)
        }),
    );

    let r: &[&[u8]] = &[
        b"id,note,dx1",
        b"1,\"two\nlines, and a comma\",I21",
        b"2,\"say \"\"hi\"\"\",I50",
    ];
    add(
        "quoted fields with line breaks, delimiters and doubled quotes",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "1"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx", b"1,\"I21.9,E11.2, C78.0\"", b"2,\"I50,,\""];
    add(
        "several codes in one quoted field with --dx-sep",
        "in.csv",
        lines(r, b"\n"),
        args(&["--dx", "dx", "--dx-sep", ","]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["9", "1"]),
            provenance: vec![("/codes/read", 4.into())],
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1,dx2", b"1,I21\x00,I50", b"2,\x00,C78"];
    add(
        "NUL bytes in diagnosis fields",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "6"]),
            summary: &["'I21\\0' (1)", "'\\0' (1)"],
            ..accepted(r, 2)
        }),
    );

    let r: &[&[u8]] = &[b"id,note,dx1", b"1,a\x00b\x01c\x7f,I21"];
    add(
        "NUL and control bytes in a pass-through column",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id\tdx1\tdx2", b"1\tI21\tE11.2", b"2\t\"C78\t\"\t"];
    add(
        "tab-delimited with --delimiter tab",
        "in.tsv",
        lines(r, b"\n"),
        with(wide(), &["--delimiter", "tab"]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["3", "6"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id;dx1;dx2", b"1;I21,9;E11.2", b"2;C78;"];
    add(
        "semicolon-delimited with --delimiter ';' (decimal comma in a code)",
        "in.csv",
        lines(r, b"\n"),
        with(wide(), &["--delimiter", ";"]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["2", "6"]),
            summary: &["'I21,9' (1)"],
            ..accepted(r, 1)
        }),
    );

    let big_note = format!("1,\"{}\",I21", "Müller, ".repeat(200_000));
    let r: Vec<Vec<u8>> = vec![
        b"id,note,dx1".to_vec(),
        big_note.into_bytes(),
        b"2,,C78".to_vec(),
    ];
    add(
        "a quoted pass-through field over 1 MiB",
        "in.csv",
        lines(&r.iter().map(|x| &x[..]).collect::<Vec<_>>(), b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            records: r,
            scores: Some(vec!["1", "6"]),
            ..accepted(&[], 0)
        }),
    );

    let giant = format!("1,I21{}", "9".repeat(1_200_000));
    let r: Vec<Vec<u8>> = vec![b"id,dx1".to_vec(), giant.into_bytes(), b"2,I50".to_vec()];
    add(
        "a diagnosis field over 1 MiB (invalid, shown cut)",
        "in.csv",
        lines(&r.iter().map(|x| &x[..]).collect::<Vec<_>>(), b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            records: r,
            scores: Some(vec!["0", "1"]),
            summary: leak(format!("'I21{}…' (1)", "9".repeat(61))),
            ..accepted(&[], 1)
        }),
    );

    let n = 10_000;
    let header = format!(
        "id,{}",
        (1..=n)
            .map(|i| format!("dx{i}"))
            .collect::<Vec<_>>()
            .join(",")
    );
    let pool = ["I21.9", "I50.9", "C78.0", "E11.9", "", "N/A"];
    let row = format!(
        "1,{}",
        (0..n)
            .map(|i| pool[i % pool.len()])
            .collect::<Vec<_>>()
            .join(",")
    );
    let r: Vec<Vec<u8>> = vec![header.into_bytes(), row.into_bytes()];
    add(
        "a row with 10,000 diagnosis fields",
        "in.csv",
        lines(&r.iter().map(|x| &x[..]).collect::<Vec<_>>(), b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            records: r,
            scores: Some(vec!["9"]),
            // 10,000 fields cycle through 6 values: 1,667 of the first four
            // each, 1,666 empty and 1,666 'N/A'.
            provenance: vec![("/codes/read", (4 * 1667).into())],
            ..accepted(&[], 1666)
        }),
    );

    let wide_head = format!(
        "dx1,{}",
        (0..100_000)
            .map(|i| format!("c{i}"))
            .collect::<Vec<_>>()
            .join(",")
    );
    let wide_row = format!(
        "I50,{}",
        vec!["abcdefghijklmnopqrstuvwxyz"; 100_000].join(",")
    );
    let r: Vec<Vec<u8>> = vec![wide_head.into_bytes(), wide_row.into_bytes()];
    add(
        "a 2.7 MB line of 100,001 fields",
        "in.csv",
        lines(&r.iter().map(|x| &x[..]).collect::<Vec<_>>(), b"\n"),
        args(&["--dx", "dx1"]),
        Expect::Accepted(Accepted {
            records: r,
            scores: Some(vec!["1"]),
            ..accepted(&[], 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1,dx2"];
    add(
        "header only",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec![]),
            ..accepted(r, 0)
        }),
    );

    add(
        "header only, without a line end",
        "in.csv",
        b"id,dx1,dx2".to_vec(),
        wide(),
        Expect::Accepted(Accepted {
            scores: Some(vec![]),
            ..accepted(&[b"id,dx1,dx2"], 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx1", b"1,I21", b"2,I50"];
    add(
        "gzip input with CRLF line ends",
        "in.csv.gz",
        gzip(&lines(r, b"\r\n")),
        wide(),
        Expect::Accepted(Accepted {
            eol: b"\r\n",
            scores: Some(vec!["1", "1"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[
        b"id,age,dx1",
        b"1,abc,I21",
        b"2,,I50",
        b"3,-4,C78",
        b"4,81.5,",
    ];
    add(
        "unreadable and missing ages (counted)",
        "in.csv",
        lines(r, b"\n"),
        with(wide(), &["--age", "age"]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1", "1", "6", "0"]),
            summary: &["ages missing: 1, unreadable: 2"],
            provenance: vec![("/ages/missing", 1.into()), ("/ages/unreadable", 2.into())],
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[
        b"pid,date,dx1",
        b"p1,2021-01-05,I21",
        b"p1,2021-02-30,I50",
        b"p1,,C78",
        b"p1,2021-03-01,",
    ];
    add(
        "unreadable and missing dates with --lookback (counted)",
        "in.csv",
        lines(r, b"\n"),
        with(
            wide(),
            &[
                "--id",
                "pid",
                "--date",
                "date",
                "--lookback",
                "all",
                "--max-unreadable-dates",
                "100",
            ],
        ),
        Expect::Accepted(Accepted {
            // The episode of 2021-03-01 sees the one of 2021-01-05; the
            // undated ones see only themselves.
            scores: Some(vec!["1", "1", "6", "1"]),
            summary: &["dates missing: 1, unreadable: 1"],
            provenance: vec![
                ("/dates/missing", 1.into()),
                ("/dates/unreadable", 1.into()),
            ],
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[
        b"pid,date,dx1",
        b",2021-01-05,C78",
        b"p1,2021-01-06,I21",
        b",2021-01-07,I50",
    ];
    add(
        "rows without a patient id under --lookback stand alone (counted)",
        "in.csv",
        lines(r, b"\n"),
        with(
            wide(),
            &["--id", "pid", "--date", "date", "--lookback", "all"],
        ),
        Expect::Accepted(Accepted {
            // Without ids the two rows are not one patient's history.
            scores: Some(vec!["6", "1", "1"]),
            summary: &["rows without an id: 2"],
            provenance: vec![("/rows/missing_ids", 2.into())],
            ..accepted(r, 0)
        }),
    );

    add(
        "long layout: rows with an empty id form one unit (counted)",
        "in.csv",
        b"id,dx\np1,I21\n,C78\n  ,I50\np1,E11.2\n".to_vec(),
        args(&["--dx", "dx", "--layout", "long", "--id", "id"]),
        Expect::Accepted(Accepted {
            records: owned(&[b"id", b"p1", b"", b"  "]),
            scores: Some(vec!["3", "6", "1"]),
            summary: &["rows without an id: 2"],
            provenance: vec![("/rows/missing_ids", 2.into()), ("/rows/read", 4.into())],
            long_units: Some((4, 3)),
            ..accepted(&[], 0)
        }),
    );

    let r: &[&[u8]] = &[
        b"note,note,dx1,dx2",
        b"a,b,E11.4\xe2\x80\xa0,G63.2*",
        b"c,d, i21.9 ,c78-",
    ];
    add(
        "duplicated pass-through names; marks, case and spaces around codes",
        "in.csv",
        lines(r, b"\n"),
        wide(),
        Expect::Accepted(Accepted {
            // E11.4 is diabetes with complication (2); G63.2 claims no
            // Charlson condition.
            scores: Some(vec!["2", "7"]),
            ..accepted(r, 0)
        }),
    );

    let r: &[&[u8]] = &[b"id,dx\xe9", b"1,I21"];
    add(
        "non-UTF-8 diagnosis column name matched by a pattern",
        "in.csv",
        lines(r, b"\n"),
        args(&["--dx", "dx*"]),
        Expect::Accepted(Accepted {
            scores: Some(vec!["1"]),
            ..accepted(r, 0)
        }),
    );

    // ---- refused --------------------------------------------------------
    add(
        "0-byte file",
        "in.csv",
        Vec::new(),
        wide(),
        refused(
            1,
            "morbus: error: the input is empty: expected a header line naming the columns",
        ),
    );
    add(
        "only blank lines",
        "in.csv",
        b"\n\r\n\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: the input is empty: expected a header line naming the columns",
        ),
    );
    add(
        "0-byte gzip member",
        "in.csv.gz",
        gzip(b""),
        wide(),
        refused(
            1,
            "morbus: error: the input is empty: expected a header line naming the columns",
        ),
    );
    add(
        "a row with too many fields",
        "in.csv",
        b"id,dx1\n1,I21\n2,I50,extra\n3,C78\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 3: record has 3 fields but the header has 2",
        ),
    );
    add(
        "a row with too few fields after CRLF rows",
        "in.csv",
        b"id,dx1,dx2\r\n1,I21,\r\n2,I50,\r\n3\r\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 4: record has 1 fields but the header has 3",
        ),
    );
    add(
        "a row with too few fields after lone carriage returns",
        "in.csv",
        b"id,dx1\r1,I21\r2,I50\r3\r4,C78\r".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 4: record has 1 fields but the header has 2",
        ),
    );
    add(
        "a row with too many fields after a lone CR among LF lines",
        "in.csv",
        b"id,dx1\n1,I21\r2,I50\n3,C78,x\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 4: record has 3 fields but the header has 2",
        ),
    );
    add(
        "a row with too few fields in the long layout",
        "in.csv",
        b"id,dx\np1,I21\np2\n".to_vec(),
        args(&["--dx", "dx", "--layout", "long", "--id", "id"]),
        refused(
            1,
            "morbus: error: line 3: record has 1 fields but the header has 2",
        ),
    );
    add(
        "a quote left open at the end of the input",
        "in.csv",
        b"id,dx1,dx2\n1,I21,I50\n2,\"C78,I50\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 3: a quoted field opened in this record is never closed: the input ends inside it",
        ),
    );
    add(
        "a quote left open at the end, field count still right",
        "in.csv",
        b"id,dx1\n1,I21\n2,\"C78".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 3: a quoted field opened in this record is never closed",
        ),
    );
    add(
        "a quote left open in the header",
        "in.csv",
        b"id,\"dx1\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 1: a quoted field opened in this record is never closed",
        ),
    );
    add(
        "a quote left open mid-file swallows lines",
        "in.csv",
        b"id,dx1,dx2\n1,I21,I50\n2,\"C78,I50\n3,I21,I50\n4,I50\",x,y\n".to_vec(),
        wide(),
        refused(
            1,
            "morbus: error: line 3: record has 4 fields but the header has 3 (the record runs over lines 3-5: is a quote left open?)",
        ),
    );
    add(
        "a quote left open mid-file, lookback",
        "in.csv",
        b"pid,date,dx1\np1,2020-01-01,\"I21\np1,2020-01-02,I50\n".to_vec(),
        args(&[
            "--dx",
            "dx1",
            "--id",
            "pid",
            "--date",
            "date",
            "--lookback",
            "30",
        ]),
        refused(
            1,
            "morbus: error: line 2: a quoted field opened in this record is never closed",
        ),
    );
    let many: Vec<&[u8]> = [&b"1,I21"[..], b"2,I50"].repeat(500);
    let mut text = b"id,dx1\n".to_vec();
    text.extend(lines(&many, b"\n"));
    let full = gzip(&text);
    add(
        "truncated gzip",
        "in.csv.gz",
        full[..full.len() / 2].to_vec(),
        wide(),
        refused(1, "morbus: error: cannot read input: "),
    );
    let mut corrupt = gzip(&lines(&[b"id,dx1", b"1,I21", b"2,I50"], b"\n"));
    let k = corrupt.len() - 6;
    corrupt[k] ^= 0xff;
    add(
        "gzip with a corrupt checksum",
        "in.csv.gz",
        corrupt,
        wide(),
        refused(1, "morbus: error: cannot read input: corrupt gzip stream"),
    );
    add(
        "gzip magic followed by garbage",
        "in.csv.gz",
        b"\x1f\x8b\x08\x00garbage, not deflate".to_vec(),
        wide(),
        refused(1, "morbus: error: cannot read input: "),
    );
    add(
        "tab-delimited read with the default delimiter",
        "in.csv",
        b"id\tdx1\n1\tI21\n".to_vec(),
        wide(),
        Expect::Refused {
            code: 2,
            message: "morbus: error: diagnosis pattern 'dx*' matches no column",
            also: &["is the delimiter --delimiter 'tab'?"],
        },
    );
    add(
        "semicolon-delimited read with the default delimiter",
        "in.csv",
        b"id;dx1\n1;I21\n".to_vec(),
        args(&["--dx", "dx1"]),
        Expect::Refused {
            code: 2,
            message:
                "morbus: error: diagnosis column 'dx1' not found; columns in the input: id;dx1",
            also: &["is the delimiter --delimiter ';'?"],
        },
    );
    add(
        "duplicated header name asked for as a diagnosis column",
        "in.csv",
        b"id,dx1,dx1\n1,I21,I50\n".to_vec(),
        args(&["--dx", "dx1"]),
        refused(
            2,
            "morbus: error: diagnosis column 'dx1' appears 2 times in the header; rename the duplicates",
        ),
    );
    add(
        "an input column named like an output column",
        "in.csv",
        b"id,dx1,charlson_charlson1987\n1,I21,5\n".to_vec(),
        wide(),
        refused(
            2,
            "morbus: error: output column 'charlson_charlson1987' already exists in the input",
        ),
    );
    add(
        "non-UTF-8 header without the asked column",
        "in.csv",
        b"pr\xe9nom,diag\nZo\xe9,I21\n".to_vec(),
        args(&["--dx", "dx1"]),
        refused(
            2,
            "morbus: error: diagnosis column 'dx1' not found; columns in the input: pr\u{fffd}nom, diag",
        ),
    );

    // ---- refused by --strict --------------------------------------------
    add(
        "--strict: an invalid code",
        "in.csv",
        b"id,dx1,dx2\n1,I21,I50\n2,C78,N/A\n".to_vec(),
        with(wide(), &["--strict"]),
        refused(
            3,
            "morbus: error: line 3: invalid code 'N/A' in column 'dx2' (--strict)",
        ),
    );
    add(
        "--strict: a description glued to a code",
        "in.csv",
        b"id,dx1\r\n1,I21.9 Acute MI\r\n".to_vec(),
        with(wide(), &["--strict"]),
        refused(
            3,
            "morbus: error: line 2: invalid code 'I21.9 Acute MI' in column 'dx1' (--strict)",
        ),
    );
    add(
        "--strict: a NUL byte in a code, shown escaped",
        "in.csv",
        b"id,dx1\n1,I21\n\n2,I5\x000\n".to_vec(),
        with(wide(), &["--strict"]),
        refused(
            3,
            "morbus: error: line 4: invalid code 'I5\\00' in column 'dx1' (--strict)",
        ),
    );
    let giant = format!("id,dx1\n1,I21{}\n", "9".repeat(1_200_000));
    add(
        "--strict: a diagnosis field over 1 MiB, shown cut with its length",
        "in.csv",
        giant.into_bytes(),
        with(wide(), &["--strict"]),
        Expect::Refused {
            code: 3,
            message: "morbus: error: line 2: invalid code 'I21999",
            also: &["9999… (1200003 bytes)' in column 'dx1' (--strict)"],
        },
    );
    add(
        "--strict: an unreadable age",
        "in.csv",
        b"id,age,dx1\n1,72,I21\n2,seventy,I50\n".to_vec(),
        with(wide(), &["--age", "age", "--strict"]),
        refused(
            3,
            "morbus: error: line 3: unreadable age 'seventy' (--strict)",
        ),
    );
    add(
        "--strict: a missing age",
        "in.csv",
        b"id,age,dx1\n1,72,I21\n2,,I50\n".to_vec(),
        with(wide(), &["--age", "age", "--strict"]),
        refused(
            3,
            "morbus: error: line 3: missing age (column 'age' is empty) (--strict)",
        ),
    );
    add(
        "--strict: an unreadable date",
        "in.csv",
        b"pid,date,dx1\np1,2021-01-05,I21\np1,05/01/2021,I50\n".to_vec(),
        args(&[
            "--dx", "dx1", "--id", "pid", "--date", "date", "--lookback", "365", "--strict",
        ]),
        refused(
            3,
            "morbus: error: line 3: unreadable date '05/01/2021' (expected the --date-format, by default YYYY-MM-DD) (--strict)",
        ),
    );
    add(
        "--strict: a missing date",
        "in.csv",
        b"pid,date,dx1\np1,2021-01-05,I21\np1, ,I50\n".to_vec(),
        args(&[
            "--dx",
            "dx1",
            "--id",
            "pid",
            "--date",
            "date",
            "--lookback",
            "all",
            "--strict",
        ]),
        refused(3, "morbus: error: line 3: missing date (--strict)"),
    );
    add(
        "--strict: a row without an id in the long layout",
        "in.csv",
        b"id,dx\np1,I21\n,I50\n".to_vec(),
        args(&["--dx", "dx", "--layout", "long", "--id", "id", "--strict"]),
        refused(
            3,
            "morbus: error: line 3: missing id (column 'id' is empty) (--strict)",
        ),
    );
    add(
        "--strict: a row without a patient id under --lookback",
        "in.csv",
        b"pid,date,dx1\np1,2021-01-05,I21\n,2021-01-06,I50\n".to_vec(),
        args(&[
            "--dx",
            "dx1",
            "--id",
            "pid",
            "--date",
            "date",
            "--lookback",
            "all",
            "--strict",
        ]),
        refused(
            3,
            "morbus: error: line 3: missing id (column 'pid' is empty) (--strict)",
        ),
    );
    add(
        "--strict: a wrong field count is still a data error",
        "in.csv",
        b"id,dx1\n1,I21\n2,I50,x\n".to_vec(),
        with(wide(), &["--strict"]),
        refused(
            1,
            "morbus: error: line 3: record has 3 fields but the header has 2",
        ),
    );
    v
}

/// Runs one case; returns a description of what went wrong, if anything.
fn run(case: &Case, dir: &TempDir) -> Result<(), String> {
    let input = dir.path().join(case.file);
    std::fs::write(&input, &case.input).unwrap();
    let out = dir.path().join("out.csv");
    let prov = dir.path().join("provenance.json");
    let _ = std::fs::remove_file(&out);
    let _ = std::fs::remove_file(&prov);
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_morbus"));
    cmd.arg("score")
        .arg(&input)
        .args(["--index", "charlson:charlson1987", "--threads", "2"])
        .arg("--output")
        .arg(&out)
        .arg("--provenance")
        .arg(&prov)
        .args(&case.args);
    let o = cmd.output().expect("morbus runs");
    let code = o.status.code().unwrap_or(-1);
    let stderr = String::from_utf8_lossy(&o.stderr).into_owned();
    if stderr.contains("panicked") {
        return Err(format!("panicked: {stderr}"));
    }
    match &case.expect {
        Expect::Refused {
            code: want,
            message,
            also,
        } => {
            if code != *want {
                return Err(format!("exit {code}, expected {want}; stderr: {stderr}"));
            }
            for m in std::iter::once(message).chain(also.iter()) {
                if !stderr.contains(m) {
                    return Err(format!("stderr lacks {m:?}: {stderr}"));
                }
            }
            if prov.exists() {
                return Err("a failed run left its provenance file".into());
            }
            Ok(())
        }
        Expect::Accepted(a) => {
            if code != 0 {
                return Err(format!("exit {code}, expected 0; stderr: {stderr}"));
            }
            let output = std::fs::read(&out).unwrap();
            let (rows, units) = match a.long_units {
                Some(ru) => ru,
                None => ((a.records.len() - 1) as u64, (a.records.len() - 1) as u64),
            };
            check_summary(&stderr, rows, units, a)?;
            check_provenance(&prov, rows, units, a)?;
            match a.long_units {
                None => check_pass_through(&output, a)?,
                Some(_) => check_long(&output, a)?,
            }
            if let Some(scores) = &a.scores {
                let got = column(&output, case, "charlson_charlson1987")?;
                if &got != scores {
                    return Err(format!("scores {got:?}, expected {scores:?}"));
                }
            }
            Ok(())
        }
    }
}

fn check_summary(stderr: &str, rows: u64, units: u64, a: &Accepted) -> Result<(), String> {
    let line = stderr
        .lines()
        .find(|l| l.starts_with("morbus: ") && l.contains(" rows read"))
        .ok_or_else(|| format!("no summary line: {stderr}"))?;
    let want = format!("morbus: {rows} rows read, {units} rows written, {units} units scored, ");
    if !line.starts_with(&want) {
        return Err(format!("summary {line:?} does not start with {want:?}"));
    }
    let invalid = format!(" codes read, {} invalid codes", a.invalid);
    if !line.contains(&invalid) {
        return Err(format!("summary {line:?} lacks {invalid:?}"));
    }
    for s in a.summary {
        if !line.contains(s) {
            return Err(format!("summary {line:?} lacks {s:?}"));
        }
    }
    if line.len() > 4096 {
        return Err(format!("summary line of {} bytes", line.len()));
    }
    Ok(())
}

fn check_provenance(
    path: &std::path::Path,
    rows: u64,
    units: u64,
    a: &Accepted,
) -> Result<(), String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("provenance: {e}"))?;
    let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| format!("{e}"))?;
    let mut checks = vec![
        ("/rows/read", serde_json::Value::from(rows)),
        ("/rows/written", units.into()),
        ("/rows/units", units.into()),
        ("/codes/invalid", a.invalid.into()),
    ];
    checks.extend(a.provenance.iter().cloned());
    for (ptr, want) in checks {
        let got = v.pointer(ptr).cloned().unwrap_or(serde_json::Value::Null);
        if got != want {
            return Err(format!("provenance {ptr} is {got}, expected {want}"));
        }
    }
    let top = v["codes"]["top_invalid"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    let listed: u64 = top.iter().filter_map(|t| t["count"].as_u64()).sum();
    if listed != a.invalid {
        return Err(format!(
            "provenance lists {listed} invalid values, expected {}",
            a.invalid
        ));
    }
    for t in &top {
        let s = t["value"].as_str().unwrap_or("");
        if s.len() > 80 {
            return Err(format!(
                "provenance keeps an invalid value of {} bytes",
                s.len()
            ));
        }
    }
    Ok(())
}

/// The output is every record as written, in order, each followed by the
/// delimiter-led score fields and the header's line end; nothing else.
fn check_pass_through(output: &[u8], a: &Accepted) -> Result<(), String> {
    let mut pos = 0;
    let mut appended = None;
    for (i, r) in a.records.iter().enumerate() {
        if !output[pos..].starts_with(r) {
            let shown = String::from_utf8_lossy(&output[pos..(pos + 80).min(output.len())]);
            return Err(format!(
                "record {i} not passed through byte for byte; output has {shown:?}"
            ));
        }
        pos += r.len();
        let eol = output[pos..]
            .windows(a.eol.len())
            .position(|w| w == a.eol)
            .ok_or_else(|| format!("record {i}: no line end after the scores"))?;
        let tail = &output[pos..pos + eol];
        if tail.contains(&b'\n') || tail.contains(&b'"') || tail.is_empty() {
            return Err(format!(
                "record {i}: odd score fields {:?}",
                String::from_utf8_lossy(tail)
            ));
        }
        let fields = tail.iter().filter(|&&b| b == tail[0]).count();
        match appended {
            None => appended = Some(fields),
            Some(n) if n != fields => {
                return Err(format!(
                    "record {i}: {fields} score fields, the header has {n}"
                ))
            }
            _ => {}
        }
        pos += eol + a.eol.len();
    }
    if pos != output.len() {
        return Err(format!(
            "{} bytes after the last record",
            output.len() - pos
        ));
    }
    Ok(())
}

/// Long layout: one line per unit, its id first.
fn check_long(output: &[u8], a: &Accepted) -> Result<(), String> {
    let text = String::from_utf8_lossy(output);
    let ids: Vec<&str> = text
        .lines()
        .map(|l| l.split(',').next().unwrap_or(""))
        .collect();
    let want: Vec<String> = a
        .records
        .iter()
        .map(|r| String::from_utf8_lossy(r).into_owned())
        .collect();
    if ids != want {
        return Err(format!("long ids {ids:?}, expected {want:?}"));
    }
    Ok(())
}

/// A column of the output, read with the `csv` crate.
fn column(output: &[u8], case: &Case, name: &str) -> Result<Vec<String>, String> {
    let delimiter = if case.args.iter().any(|a| a == "tab") {
        b'\t'
    } else if case.args.iter().any(|a| a == ";") {
        b';'
    } else {
        b','
    };
    let mut rdr = csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .flexible(false)
        .from_reader(output);
    let idx = rdr
        .byte_headers()
        .map_err(|e| e.to_string())?
        .iter()
        .position(|h| h == name.as_bytes())
        .ok_or_else(|| format!("no column {name}"))?;
    let mut out = Vec::new();
    for r in rdr.byte_records() {
        let r = r.map_err(|e| e.to_string())?;
        out.push(String::from_utf8_lossy(&r[idx]).into_owned());
    }
    Ok(out)
}

#[test]
fn bad_input_matrix() {
    let cases = cases();
    assert!(cases.len() >= 30, "{} cases", cases.len());
    let mut names = std::collections::HashSet::new();
    let dir = TempDir::new("bad-input");
    let mut failures = Vec::new();
    for case in &cases {
        assert!(names.insert(case.name), "case named twice: {}", case.name);
        if let Err(e) = run(case, &dir) {
            failures.push(format!("{}: {e}", case.name));
        }
    }
    assert!(
        failures.is_empty(),
        "{} of {} cases failed:\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
}

/// The matrix can fail: a case with a wrong expectation is caught.
#[test]
fn the_matrix_catches_a_wrong_expectation() {
    let dir = TempDir::new("bad-input-self");
    let r: &[&[u8]] = &[b"id,dx1", b"1,I21"];
    let wrong = [
        Expect::Accepted(Accepted {
            scores: Some(vec!["2"]),
            ..accepted(r, 0)
        }),
        Expect::Accepted(accepted(r, 1)),
        Expect::Accepted(accepted(&[b"id,dx1", b"1,I21", b"2,I50"], 0)),
        Expect::Accepted(accepted(&[b"id,dx1", b"1,I22"], 0)),
        refused(1, "line 2"),
    ];
    for expect in wrong {
        let case = Case {
            name: "wrong",
            file: "in.csv",
            input: lines(r, b"\n"),
            args: wide(),
            expect,
        };
        assert!(run(&case, &dir).is_err());
    }
}

/// `--strict` stops at a warning of a list loaded with `--lists`, naming
/// the file and line; without `--strict` the warning is printed and the
/// run goes on.
#[test]
fn strict_stops_at_list_warnings() {
    let dir = TempDir::new("strict-lists");
    let lists = dir.path().join("lists");
    std::fs::create_dir_all(&lists).unwrap();
    let list = "list\ttiny\nversion\t1.0\ntitle\tTiny invented list\nsource\tInvented\n\
default_weighting\tpoints\ncondition\talpha\tAlpha\tInvented\n\
code\tI50\talpha\n\
weighting\tpoints\tPoints\tInvented\nweight\tpoints\talpha\t1\n";
    let path = lists.join("tiny.tsv");
    std::fs::write(&path, list).unwrap();
    let input = dir.write("in.csv", "id,dx1\n1,I50.9\n");
    let run = |strict: bool| {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_morbus"));
        cmd.args(["score", &input, "--dx", "dx1", "--index", "tiny", "--lists"])
            .arg(&lists);
        if strict {
            cmd.arg("--strict");
        }
        let o = cmd.output().unwrap();
        (
            o.status.code().unwrap_or(-1),
            String::from_utf8_lossy(&o.stdout).into_owned(),
            String::from_utf8_lossy(&o.stderr).into_owned(),
        )
    };
    let warning = format!("{}:7: warning: code 'I50' has no source", path.display());
    let (code, out, err) = run(false);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains(&warning), "{err}");
    assert!(out.ends_with("1,I50.9,1\n"), "{out}");
    let (code, out, err) = run(true);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains(&format!(
            "morbus: error: code list warning: {warning} (--strict)"
        )),
        "{err}"
    );
    assert!(out.is_empty(), "{out}");
}

/// Inputs and outputs that cannot be opened, read or written: exit 1 (2 for
/// a directory given as the input), with the path and the reason.
#[test]
fn unreadable_and_unwritable_files() {
    let dir = TempDir::new("io-failures");
    let input = dir.write("in.csv", "id,dx1\n1,I21\n");
    let missing = dir.join("no-such.csv");
    let cases: Vec<(Vec<String>, i32, String)> = vec![
        (
            args(&["score", &missing, "--dx", "dx1"]),
            1,
            format!("morbus: error: cannot open {missing}: "),
        ),
        (
            args(&["score", &dir.path().display().to_string(), "--dx", "dx1"]),
            2,
            format!(
                "morbus: error: {} is a directory, not a file",
                dir.path().display()
            ),
        ),
        (
            args(&[
                "score",
                &input,
                "--dx",
                "dx1",
                "--provenance",
                &dir.join("no/dir/p.json"),
            ]),
            1,
            format!(
                "morbus: error: cannot create {}: ",
                dir.join("no/dir/p.json")
            ),
        ),
        (
            args(&[
                "score",
                &input,
                "--dx",
                "dx1",
                "--output",
                &dir.join("no/dir/out.csv"),
            ]),
            1,
            format!(
                "morbus: error: cannot create {}: ",
                dir.join("no/dir/out.csv")
            ),
        ),
    ];
    let mut cases = cases;
    if std::path::Path::new("/dev/full").exists() {
        cases.push((
            args(&["score", &input, "--dx", "dx1", "--output", "/dev/full"]),
            1,
            "morbus: error: cannot write output: ".to_string(),
        ));
    }
    for (a, code, message) in cases {
        let o = Command::new(env!("CARGO_BIN_EXE_morbus"))
            .args(&a)
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(code), "{a:?}: {err}");
        assert!(err.contains(&message), "{a:?}: {err}");
        assert!(!err.contains("panicked"), "{a:?}: {err}");
    }
}

/// Inputs the fuzzer found (fuzz/fuzz_targets/score_csv.rs), scored as the
/// fuzz target scores them.
mod fuzz_regressions {
    use morbus::io::RecordScanner;
    use morbus::lists::Catalogue;
    use morbus::pipeline::{score_stream, ScoreConfig, Summary};
    use morbus::score::{Engine, IndexSpec, ScoreOptions, DEFAULT_INDICES};

    fn score(input: &[u8], threads: usize, block_size: usize) -> (Vec<u8>, Summary) {
        let specs = IndexSpec::parse_many(DEFAULT_INDICES).unwrap();
        let options = ScoreOptions {
            flags: true,
            ..ScoreOptions::default()
        };
        let engine = Engine::new(&Catalogue::builtin(), &specs, options).unwrap();
        let cfg = ScoreConfig {
            dx: vec!["*".into()],
            dx_sep: Some(b' '),
            threads,
            block_size,
            ..ScoreConfig::default()
        };
        let mut out = Vec::new();
        let s = score_stream(&engine, &cfg, input, &mut out).expect("scores");
        (out, s)
    }

    fn records(out: &[u8]) -> u64 {
        let mut n = 0;
        RecordScanner::new(b',')
            .scan::<()>(out, true, |_| {
                n += 1;
                Ok(())
            })
            .unwrap();
        n
    }

    /// crash-55d028fd: a byte-order mark, blank lines, a header of non-UTF-8
    /// bytes, and later a second mark before a blank line. The parser took
    /// a mark off the first record after each reset (every block start), and
    /// then skipped the blank lines after it inside that record: the record
    /// passed through with a line end in it, so the output had a record more
    /// than the rows written, and a field's value depended on where a block
    /// started.
    #[test]
    fn a_mark_then_blank_lines_inside_the_input() {
        let mut input = b"\xef\xbb\xbf".to_vec();
        input.extend_from_slice(&[b'\n'; 8]);
        input.extend_from_slice(&[0x94; 19]);
        input.extend_from_slice(&[b'\n'; 14]);
        input.extend_from_slice(b"\xef\xbb\xbf\n2C?");
        let (out, s) = score(&input, 1, 1024);
        assert_eq!(s.rows_read, 2, "the mark line and '2C?' are rows");
        assert_eq!(records(&out), s.rows_written + 1);
        assert!(out.starts_with(&[0x94; 19]), "{out:?}");
    }

    /// A mark starting a data row is data wherever blocks start: the same
    /// output for any block size and thread count.
    #[test]
    fn a_mark_in_a_data_row_does_not_depend_on_blocks() {
        let mut input = b"\xef\xbb\xbfdx1,dx2\n".to_vec();
        for i in 0..400 {
            if i % 3 == 0 {
                input.extend_from_slice(b"\xef\xbb\xbf");
            }
            input.extend_from_slice(format!("I{:02},E11.{}\n", 20 + i % 10, i % 10).as_bytes());
        }
        let (one, s) = score(&input, 1, 1 << 20);
        assert_eq!(s.rows_read, 400);
        assert_eq!(s.invalid_codes, 134, "every marked I2x is an invalid value");
        for block in [1024, 1500, 2048, 4096] {
            for threads in [1, 2, 3] {
                let (out, t) = score(&input, threads, block);
                assert_eq!(out, one, "block {block}, threads {threads}");
                assert_eq!(t, s);
            }
        }
    }
}
