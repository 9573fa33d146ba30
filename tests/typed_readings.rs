//! Typed values read as typed values: a Parquet input's present-on-admission
//! indicators, diagnosis columns and dates are read from their numbers,
//! true/false and days, never written out as text to be read again, and
//! give what the same extract as text gives.
//!
//! Hand-worked: every row holds I21 (myocardial infarction, one Charlson
//! condition; Quan et al., Med Care 2005;43:1130-9, Table 1, from memory),
//! so `charlson_count` is 1 when the code counts and 0 when it is left
//! out; with a lookback it counts the conditions of the patient's window.
//! Present-on-admission values Y, N, U, W, 1 and blank are those of the
//! ICD-10-CM Official Guidelines for Coding and Reporting, Appendix I
//! (from memory); by default Y, W, 1 and blank count.
#![cfg(feature = "parquet")]

mod common;

use std::path::Path;
use std::sync::Arc;

use arrow_array::{
    ArrayRef, BooleanArray, Float64Array, Int32Array, Int64Array, RecordBatch, StringArray,
};

use common::{column, json_file, morbus, write_parquet, Run, TempDir};

fn parquet(path: &Path, columns: Vec<(&str, ArrayRef)>) {
    let batch = RecordBatch::try_from_iter(columns).unwrap();
    write_parquet(path, &batch, None);
}

fn run(args: &[&str]) -> Run {
    let r = morbus(args);
    assert_eq!(r.code, 0, "{args:?}: {}", r.stderr);
    r
}

fn codes(n: usize) -> ArrayRef {
    Arc::new(StringArray::from(vec![Some("I21"); n]))
}

/// `charlson_count` of a wide run over `input` with `extra` options, and
/// its provenance.
fn counts(dir: &TempDir, input: &Path, extra: &[&str]) -> (Vec<String>, serde_json::Value) {
    let prov = dir.path().join(format!(
        "{}.json",
        input.file_name().unwrap().to_string_lossy()
    ));
    let mut args = vec![
        "score",
        "--dx",
        "dx1",
        "--poa",
        "poa1",
        "--index",
        "charlson:count",
        "--provenance",
        prov.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    args.push(input.to_str().unwrap());
    let r = run(&args);
    (column(&r.stdout, "charlson_count"), json_file(&prov))
}

#[test]
fn typed_indicators_read_as_their_values() {
    let dir = TempDir::new("typed-poa");
    // Whole numbers: 1 counts (exempt), 0 is no value of the guidelines
    // (unrecognised: left out), null is blank (counts).
    let ints = dir.path().join("ints.parquet");
    parquet(
        &ints,
        vec![
            ("dx1", codes(4)),
            (
                "poa1",
                Arc::new(Int64Array::from(vec![Some(1), Some(0), None, Some(1)])),
            ),
        ],
    );
    let text = dir.path().join("ints.csv");
    std::fs::write(&text, "dx1,poa1\nI21,1\nI21,0\nI21,\nI21,1\n").unwrap();
    let (typed, p) = counts(&dir, &ints, &[]);
    assert_eq!(typed, ["1", "0", "1", "1"]);
    let (from_text, q) = counts(&dir, &text, &[]);
    assert_eq!(typed, from_text);
    assert_eq!(p["present_on_admission"], q["present_on_admission"]);
    assert_eq!(p["present_on_admission"]["unrecognised"], 1);

    // Numbers: 1.0 is 1, NaN is missing (blank), 2.5 unrecognised.
    let nums = dir.path().join("nums.parquet");
    parquet(
        &nums,
        vec![
            ("dx1", codes(4)),
            (
                "poa1",
                Arc::new(Float64Array::from(vec![
                    Some(1.0),
                    Some(f64::NAN),
                    Some(2.5),
                    Some(0.0),
                ])),
            ),
        ],
    );
    let (typed, p) = counts(&dir, &nums, &[]);
    assert_eq!(typed, ["1", "1", "0", "0"]);
    assert_eq!(p["present_on_admission"]["unrecognised"], 2);
    let shown: Vec<&str> = p["present_on_admission"]["indicators"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v["value"].as_str().unwrap())
        .collect();
    assert_eq!(shown, ["", "0", "1", "2.5"]);

    // --poa-values naming 0: a typed 0 counts, and 1 (a value of the
    // guidelines not named) does not.
    let (typed, _) = counts(&dir, &ints, &["--poa-values", "Y,0"]);
    assert_eq!(typed, ["0", "1", "0", "0"]);

    // True/false are the words `true` and `false`: unrecognised, unless
    // named in --poa-values, as in a text extract.
    let bools = dir.path().join("bools.parquet");
    parquet(
        &bools,
        vec![
            ("dx1", codes(3)),
            (
                "poa1",
                Arc::new(BooleanArray::from(vec![Some(true), Some(false), None])),
            ),
        ],
    );
    let words = dir.path().join("bools.csv");
    std::fs::write(&words, "dx1,poa1\nI21,true\nI21,false\nI21,\n").unwrap();
    for values in ["Y,W,1,blank", "true"] {
        let (typed, p) = counts(&dir, &bools, &["--poa-values", values]);
        let (from_text, q) = counts(&dir, &words, &["--poa-values", values]);
        assert_eq!(typed, from_text, "{values}");
        assert_eq!(p["present_on_admission"], q["present_on_admission"]);
    }
    let (typed, _) = counts(&dir, &bools, &["--poa-values", "true"]);
    assert_eq!(typed, ["1", "0", "0"]);
}

#[test]
fn numbers_in_a_diagnosis_column_are_invalid_codes_counted_and_shown() {
    let dir = TempDir::new("typed-dx");
    let input = dir.path().join("dx.parquet");
    parquet(
        &input,
        vec![
            ("id", Arc::new(StringArray::from(vec!["a", "b", "c"]))),
            ("dx1", codes(3)),
            (
                "dx2",
                Arc::new(Int64Array::from(vec![None, Some(410), Some(5)])),
            ),
        ],
    );
    let prov = dir.path().join("p.json");
    let r = run(&[
        "score",
        "--dx",
        "dx1,dx2",
        "--index",
        "charlson:count",
        "--provenance",
        prov.to_str().unwrap(),
        input.to_str().unwrap(),
    ]);
    assert_eq!(column(&r.stdout, "charlson_count"), ["1", "1", "1"]);
    let p = json_file(&prov);
    assert_eq!(p["codes"]["read"], 3);
    assert_eq!(p["codes"]["invalid"], 2);
    let shown: Vec<&str> = p["codes"]["top_invalid"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v["value"].as_str().unwrap())
        .collect();
    assert_eq!(shown, ["410", "5"]);
    // --strict stops at the first, naming its row and value.
    let r = morbus(&[
        "score",
        "--dx",
        "dx1,dx2",
        "--strict",
        input.to_str().unwrap(),
    ]);
    assert_ne!(r.code, 0);
    assert!(
        r.stderr.contains("row 2 of") && r.stderr.contains("invalid code '410'"),
        "{}",
        r.stderr
    );
}

#[test]
fn whole_number_dates_read_with_a_packed_pattern() {
    let dir = TempDir::new("typed-dates");
    // Two episodes of one patient 45 days apart, a third 400 days after
    // the second: with a 365-day lookback the second counts two
    // conditions' worth of rows (I21 twice is one condition) ...
    let dx = |codes: [&str; 3]| -> ArrayRef { Arc::new(StringArray::from(codes.to_vec())) };
    let write = |name: &str, dates: Vec<i32>| {
        let p = dir.path().join(name);
        parquet(
            &p,
            vec![
                ("id", Arc::new(Int64Array::from(vec![7, 7, 7]))),
                ("dx1", dx(["I21", "I50", "J44"])),
                ("admitted", Arc::new(Int32Array::from(dates))),
            ],
        );
        p
    };
    let scored = |input: &Path, format: &str| -> Run {
        morbus(&[
            "score",
            "--dx",
            "dx1",
            "--id",
            "id",
            "--date",
            "admitted",
            "--date-format",
            format,
            "--lookback",
            "365",
            "--index",
            "charlson:count",
            input.to_str().unwrap(),
        ])
    };
    // 2024-03-01, 2024-04-15, 2025-05-20.
    let ymd = write("ymd.parquet", vec![20240301, 20240415, 20250520]);
    // The same as %d%m%Y: 01032024 has lost its leading zero.
    let dmy = write("dmy.parquet", vec![1032024, 15042024, 20052025]);
    let text = dir.path().join("dmy.csv");
    std::fs::write(
        &text,
        "id,dx1,admitted\n7,I21,01032024\n7,I50,15042024\n7,J44,20052025\n",
    )
    .unwrap();
    let expected = ["1", "2", "1"];
    for (input, format) in [(&ymd, "%Y%m%d"), (&dmy, "%d%m%Y"), (&text, "%d%m%Y")] {
        let r = scored(input, format);
        assert_eq!(r.code, 0, "{format}: {}", r.stderr);
        assert_eq!(column(&r.stdout, "charlson_count"), expected, "{format}");
    }
    // A number is no ISO date: every date unreadable stops the run, showing
    // the values as written.
    let r = scored(&ymd, "%Y-%m-%d");
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("20240301"), "{}", r.stderr);
}
