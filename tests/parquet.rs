//! Parquet in and out: every command gives on a Parquet extract what it
//! gives on the same extract as CSV (the CSV path is the reference, checked
//! against published values in tests/published.rs), rows and their order
//! are kept, a Parquet input's own columns come out of a Parquet output
//! untouched (types, values, nulls), score columns are typed, and problems
//! are reported with the row.
//!
//! The extracts are the invented demo data, written here as Parquet with
//! typed columns (dates as dates, integer ids, a dictionary-encoded column,
//! nulls for empty fields), and the same values written as CSV.

#![cfg(feature = "parquet")]

mod common;

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::builder::{Date32Builder, Int64Builder, Int8Builder, ListBuilder, StringBuilder};
use arrow_array::cast::AsArray;
use arrow_array::types::Int32Type;
use arrow_array::{Array, ArrayRef, DictionaryArray, LargeStringArray, RecordBatch, StringArray};
use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use common::{column, morbus, root, write_parquet, TempDir};

/// The records of a CSV file (header first).
fn records(path: &Path) -> Vec<Vec<String>> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_path(path)
        .unwrap();
    rdr.records()
        .map(|r| r.unwrap().iter().map(str::to_string).collect())
        .collect()
}

/// How a test extract types a column in its Parquet form.
#[derive(Clone, Copy, PartialEq)]
enum Kind {
    Text,
    /// Text as 64-bit offsets (large string).
    LargeText,
    /// Dictionary-encoded text (a categorical column).
    Dict,
    Date,
    /// `P0003` as the integer 3 (in both forms).
    IntId,
    /// A 0/1 value as Int8.
    Byte,
}

/// Writes `rows` (header first) as Parquet with `kinds` per column, and the
/// same values as CSV; `group` rows per row group. Empty fields are nulls.
fn write_both(
    rows: &[Vec<String>],
    kinds: &[(&str, Kind)],
    group: usize,
    dir: &Path,
    stem: &str,
) -> (PathBuf, PathBuf) {
    let header = &rows[0];
    let kind_of = |name: &str| {
        kinds
            .iter()
            .find(|(n, _)| *n == name)
            .map_or(Kind::Text, |(_, k)| *k)
    };
    let int_id = |v: &str| {
        v.trim_start_matches(|c: char| c.is_ascii_alphabetic())
            .parse::<i64>()
            .unwrap()
    };
    let mut arrays: Vec<(String, ArrayRef)> = Vec::new();
    for (k, name) in header.iter().enumerate() {
        let values = rows[1..].iter().map(|r| r[k].as_str());
        // Text of each kind: empty fields as nulls.
        let texts = values.clone().map(|v| Some(v).filter(|v| !v.is_empty()));
        let a: ArrayRef = match kind_of(name) {
            Kind::Text => Arc::new(StringArray::from_iter(texts)),
            Kind::LargeText => Arc::new(LargeStringArray::from_iter(texts)),
            Kind::Dict => Arc::new(texts.collect::<DictionaryArray<Int32Type>>()),
            Kind::Date => {
                let mut b = Date32Builder::new();
                values.for_each(|v| {
                    b.append_option(morbus::pipeline::DateFormat::Iso.parse(v.as_bytes()))
                });
                Arc::new(b.finish())
            }
            Kind::IntId => {
                let mut b = Int64Builder::new();
                values.for_each(|v| b.append_value(int_id(v)));
                Arc::new(b.finish())
            }
            Kind::Byte => {
                let mut b = Int8Builder::new();
                values.for_each(|v| b.append_value(v.parse().unwrap()));
                Arc::new(b.finish())
            }
        };
        arrays.push((name.clone(), a));
    }
    let batch = RecordBatch::try_from_iter(arrays).unwrap();
    let pq = dir.join(format!("{stem}.parquet"));
    write_parquet(&pq, &batch, Some(group));

    let csv = dir.join(format!("{stem}.csv"));
    let mut w = csv::Writer::from_path(&csv).unwrap();
    w.write_record(header).unwrap();
    for r in &rows[1..] {
        let rec: Vec<String> = r
            .iter()
            .zip(header)
            .map(|(v, name)| match kind_of(name) {
                Kind::IntId => int_id(v).to_string(),
                _ => v.clone(),
            })
            .collect();
        w.write_record(&rec).unwrap();
    }
    w.flush().unwrap();
    (pq, csv)
}

/// Every row of a Parquet file, as one batch, and its number of row groups.
fn read_parquet(path: &Path) -> (RecordBatch, usize) {
    let b = ParquetRecordBatchReaderBuilder::try_new(File::open(path).unwrap()).unwrap();
    let groups = b.metadata().num_row_groups();
    let schema = b.schema().clone();
    let batches: Vec<RecordBatch> = b.build().unwrap().map(Result::unwrap).collect();
    (
        arrow_select::concat::concat_batches(&schema, &batches).unwrap(),
        groups,
    )
}

/// A column as text: nulls empty, floats in Rust's shortest form.
fn as_text(batch: &RecordBatch, name: &str) -> Vec<String> {
    let a = batch
        .column_by_name(name)
        .unwrap_or_else(|| panic!("column {name}"));
    if a.data_type() == &DataType::Float64 {
        let f = a.as_primitive::<arrow_array::types::Float64Type>();
        return f
            .iter()
            .map(|v| v.map_or(String::new(), |v| v.to_string()))
            .collect();
    }
    let f = arrow_cast::display::ArrayFormatter::try_new(a.as_ref(), &Default::default()).unwrap();
    (0..a.len())
        .map(|i| {
            if a.is_null(i) {
                String::new()
            } else {
                f.value(i).to_string()
            }
        })
        .collect()
}

/// Equal columns, or the first row where they differ.
fn assert_same(got: &[String], expected: &[String], what: &str) {
    assert_eq!(got.len(), expected.len(), "{what}: number of rows");
    if let Some(i) = (0..got.len()).find(|&i| got[i] != expected[i]) {
        panic!(
            "{what}: row {i}: got '{}', expected '{}'",
            got[i], expected[i]
        );
    }
}

fn csv_header(text: &str) -> Vec<String> {
    let mut rdr = csv::Reader::from_reader(text.as_bytes());
    rdr.headers().unwrap().iter().map(str::to_string).collect()
}

const WIDE_KINDS: &[(&str, Kind)] = &[
    ("patient_id", Kind::Dict),
    ("site", Kind::LargeText),
    ("admission_date", Kind::Date),
    ("died_within_30_days", Kind::Byte),
];

struct Wide {
    _dir: TempDir,
    pq: PathBuf,
    csv: PathBuf,
    dir: PathBuf,
}

fn wide() -> Wide {
    let dir = TempDir::new("parquet-wide");
    let rows = records(&root().join("demo-data/episodes.csv"));
    // Row groups of 700 rows: batches and row groups do not line up with
    // the output's.
    let (pq, csv) = write_both(&rows, WIDE_KINDS, 700, dir.path(), "episodes");
    let d = dir.path().to_path_buf();
    Wide {
        _dir: dir,
        pq,
        csv,
        dir: d,
    }
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// The option sets the wide comparisons run.
const WIDE_OPTIONS: &[&[&str]] = &[
    &["--dx", "dx*"],
    &[
        "--dx",
        "dx*",
        "--age",
        "age",
        "--flags",
        "--index",
        "charlson:charlson1987,hfrs",
    ],
    &[
        "--dx",
        "dx1,dx2,dx3",
        "--no-hierarchy",
        "--index",
        "elixhauser",
    ],
    &[
        "--dx",
        "dx*",
        "--id",
        "patient_id",
        "--date",
        "admission_date",
        "--lookback",
        "365",
        "--age",
        "age",
    ],
    &[
        "--dx",
        "dx*",
        "--id",
        "patient_id",
        "--date",
        "admission_date",
        "--lookback",
        "all",
        "--exclude-primary",
    ],
    // Per-list windows, earlier days only, rows waiting in a temporary file.
    &[
        "--dx",
        "dx*",
        "--id",
        "patient_id",
        "--date",
        "admission_date",
        "--lookback",
        "365,hfrs=730",
        "--window",
        "earlier-only",
        "--memory",
        "1KiB",
    ],
];

#[test]
fn parquet_in_csv_out_equals_the_csv_run() {
    let w = wide();
    for opts in WIDE_OPTIONS {
        let mut a = vec!["score", s(&w.pq)];
        a.extend_from_slice(opts);
        let from_pq = morbus(&a);
        let mut b = vec!["score", s(&w.csv)];
        b.extend_from_slice(opts);
        let from_csv = morbus(&b);
        assert_eq!(from_pq.code, 0, "{opts:?}: {}", from_pq.stderr);
        assert_eq!(from_csv.code, 0, "{opts:?}: {}", from_csv.stderr);
        // Same bytes: the demo's values need no quoting, the dates are ISO,
        // nulls are empty fields.
        assert_eq!(from_pq.stdout, from_csv.stdout, "{opts:?}");
        assert_eq!(from_pq.stderr, from_csv.stderr, "{opts:?}");
    }
}

#[test]
fn parquet_out_keeps_the_input_columns_and_types_the_scores() {
    let w = wide();
    let (input, _) = read_parquet(&w.pq);
    for (k, opts) in WIDE_OPTIONS.iter().enumerate() {
        let out = w.dir.join(format!("out{k}.parquet"));
        let mut a = vec!["score", s(&w.pq), "-o", s(&out)];
        a.extend_from_slice(opts);
        let r = morbus(&a);
        assert_eq!(r.code, 0, "{opts:?}: {}", r.stderr);
        let mut b = vec!["score", s(&w.csv)];
        b.extend_from_slice(opts);
        let reference = morbus(&b);
        let names = csv_header(&reference.stdout);
        // The same summary (with a history, the Parquet rows are read typed).
        assert_eq!(r.stderr, reference.stderr, "{opts:?}");

        let (got, _) = read_parquet(&out);
        assert_eq!(got.num_rows(), input.num_rows());
        assert_eq!(got.num_columns(), names.len());
        // The input's columns: the same arrays, same types (dictionary,
        // large string, date, int8 included), nulls where they were.
        for (i, f) in input.schema().fields().iter().enumerate() {
            assert_eq!(got.schema().field(i).name(), f.name());
            assert_eq!(
                got.schema().field(i).data_type(),
                f.data_type(),
                "{}",
                f.name()
            );
            assert_eq!(
                got.column(i).as_ref(),
                input.column(i).as_ref(),
                "{}",
                f.name()
            );
        }
        // The score columns: typed, with the CSV run's values.
        for name in &names[input.num_columns()..] {
            let t = got
                .schema()
                .field_with_name(name)
                .unwrap()
                .data_type()
                .clone();
            let expected = if name.ends_with("_band") {
                DataType::Utf8
            } else if !name
                .as_bytes()
                .windows(4)
                .any(|w| w.iter().all(u8::is_ascii_digit))
            {
                // Score columns are named after their weighting, which
                // carries its year (charlson1987); condition flags are not.
                DataType::Int8
            } else if name.starts_with("hfrs") {
                DataType::Float64 // points with one decimal
            } else {
                DataType::Int64
            };
            assert_eq!(t, expected, "{name}");
            let mut csv_values = column(&reference.stdout, name);
            if t == DataType::Float64 {
                // The CSV writes the weighting's decimals; Arrow the shortest form.
                for v in &mut csv_values {
                    if !v.is_empty() {
                        *v = v.parse::<f64>().unwrap().to_string();
                    }
                }
            }
            assert_same(
                &as_text(&got, name),
                &csv_values,
                &format!("{opts:?} {name}"),
            );
        }
    }
}

#[test]
fn long_layout_keeps_an_integer_id_and_gives_the_csv_numbers() {
    let dir = TempDir::new("parquet-long");
    let rows = records(&root().join("demo-data/episodes-long.csv"));
    let kinds = [
        ("patient_id", Kind::IntId),
        ("admission_date", Kind::Date),
        ("position", Kind::IntId),
        ("died_within_30_days", Kind::Byte),
    ];
    let (pq, csv) = write_both(&rows, &kinds, 1000, dir.path(), "long");
    for opts in [
        &["--layout", "long", "--id", "patient_id", "--dx", "code"][..],
        &[
            "--layout",
            "long",
            "--id",
            "patient_id",
            "--episode",
            "episode_id",
            "--dx",
            "code",
            "--date",
            "admission_date",
            "--lookback",
            "730",
            "--exclude-primary",
            "--primary",
            "position",
            "--poa",
            "present_on_admission",
            "--age",
            "age",
            "--keep",
            "died_within_30_days,age",
        ],
    ] {
        let out = dir.path().join("out.parquet");
        let mut a = vec!["score", s(&pq), "-o", s(&out)];
        a.extend_from_slice(opts);
        let r = morbus(&a);
        assert_eq!(r.code, 0, "{}", r.stderr);
        let mut b = vec!["score", s(&csv)];
        b.extend_from_slice(opts);
        let reference = morbus(&b);
        assert_eq!(r.stderr, reference.stderr);
        let (got, _) = read_parquet(&out);
        // The id keeps its integer type; the episode its text.
        assert_eq!(got.schema().field(0).data_type(), &DataType::Int64);
        if opts.contains(&"--episode") {
            assert_eq!(got.schema().field(1).data_type(), &DataType::Utf8);
        }
        for name in csv_header(&reference.stdout) {
            let mut expected = column(&reference.stdout, &name);
            if name.starts_with("hfrs") && !name.ends_with("_band") {
                for v in &mut expected {
                    *v = v.parse::<f64>().unwrap().to_string();
                }
            }
            assert_same(&as_text(&got, &name), &expected, &name);
        }
    }
}

#[test]
fn explain_and_compare_read_parquet() {
    let w = wide();
    let opts = [
        "--dx",
        "dx*",
        "--id",
        "patient_id",
        "--date",
        "admission_date",
        "--lookback",
        "365",
        "--label",
        "episode_id",
        "--age",
        "age",
    ];
    // explain: CSV output identical; Parquet output typed with the same values.
    let mut a = vec!["explain", s(&w.pq)];
    a.extend_from_slice(&opts);
    let mut b = vec!["explain", s(&w.csv)];
    b.extend_from_slice(&opts);
    let (from_pq, reference) = (morbus(&a), morbus(&b));
    assert_eq!(from_pq.code, 0, "{}", from_pq.stderr);
    assert_eq!(from_pq.stdout, reference.stdout);
    let out = w.dir.join("explain.parquet");
    a.extend_from_slice(&["-o", s(&out)]);
    assert_eq!(morbus(&a).code, 0);
    let (got, _) = read_parquet(&out);
    for (name, t) in [
        ("row", DataType::Int64),
        ("source_row", DataType::Int64),
        ("source_date", DataType::Date32),
        ("weight", DataType::Float64),
        ("status", DataType::Utf8),
        ("age_points", DataType::Float64),
    ] {
        assert_eq!(
            got.schema().field_with_name(name).unwrap().data_type(),
            &t,
            "{name}"
        );
    }
    for name in csv_header(&reference.stdout) {
        let mut expected = column(&reference.stdout, &name);
        if name == "weight" || name == "age_points" {
            for v in expected.iter_mut().filter(|v| !v.is_empty()) {
                *v = v.parse::<f64>().unwrap().to_string();
            }
        }
        assert_same(&as_text(&got, &name), &expected, &name);
    }
    // explain --json cannot be Parquet.
    let r = common::run("explain {} --dx dx* --json -o {}", &[s(&w.pq), s(&out)]);
    assert_eq!(r.code, 2, "{}", r.stderr);

    // compare: the same results (JSON) from either form.
    let compare = |input: &Path, json: &Path| {
        let r = common::run(
            "compare {} --dx dx* --outcome died_within_30_days --adjust age \
             --adjust-cat sex --index charlson,hfrs --json {} -q",
            &[s(input), s(json)],
        );
        assert_eq!(r.code, 0, "{}", r.stderr);
        (r.stdout, std::fs::read_to_string(json).unwrap())
    };
    let j1 = w.dir.join("c1.json");
    let j2 = w.dir.join("c2.json");
    assert_eq!(compare(&w.pq, &j1), compare(&w.csv, &j2));
}

#[test]
fn csv_in_parquet_out_keeps_the_fields_as_text() {
    let dir = TempDir::new("parquet-from-csv");
    let input = dir.path().join("in.csv");
    std::fs::write(
        &input,
        "episode,note,dx1,dx2\ne1,\"two\nlines, and a comma\",I21.9,\ne2,,C78.0,\"\"\ne3, spaced ,F00.1,R29.6\n",
    )
    .unwrap();
    let out = dir.path().join("out.pq");
    let r = common::run(
        "score {} --dx dx* -o {} --index charlson",
        &[s(&input), s(&out)],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let (got, _) = read_parquet(&out);
    assert_eq!(got.num_rows(), 3);
    let note = got.column_by_name("note").unwrap().as_string::<i32>();
    assert_eq!(note.value(0), "two\nlines, and a comma");
    assert!(note.is_null(1), "an empty field is null");
    assert_eq!(note.value(2), " spaced ", "spaces kept");
    let dx2 = got.column_by_name("dx2").unwrap();
    assert!(dx2.is_null(0) && dx2.is_null(1));
    assert_eq!(
        got.column_by_name("charlson_quan2011").unwrap().data_type(),
        &DataType::Int64
    );
    let reference = common::run("score {} --dx dx* --index charlson", &[s(&input)]);
    assert_eq!(
        as_text(&got, "charlson_quan2011"),
        column(&reference.stdout, "charlson_quan2011")
    );
}

/// A CSV input written to Parquet on every route (no history, lookback in
/// memory and spilled, long units with kept columns): each column holds
/// the CSV run's values, the input's fields as text and the scores typed
/// (handed over as values, never as text to be parsed).
#[test]
fn csv_in_parquet_out_equals_the_csv_run_on_every_route() {
    let dir = TempDir::new("parquet-csv-routes");
    let wide = root().join("demo-data/episodes.csv");
    let long = root().join("demo-data/episodes-long.csv");
    // A field with a line break, a comma and a quote, and empty fields.
    let odd = dir.path().join("odd.csv");
    std::fs::write(
        &odd,
        "id,day,note,dx1\r\nA,2020-01-01,\"two\nlines, \"\"q\"\"\",I21.9\r\nA,2020-03-01,,C78.0\r\nB,2020-01-01, x ,\r\n",
    )
    .unwrap();
    let history = ["--id", "patient_id", "--date", "admission_date"];
    let long_units = [
        "--layout",
        "long",
        "--dx",
        "code",
        "--id",
        "patient_id",
        "--episode",
        "episode_id",
        "--keep",
        "died_within_30_days,age",
    ];
    let mut cases: Vec<(PathBuf, Vec<&str>)> = WIDE_OPTIONS
        .iter()
        .map(|o| (wide.clone(), o.to_vec()))
        .collect();
    cases.push((
        wide.clone(),
        [
            &["--dx", "dx*", "--lookback", "730", "--memory", "0"],
            &history[..],
        ]
        .concat(),
    ));
    cases.push((
        long.clone(),
        vec!["--layout", "long", "--dx", "code", "--id", "episode_id"],
    ));
    cases.push((long.clone(), long_units.to_vec()));
    for memory in ["1GiB", "0"] {
        let mut o = long_units.to_vec();
        o.extend([
            "--date",
            "admission_date",
            "--lookback",
            "365",
            "--age",
            "age",
        ]);
        o.extend(["--memory", memory]);
        cases.push((long.clone(), o));
    }
    for memory in ["1GiB", "0"] {
        let o = [
            "--dx",
            "dx1",
            "--id",
            "id",
            "--date",
            "day",
            "--lookback",
            "all",
        ];
        cases.push((odd.clone(), [&o[..], &["--memory", memory]].concat()));
    }
    cases.push((odd.clone(), vec!["--dx", "dx1"]));
    for (k, (input, opts)) in cases.iter().enumerate() {
        let out = dir.path().join(format!("out{k}.parquet"));
        let mut a = vec!["score", s(input), "-o", s(&out)];
        a.extend_from_slice(opts);
        let r = morbus(&a);
        assert_eq!(r.code, 0, "{opts:?}: {}", r.stderr);
        let mut b = vec!["score", s(input)];
        b.extend_from_slice(opts);
        let reference = morbus(&b);
        assert_eq!(reference.code, 0, "{opts:?}: {}", reference.stderr);
        assert_eq!(r.stderr, reference.stderr, "{opts:?}");
        let names = csv_header(&reference.stdout);
        let (got, _) = read_parquet(&out);
        let got_names: Vec<String> = got
            .schema()
            .fields()
            .iter()
            .map(|f| f.name().clone())
            .collect();
        assert_eq!(got_names, names, "{opts:?}");
        for name in &names {
            let mut expected = column(&reference.stdout, name);
            if got.column_by_name(name).unwrap().data_type() == &DataType::Float64 {
                for v in &mut expected {
                    if !v.is_empty() {
                        *v = v.parse::<f64>().unwrap().to_string();
                    }
                }
            }
            assert_same(&as_text(&got, name), &expected, &format!("{opts:?} {name}"));
        }
    }
}

#[test]
fn a_list_column_passes_through_and_a_standard_input_parquet_is_read() {
    let dir = TempDir::new("parquet-list");
    let mut tags = ListBuilder::new(StringBuilder::new());
    tags.values().append_value("a");
    tags.values().append_value("b");
    tags.append(true);
    tags.append(false);
    let mut dx = StringBuilder::new();
    dx.append_value("I50.9");
    dx.append_value("I21.9");
    let batch = RecordBatch::try_from_iter([
        ("tags", Arc::new(tags.finish()) as ArrayRef),
        ("dx1", Arc::new(dx.finish()) as ArrayRef),
    ])
    .unwrap();
    let input = dir.path().join("in.parquet");
    write_parquet(&input, &batch, Some(10));
    let out = dir.path().join("out.parquet");
    let r = common::run(
        "score {} --dx dx1 -o {} --index charlson",
        &[s(&input), s(&out)],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let (got, _) = read_parquet(&out);
    assert_eq!(got.column(0).as_ref(), batch.column(0).as_ref());
    // As CSV the list is written in Arrow's display form, quoted for its
    // comma. Scores: Quan et al., Am J Epidemiol 2011;173:676-82, Table 3
    // (from memory): congestive heart failure (I50) 2, myocardial
    // infarction (I21) 0.
    let r = common::run("score {} --dx dx1 --index charlson", &[s(&input)]);
    assert_eq!(
        r.stdout,
        "tags,dx1,charlson_quan2011\n\"[a, b]\",I50.9,2\n,I21.9,0\n"
    );

    // From standard input, to standard output as Parquet.
    let o = common::pipe(
        &[
            "score",
            "--dx",
            "dx1",
            "--index",
            "charlson",
            "--output-format",
            "parquet",
            "-q",
        ],
        &std::fs::read(&input).unwrap(),
    );
    assert!(o.status.success());
    let piped = dir.path().join("piped.parquet");
    std::fs::write(&piped, &o.stdout).unwrap();
    assert_eq!(read_parquet(&piped).0, got);
}

#[test]
fn problems_name_the_row_and_a_failed_run_leaves_no_valid_file() {
    let dir = TempDir::new("parquet-errors");
    // Row 2 holds a value spanning three lines of text; row 4 an invalid code.
    let mut note = StringBuilder::new();
    let mut dx = StringBuilder::new();
    for (n, d) in [
        ("", "I21.9"),
        ("one\ntwo\nthree", "C78.0"),
        ("", "I50.9"),
        ("", "XYZ"),
        ("", "F00.1"),
    ] {
        note.append_value(n);
        dx.append_value(d);
    }
    let batch = RecordBatch::try_from_iter([
        ("note", Arc::new(note.finish()) as ArrayRef),
        ("dx1", Arc::new(dx.finish()) as ArrayRef),
    ])
    .unwrap();
    let input = dir.path().join("in.parquet");
    write_parquet(&input, &batch, Some(2));
    let out = dir.path().join("out.parquet");
    let r = common::run("score {} --dx dx1 --strict -o {}", &[s(&input), s(&out)]);
    assert_eq!(r.code, 3, "{}", r.stderr);
    assert!(
        r.stderr.contains(&format!("row 4 of {}", input.display())),
        "{}",
        r.stderr
    );
    assert!(r.stderr.contains("XYZ"), "{}", r.stderr);
    // A run that failed leaves no output at all, not even its temporary
    // file (see tests/nothing_lost.rs).
    assert!(
        !out.exists(),
        "a run that failed must leave no Parquet file"
    );
    assert!(
        std::fs::read_dir(dir.path()).unwrap().all(|e| !e
            .unwrap()
            .file_name()
            .to_string_lossy()
            .ends_with(".tmp")),
        "a temporary file was left"
    );
    // Without --strict every row comes out, the invalid code counted.
    let r = common::run("score {} --dx dx1 -o {}", &[s(&input), s(&out)]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stderr.contains("5 rows read, 5 rows written") && r.stderr.contains("1 invalid code"),
        "{}",
        r.stderr
    );
    assert_eq!(read_parquet(&out).0.num_rows(), 5);

    // A damaged file: a clear message, exit 1.
    let bytes = std::fs::read(&input).unwrap();
    let cut = dir.path().join("cut.parquet");
    std::fs::write(&cut, &bytes[..bytes.len() / 2]).unwrap();
    let r = common::run("score {} --dx dx1", &[s(&cut)]);
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("as Parquet"), "{}", r.stderr);
    assert!(!r.stderr.contains("panicked"), "{}", r.stderr);

    // A column that is not there: the usual message, listing the columns.
    let r = common::run("score {} --dx dx9 -o {}", &[s(&input), s(&out)]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains("note, dx1") || r.stderr.contains("note,dx1"),
        "{}",
        r.stderr
    );

    // Text that is not UTF-8 cannot go into a Parquet text column.
    let latin = dir.path().join("latin.csv");
    std::fs::write(&latin, b"name,dx1\nJos\xe9,I21.9\n").unwrap();
    let r = common::run("score {} --dx dx1 -o {}", &[s(&latin), s(&out)]);
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("not UTF-8"), "{}", r.stderr);
}

#[test]
fn a_score_column_already_in_a_parquet_input_is_refused() {
    let w = wide();
    let once = w.dir.join("once.parquet");
    assert_eq!(
        common::run("score {} --dx dx* -o {}", &[s(&w.pq), s(&once)]).code,
        0
    );
    // Scoring the scored file again would repeat its score columns.
    for out in ["twice.parquet", "twice.csv"] {
        let out = w.dir.join(out);
        let r = common::run("score {} --dx dx* -o {}", &[s(&once), s(&out)]);
        assert_eq!(r.code, 2, "{}", r.stderr);
        assert!(
            r.stderr
                .contains("output column 'charlson_quan2011' already exists in the input"),
            "{}",
            r.stderr
        );
    }
}

/// Damaged files must come out as a plain error (exit 1), never a panic:
/// - `tests/data/damaged-page.parquet`: a small file of invented columns (an
///   integer id, dictionary-encoded patient ids, dates, ages, a list, two
///   diagnosis columns) with a few bytes of a data page overwritten, found
///   by mutating valid files; its footer reads, decoding a page made the
///   decoder panic;
/// - `tests/data/damaged-row-counts.parquet`: found by the fuzz target
///   `parquet_input`; its row groups' row counts overflow when the reader
///   adds them up (a panic in the reader's set-up).
#[test]
fn a_damaged_file_is_an_error_not_a_panic() {
    let dir = TempDir::new("parquet-damaged");
    for name in ["damaged-page.parquet", "damaged-row-counts.parquet"] {
        let damaged = root().join("tests/data").join(name);
        let out = dir.path().join("out.parquet");
        for args in [
            vec!["score", s(&damaged), "--dx", "dx*"],
            vec!["score", s(&damaged), "--dx", "dx*", "-o", s(&out)],
            vec![
                "explain",
                s(&damaged),
                "--dx",
                "dx*",
                "--id",
                "pid",
                "--date",
                "date",
                "--lookback",
                "all",
            ],
        ] {
            let r = morbus(&args);
            assert_eq!(r.code, 1, "{args:?}: {}", r.stderr);
            assert!(
                r.stderr.contains("as Parquet: the file is damaged"),
                "{args:?}: {}",
                r.stderr
            );
            assert!(!r.stderr.contains("panicked"), "{args:?}: {}", r.stderr);
        }
    }
}

#[test]
fn a_timestamp_with_a_time_zone_counts_on_its_date_in_that_zone() {
    use arrow_array::TimestampMicrosecondArray;
    // Patient p: heart failure at 2023-01-02T23:30Z, which is 2023-01-03
    // 01:30 at +02:00; a myocardial infarction at 2024-01-03 00:30 +02:00.
    // 2023-01-03 is exactly 365 days before 2024-01-03 (inclusive window),
    // 2023-01-02 (the UTC date) is 366: read in its zone the earlier
    // episode counts. Charlson et al. 1987 weights (from memory, as in
    // tests/history.rs): heart failure 1, myocardial infarction 1.
    let micros = |days: i64, secs: i64| (days * 86_400 + secs) * 1_000_000;
    let d2023_01_02 = 19_359; // days since 1970-01-01
    let d2024_01_02 = d2023_01_02 + 365;
    let ts = TimestampMicrosecondArray::from(vec![
        micros(d2023_01_02, 23 * 3600 + 1800),
        micros(d2024_01_02, 22 * 3600 + 1800),
    ])
    .with_timezone("+02:00");
    let mut pid = StringBuilder::new();
    let mut dx = StringBuilder::new();
    for (p, d) in [("p", "I50.9"), ("p", "I21.9")] {
        pid.append_value(p);
        dx.append_value(d);
    }
    let batch = RecordBatch::try_from_iter([
        ("patient", Arc::new(pid.finish()) as ArrayRef),
        ("admitted", Arc::new(ts) as ArrayRef),
        ("dx1", Arc::new(dx.finish()) as ArrayRef),
    ])
    .unwrap();
    let dir = TempDir::new("parquet-tz");
    let input = dir.path().join("tz.parquet");
    write_parquet(&input, &batch, Some(10));
    let r = common::run(
        "score {} --dx dx1 --id patient --date admitted --lookback 365 \
         --index charlson:charlson1987",
        &[s(&input)],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(
        column(&r.stdout, "charlson_charlson1987"),
        ["1", "2"],
        "{}",
        r.stdout
    );
    assert_eq!(
        column(&r.stdout, "admitted"),
        ["2023-01-03T01:30:00+02:00", "2024-01-03T00:30:00+02:00"]
    );
}

/// `compare` on a Parquet input reads its rows typed and names them in
/// its messages (`row N of FILE`), where the same data as CSV names the
/// line; both exit 1. A typed outcome (whole numbers 0/1) reads as its
/// text form does.
#[test]
fn compare_on_parquet_names_rows_and_reads_typed_outcomes() {
    let dir = TempDir::new("parquet-compare");
    let write = |stem: &str, ids: &[&str], codes: &[&str], died: &[Option<i64>]| {
        let mut id = StringBuilder::new();
        let mut dx = StringBuilder::new();
        let mut out = Int64Builder::new();
        let mut text = String::from("id,dx1,died\n");
        for ((i, d), o) in ids.iter().zip(codes).zip(died) {
            id.append_value(i);
            dx.append_value(d);
            out.append_option(*o);
            let o = o.map_or(String::new(), |o| o.to_string());
            text.push_str(&format!("{i},{d},{o}\n"));
        }
        let batch = RecordBatch::try_from_iter([
            ("id", Arc::new(id.finish()) as ArrayRef),
            ("dx1", Arc::new(dx.finish()) as ArrayRef),
            ("died", Arc::new(out.finish()) as ArrayRef),
        ])
        .unwrap();
        let pq = dir.path().join(format!("{stem}.parquet"));
        write_parquet(&pq, &batch, Some(2));
        let csv = dir.path().join(format!("{stem}.csv"));
        std::fs::write(&csv, text).unwrap();
        (pq, csv)
    };
    let run = |input: &Path, long: bool| {
        let mut a = vec![
            "compare",
            s(input),
            "--dx",
            "dx1",
            "--outcome",
            "died",
            "--index",
            "charlson:count",
        ];
        if long {
            a.extend_from_slice(&["--layout", "long", "--id", "id"]);
        }
        morbus(&a)
    };
    let ids = ["a", "b", "c", "d", "e", "f"];
    let codes = ["I21.9", "C78.0", "J18.9", "I50.0", "Z00.0", "E11.9"];
    // Valid: the same table and summary from either form.
    let died = [Some(1), Some(1), Some(0), None, Some(0), Some(1)];
    let (pq, csv) = write("valid", &ids, &codes, &died);
    let (from_pq, from_csv) = (run(&pq, false), run(&csv, false));
    assert_eq!(from_pq.code, 0, "{}", from_pq.stderr);
    assert_eq!(from_pq.stdout, from_csv.stdout);
    assert_eq!(from_pq.stderr, from_csv.stderr);
    // An outcome of 2 on data row 3 (line 4 of the CSV).
    let died = [Some(1), Some(0), Some(2), None, Some(0), Some(1)];
    let (pq, csv) = write("invalid", &ids, &codes, &died);
    let message = "outcome column 'died' holds '2': expected 0 or 1, or true/false";
    let (from_pq, from_csv) = (run(&pq, false), run(&csv, false));
    assert_eq!((from_pq.code, from_csv.code), (1, 1), "{}", from_pq.stderr);
    assert!(
        from_csv.stderr.contains(&format!("line 4: {message}")),
        "{}",
        from_csv.stderr
    );
    assert!(
        from_pq
            .stderr
            .contains(&format!("row 3 of {}: {message}", pq.display())),
        "{}",
        from_pq.stderr
    );
    // Long layout: rows 4 and 6 of id 'd' disagree.
    let ids = ["a", "b", "c", "d", "e", "d"];
    let died = [Some(1), Some(0), Some(1), Some(1), Some(0), Some(0)];
    let (pq, csv) = write("disagree", &ids, &codes, &died);
    let message = "column 'died' holds '0' here but '1'";
    let (from_pq, from_csv) = (run(&pq, true), run(&csv, true));
    assert_eq!((from_pq.code, from_csv.code), (1, 1), "{}", from_pq.stderr);
    assert!(
        from_csv
            .stderr
            .contains(&format!("line 7: {message} on line 5 of the same episode")),
        "{}",
        from_csv.stderr
    );
    assert!(
        from_pq.stderr.contains(&format!(
            "row 6 of {}: {message} on row 4 of the same episode",
            pq.display()
        )),
        "{}",
        from_pq.stderr
    );
}

/// `explain -o out.parquet` on every route (wide and long, --label, a
/// lookback, held and spilled, one and two threads, CSV and Parquet
/// inputs, whole and decimal weights): the file holds exactly the cells of
/// the CSV output, typed (row numbers `Int64`, dates `Date32`, weights
/// `Int64` when every index has whole weights, else `Float64`, text as
/// text, empty cells null; an integer id of a Parquet input `Int64`), and
/// is the same file however the run was done. Labels with quotes, commas,
/// line breaks and bytes that are not UTF-8 (the CSV shows them replaced,
/// and so does the Parquet text).
#[test]
fn explain_to_parquet_holds_the_csv_cells_typed_on_every_route() {
    let dir = TempDir::new("parquet-explain-routes");
    let mut rows = records(&root().join("demo-data/episodes.csv"));
    let notes = ["ward \"A\", bed 3", "two\nlines", "caf\u{e9}", "", "plain"];
    rows[0].push("note".into());
    for (i, r) in rows[1..].iter_mut().enumerate() {
        r.push(notes[i % notes.len()].into());
    }
    let kinds = [("patient_id", Kind::IntId), ("admission_date", Kind::Date)];
    let (pq, csv) = write_both(&rows, &kinds, 300, dir.path(), "episodes");
    // The CSV input with bytes that are not UTF-8 in some labels.
    let text = std::fs::read(&csv).unwrap();
    let cafe = "caf\u{e9}".as_bytes();
    let mut bytes = Vec::new();
    let mut at = 0;
    while let Some(k) = text[at..].windows(cafe.len()).position(|w| w == cafe) {
        bytes.extend_from_slice(&text[at..at + k]);
        bytes.extend_from_slice(b"caf\xe9 \xff");
        at += k + cafe.len();
    }
    bytes.extend_from_slice(&text[at..]);
    let quirks = dir.path().join("quirks.csv");
    std::fs::write(&quirks, &bytes).unwrap();
    let long = root().join("demo-data/episodes-long.csv");

    let wide_opts = "--dx dx* --id patient_id --date admission_date --age age --label note";
    let long_opts = "--layout long --dx code --id patient_id --episode episode_id \
                     --date admission_date --age age --poa present_on_admission";
    let int = DataType::Int64;
    let float = DataType::Float64;
    // Input, options, the weights' type, the types of kept columns.
    type Case<'a> = (&'a Path, String, &'a DataType, Vec<(&'a str, DataType)>);
    let cases: Vec<Case> = vec![
        (
            &quirks,
            format!("{wide_opts} --lookback 365"),
            &float,
            vec![],
        ),
        (
            &quirks,
            format!("{wide_opts} --lookback all --window earlier-only --index charlson"),
            &int,
            vec![],
        ),
        (
            &quirks,
            "--dx dx* --label episode_id --index hfrs".into(),
            &float,
            vec![],
        ),
        (
            &pq,
            format!("{wide_opts} --lookback 365 --index charlson,hfrs"),
            &float,
            vec![("patient_id", DataType::Int64)],
        ),
        (
            &pq,
            format!("{wide_opts} --lookback 730 --index charlson:charlson1987"),
            &int,
            vec![("patient_id", DataType::Int64)],
        ),
        (
            &long,
            format!("{long_opts} --lookback charlson=365,hfrs=730"),
            &float,
            vec![],
        ),
        (
            &long,
            format!("{long_opts} --lookback 365 --index elixhauser"),
            &int,
            vec![],
        ),
    ];
    let out = dir.path().join("out.parquet");
    for (input, opts, weights, kept) in cases {
        let run = |extra: &str| {
            let r = common::run(&format!("explain {{}} -q {opts} {extra}"), &[s(input)]);
            assert_eq!(r.code, 0, "{opts} {extra}: {}", r.stderr);
            r.stdout
        };
        let reference = run("--threads 1");
        assert!(reference.lines().count() > 100, "{opts}: {reference}");
        let mut first: Option<Vec<u8>> = None;
        for (memory, threads) in [("1GiB", "1"), ("1GiB", "2"), ("16KiB", "1"), ("16KiB", "2")] {
            let what = format!("{} {opts} --memory {memory} --threads {threads}", s(input));
            run(&format!(
                "--memory {memory} --threads {threads} -o {}",
                s(&out)
            ));
            let file = std::fs::read(&out).unwrap();
            let batch = common::parquet_batch(&file);
            common::assert_explain_cells(&reference, &batch, weights, &kept, &what);
            match &first {
                None => first = Some(file),
                Some(f) => assert!(
                    *f == file,
                    "{what}: another file than in memory on one thread"
                ),
            }
        }
    }
}

// Arrow types without a text form of their own: each has a typed reading
// or a clear refusal; no text is made of them for the engine to read.

/// Writes `columns` as a Parquet file `name` in `dir`, in row groups of
/// `group` rows.
fn write_columns(dir: &Path, name: &str, columns: Vec<(&str, ArrayRef)>, group: usize) -> PathBuf {
    let batch =
        RecordBatch::try_from_iter_with_nullable(columns.into_iter().map(|(n, a)| (n, a, true)))
            .unwrap();
    let path = dir.join(name);
    write_parquet(&path, &batch, Some(group));
    path
}

fn texts(values: &[&str]) -> ArrayRef {
    Arc::new(StringArray::from_iter(
        values.iter().map(|v| Some(*v).filter(|v| !v.is_empty())),
    ))
}

fn dates(values: &[&str]) -> ArrayRef {
    let mut b = Date32Builder::new();
    for v in values {
        b.append_option(morbus::pipeline::DateFormat::Iso.parse(v.as_bytes()));
    }
    Arc::new(b.finish())
}

/// A decimal column of precision `p` and scale `s` holding the unscaled
/// values `raw`.
fn decimals(raw: &[Option<i128>], p: u8, s: i8) -> ArrayRef {
    Arc::new(
        arrow_array::Decimal128Array::from(raw.to_vec())
            .with_precision_and_scale(p, s)
            .unwrap(),
    )
}

#[test]
fn a_decimal_age_scores_like_the_same_ages_as_text_and_as_floats() {
    let dir = TempDir::new("parquet-decimal-age");
    let ages = [Some(499), Some(500), Some(799), Some(805), None, Some(1310)];
    let dx = texts(&["I21.9"; 6]);
    let decimal = write_columns(
        dir.path(),
        "decimal.parquet",
        vec![("dx1", dx.clone()), ("age", decimals(&ages, 5, 1))],
        4,
    );
    let floats: arrow_array::Float64Array =
        ages.iter().map(|a| a.map(|a| a as f64 / 10.0)).collect();
    let float = write_columns(
        dir.path(),
        "float.parquet",
        vec![("dx1", dx.clone()), ("age", Arc::new(floats))],
        4,
    );
    let text = write_columns(
        dir.path(),
        "text.parquet",
        vec![
            ("dx1", dx),
            ("age", texts(&["49.9", "50.0", "79.9", "80.5", "", "131.0"])),
        ],
        4,
    );
    let line = "score {} --dx dx1 --age age --index charlson:charlson1987";
    let got = common::run(line, &[s(&decimal)]);
    assert_eq!(got.code, 0, "{}", got.stderr);
    // Charlson et al., J Chron Dis 1987;40:373-83: myocardial infarction 1
    // point, and one point per decade of age from 50 (49.9 is 49: none;
    // 50.0: 1; 79.9 is 79: 3; 80.5 is 80: 4); no age, or 131, no
    // age-combined score.
    assert_eq!(
        column(&got.stdout, "charlson_charlson1987_age"),
        ["1", "2", "4", "5", "", ""]
    );
    assert!(
        got.stderr.contains("ages missing: 1, unreadable: 1"),
        "{}",
        got.stderr
    );
    for other in [&float, &text] {
        let r = common::run(line, &[s(other)]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        for name in ["charlson_charlson1987", "charlson_charlson1987_age"] {
            assert_eq!(column(&r.stdout, name), column(&got.stdout, name));
        }
        assert_eq!(r.stderr, got.stderr);
    }
}

/// The ids of the UInt64 test: 2^53 + 1 and 2^53 are one apart (equal as
/// doubles), and the largest `i64`.
const BIG_IDS: [u64; 4] = [
    9_007_199_254_740_993,
    9_007_199_254_740_993,
    9_007_199_254_740_992,
    9_223_372_036_854_775_807,
];

#[test]
fn unsigned_ids_group_episodes_like_signed_ones_and_come_back_unsigned() {
    let dir = TempDir::new("parquet-uint64-ids");
    let rest = || {
        vec![
            ("episode", texts(&["a", "b", "c", "d"])),
            (
                "day",
                dates(&["2020-01-01", "2020-03-01", "2020-02-01", "2020-01-01"]),
            ),
            ("dx", texts(&["I21.9", "I50.9", "I50.9", "I21.9"])),
        ]
    };
    let unsigned: ArrayRef = Arc::new(arrow_array::UInt64Array::from(BIG_IDS.to_vec()));
    let signed: ArrayRef = Arc::new(arrow_array::Int64Array::from(
        BIG_IDS.iter().map(|&i| i as i64).collect::<Vec<_>>(),
    ));
    let mut u = vec![("patient", unsigned.clone())];
    u.extend(rest());
    let mut i = vec![("patient", signed)];
    i.extend(rest());
    let u = write_columns(dir.path(), "unsigned.parquet", u, 2);
    let i = write_columns(dir.path(), "signed.parquet", i, 2);
    let line = "score {} --layout long --id patient --episode episode --date day \
                --lookback 365 --dx dx --index charlson:charlson1987";
    let got = common::run(line, &[s(&u)]);
    assert_eq!(got.code, 0, "{}", got.stderr);
    // Charlson 1987: myocardial infarction 1, heart failure 1. Episode b
    // counts its patient's infarction of episode a (59 days before); c is
    // another patient (one apart from a's and b's), whose heart failure
    // alone scores 1.
    assert_eq!(
        column(&got.stdout, "patient"),
        BIG_IDS.map(|i| i.to_string())
    );
    assert_eq!(
        column(&got.stdout, "charlson_charlson1987"),
        ["1", "2", "1", "1"]
    );
    let signed_run = common::run(line, &[s(&i)]);
    assert_eq!(signed_run.stdout, got.stdout);
    assert_eq!(signed_run.stderr, got.stderr);

    // As Parquet: the ids are the input's UInt64 values, with lookback (the
    // ids kept as typed keys) and without (taken from the input's arrays).
    for history in [true, false] {
        let out = dir.path().join("out.parquet");
        let mut line = format!("{line} -o {{}}");
        if !history {
            line = line.replace("--date day --lookback 365 ", "");
        }
        let r = common::run(&line, &[s(&u), s(&out)]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        let (back, _) = read_parquet(&out);
        assert_eq!(
            back.column_by_name("patient").unwrap().as_ref(),
            unsigned.as_ref(),
            "history {history}"
        );
    }
}

#[test]
fn decimal_ids_episodes_and_kept_values_come_back_as_the_same_decimals() {
    let dir = TempDir::new("parquet-decimal-ids");
    // Ids of scale 2 (numbers), episodes of scale 0 (whole numbers), and a
    // kept column of scale 0 holding values beyond i64 (read as numbers)
    // beside a small one (a whole number). (Parquet holds no negative
    // scale: see the unit tests of the decimal readings.)
    let id = decimals(
        &[Some(100150), Some(100150), Some(200225), Some(-310)],
        12,
        2,
    );
    let episode = decimals(&[Some(100), Some(200), Some(300), Some(400)], 10, 0);
    let big = 1_200_000_000_000_000_000_000i128;
    let kept = decimals(&[Some(7), Some(big), None, Some(-big)], 38, 0);
    let input = write_columns(
        dir.path(),
        "in.parquet",
        vec![
            ("patient", id.clone()),
            ("episode", episode.clone()),
            ("weight_class", kept.clone()),
            (
                "day",
                dates(&["2020-01-01", "2020-03-01", "2020-02-01", "2020-01-01"]),
            ),
            ("dx", texts(&["I21.9", "I50.9", "I50.9", "I21.9"])),
        ],
        3,
    );
    let out = dir.path().join("out.parquet");
    // In memory, and spilled to temporary files (--memory 0).
    for memory in ["1GiB", "0"] {
        let r = common::run(
            "score {} --layout long --id patient --episode episode --date day --lookback 365 \
             --dx dx --keep weight_class --index charlson:charlson1987 --memory {} -o {}",
            &[s(&input), memory, s(&out)],
        );
        assert_eq!(r.code, 0, "{}", r.stderr);
        assert_eq!(
            r.stderr.contains("went to temporary files"),
            memory == "0",
            "{}",
            r.stderr
        );
        let (back, _) = read_parquet(&out);
        for (name, a) in [
            ("patient", &id),
            ("episode", &episode),
            ("weight_class", &kept),
        ] {
            assert_eq!(
                back.column_by_name(name).unwrap().as_ref(),
                a.as_ref(),
                "{name} {memory}"
            );
        }
        // Episodes 100 and 200 are one patient's (1001.50): the second
        // counts the first's infarction (Charlson 1987: 1 + 1).
        let scores = back.column_by_name("charlson_charlson1987").unwrap();
        assert_eq!(
            scores
                .as_primitive::<arrow_array::types::Int64Type>()
                .values()
                .to_vec(),
            [1, 2, 1, 1]
        );
    }
    // explain, as Parquet: the id, episode and label columns are the same
    // decimals (each episode's first row holds its values).
    let r = common::run(
        "explain {} --layout long --id patient --episode episode --date day --lookback 365 \
         --dx dx --label weight_class --index charlson:charlson1987 -o {}",
        &[s(&input), s(&out)],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let (explained, _) = read_parquet(&out);
    for (name, a) in [
        ("patient", &id),
        ("episode", &episode),
        ("weight_class", &kept),
    ] {
        let got = explained.column_by_name(name).unwrap();
        assert_eq!(got.data_type(), a.data_type(), "{name}");
        // Each episode's values, in the order its rows come.
        let firsts: Vec<usize> = (0..explained.num_rows())
            .filter(|&i| {
                i == 0
                    || explained.column_by_name("episode").unwrap().slice(i, 1)
                        != explained.column_by_name("episode").unwrap().slice(i - 1, 1)
            })
            .collect();
        let per_episode = arrow_select::take::take(
            got.as_ref(),
            &arrow_array::UInt32Array::from(firsts.iter().map(|&i| i as u32).collect::<Vec<_>>()),
            None,
        )
        .unwrap();
        assert_eq!(per_episode.as_ref(), a.as_ref(), "{name}");
    }

    // As text, the ids are the numbers they hold.
    let r = common::run(
        "score {} --layout long --id patient --episode episode --date day --lookback 365 \
         --dx dx --index charlson:charlson1987",
        &[s(&input)],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(
        column(&r.stdout, "patient"),
        ["1001.5", "1001.5", "2002.25", "-3.1"]
    );
    assert_eq!(column(&r.stdout, "episode"), ["100", "200", "300", "400"]);
}

#[test]
fn all_null_columns_read_as_missing() {
    let dir = TempDir::new("parquet-null-type");
    let null: ArrayRef = Arc::new(arrow_array::NullArray::new(2));
    let input = write_columns(
        dir.path(),
        "in.parquet",
        vec![
            ("dx1", texts(&["I21.9", "I50.9"])),
            ("poa1", null.clone()),
            ("age", null),
        ],
        2,
    );
    let csv = dir.write("in.csv", "dx1,poa1,age\nI21.9,,\nI50.9,,\n");
    // Charlson 1987: infarction 1, heart failure 1, counted only when
    // their indicator is one of --poa-values (missing is 'blank').
    for (values, expected) in [("Y", ["0", "0"]), ("Y,blank", ["1", "1"])] {
        let line = format!(
            "score {{}} --dx dx1 --poa poa* --poa-values {values} --age age \
             --index charlson:charlson1987"
        );
        let r = common::run(&line, &[s(&input)]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        assert_eq!(column(&r.stdout, "charlson_charlson1987"), expected);
        assert_eq!(column(&r.stdout, "charlson_charlson1987_age"), ["", ""]);
        assert!(r.stderr.contains("ages missing: 2"), "{}", r.stderr);
        assert!(r.stderr.contains("blank 2"), "{}", r.stderr);
        let reference = common::run(&line, &[&csv]);
        assert_eq!(r.stdout, reference.stdout);
        assert_eq!(r.stderr, reference.stderr);
    }
}

#[test]
fn fixed_size_binary_codes_read_as_their_bytes() {
    let dir = TempDir::new("parquet-fixed-binary");
    let codes = arrow_array::FixedSizeBinaryArray::try_from_sparse_iter_with_size(
        [Some(b"I219"), None, Some(b"I509")].into_iter(),
        4,
    )
    .unwrap();
    let input = write_columns(
        dir.path(),
        "in.parquet",
        vec![("dx1", Arc::new(codes) as ArrayRef)],
        2,
    );
    let r = common::run(
        "score {} --dx dx1 --index charlson:charlson1987",
        &[s(&input)],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    // Charlson 1987: infarction 1, nothing 0, heart failure 1.
    assert_eq!(column(&r.stdout, "charlson_charlson1987"), ["1", "0", "1"]);
}

#[test]
fn values_and_types_without_a_reading_stop_the_run_naming_column_and_row() {
    let dir = TempDir::new("parquet-unreadable-types");
    // An unsigned id beyond i64::MAX at row 8195: in the reader's second
    // batch of 8192 rows, named by its row in the file.
    let n = 8200;
    let mut ids: Vec<u64> = (0..n as u64).collect();
    ids[8194] = u64::MAX;
    let input = write_columns(
        dir.path(),
        "ids.parquet",
        vec![
            (
                "patient",
                Arc::new(arrow_array::UInt64Array::from(ids)) as ArrayRef,
            ),
            ("dx", texts(&vec!["I21.9"; n])),
        ],
        5000,
    );
    let out = dir.path().join("out.parquet");
    for to_parquet in [false, true] {
        let mut a = vec![
            "score",
            s(&input),
            "--layout",
            "long",
            "--id",
            "patient",
            "--dx",
            "dx",
        ];
        if to_parquet {
            a.extend(["-o", s(&out)]);
        }
        let r = morbus(&a);
        assert_eq!(r.code, 1, "{}", r.stderr);
        for part in [
            &format!("row 8195 of {}", input.display())[..],
            "column 'patient'",
            "18446744073709551615",
            "cast the column to text",
        ] {
            assert!(r.stderr.contains(part), "{part}: {}", r.stderr);
        }
        assert!(!out.exists());
    }

    // A decimal of 17 significant digits at row 2, read by a run with
    // history (ages) and by one without.
    let ages = decimals(&[Some(7000), Some(12_345_678_901_234_567), None], 20, 2);
    let input = write_columns(
        dir.path(),
        "ages.parquet",
        vec![
            ("patient", texts(&["a", "a", "b"])),
            ("day", dates(&["2020-01-01", "2020-02-01", "2020-01-01"])),
            ("dx", texts(&["I21.9", "I50.9", "I21.9"])),
            ("age", ages),
        ],
        2,
    );
    for extra in ["", " --id patient --date day --lookback 365"] {
        let line = format!("score {{}} --dx dx --age age{extra}");
        let r = common::run(&line, &[s(&input)]);
        assert_eq!(r.code, 1, "{}", r.stderr);
        for part in [
            &format!("row 2 of {}", input.display())[..],
            "column 'age'",
            "123456789012345.67",
            "significant digits",
            "cast the column to text",
        ] {
            assert!(r.stderr.contains(part), "{part}: {}", r.stderr);
        }
    }

    // A list column as a diagnosis column: refused before any row is read,
    // naming the column and its type.
    let mut lists = ListBuilder::new(StringBuilder::new());
    lists.values().append_value("I21.9");
    lists.append(true);
    let input = write_columns(
        dir.path(),
        "list.parquet",
        vec![("dx1", Arc::new(lists.finish()) as ArrayRef)],
        2,
    );
    for to_parquet in [false, true] {
        let mut a = vec!["score", s(&input), "--dx", "dx1"];
        if to_parquet {
            a.extend(["-o", s(&out)]);
        }
        let r = morbus(&a);
        assert_eq!(r.code, 1, "{}", r.stderr);
        for part in ["column 'dx1'", "holds lists", "List(", "cast the column"] {
            assert!(r.stderr.contains(part), "{part}: {}", r.stderr);
        }
        assert!(!out.exists());
    }
}

#[test]
fn columns_not_read_pass_through_whatever_their_type() {
    let dir = TempDir::new("parquet-unread-types");
    let mut tags = ListBuilder::new(StringBuilder::new());
    tags.values().append_value("x");
    tags.append(true);
    tags.append(false);
    tags.append(true);
    let times: ArrayRef = Arc::new(arrow_array::Time64MicrosecondArray::from(vec![
        Some(3_600_000_000),
        None,
        Some(0),
    ]));
    let durations: ArrayRef = Arc::new(arrow_array::DurationSecondArray::from(vec![
        Some(60),
        Some(-1),
        None,
    ]));
    let batch = RecordBatch::try_from_iter([
        ("tags", Arc::new(tags.finish()) as ArrayRef),
        ("patient", texts(&["a", "a", "b"])),
        ("time_of_day", times),
        ("day", dates(&["2020-01-01", "2020-02-01", "2020-01-01"])),
        ("stay", durations),
        ("dx1", texts(&["I21.9", "I50.9", "I50.9"])),
    ])
    .unwrap();
    let input = dir.path().join("in.parquet");
    write_parquet(&input, &batch, Some(2));
    let out = dir.path().join("out.parquet");
    for history in ["", " --id patient --date day --lookback 365"] {
        // Wide, as Parquet: the input's columns copied as they are.
        let line = format!("score {{}} --dx dx1 --index charlson:charlson1987{history} -o {{}}");
        let r = common::run(&line, &[s(&input), s(&out)]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        let (back, _) = read_parquet(&out);
        for k in 0..batch.num_columns() {
            assert_eq!(back.column(k).as_ref(), batch.column(k).as_ref(), "{k}");
        }
        // As text too (written, not read).
        let line = format!("score {{}} --dx dx1 --index charlson:charlson1987{history}");
        let r = common::run(&line, &[s(&input)]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        // Charlson 1987: infarction 1, heart failure 1; with lookback, a's
        // second episode counts the first's infarction.
        let expected = if history.is_empty() {
            ["1", "1", "1"]
        } else {
            ["1", "2", "1"]
        };
        assert_eq!(column(&r.stdout, "charlson_charlson1987"), expected);
    }
}
