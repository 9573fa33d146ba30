//! Ids, episode values and kept columns of a typed source (a Parquet
//! input) are told apart by their typed values, and the long layout's
//! output (and `explain`'s, with its labels) carries them back with the
//! input's values and types: two rows
//! are one patient exactly when their ids are equal values (`007` and `7`
//! are two, 2^53 and 2^53 + 1 are two, `-0.0` and `0.0` are one, NaN is
//! missing); a Parquet output gives back every kept value bit for bit
//! (`-0.0`, `0.1 + 0.2`, bytes that are not UTF-8), in memory and spilled;
//! a CSV output writes each value as a delimited extract holds it, the same
//! whether the run spilled, and the same as the run over that text.
//!
//! The scores are hand-worked: each test extract gives every row one code
//! of a distinct Charlson condition, so that a unit's `charlson_count`
//! (conditions over its patient's lookback) counts the rows of its patient
//! up to its date; I21 is myocardial infarction, I50 congestive heart
//! failure, J44 chronic pulmonary disease, E119 diabetes without
//! complications (Quan et al., Med Care 2005;43:1130-9, Table 1, from
//! memory).
#![cfg(feature = "parquet")]

mod common;

use std::path::Path;
use std::sync::Arc;

use arrow_array::builder::{
    BinaryBuilder, BooleanBuilder, Date32Builder, Float32Builder, Float64Builder, Int16Builder,
    Int32Builder, Int64Builder, LargeStringBuilder, StringBuilder, StringDictionaryBuilder,
};
use arrow_array::cast::AsArray;
use arrow_array::types::{Date32Type, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type};
use arrow_array::{Array, ArrayRef, RecordBatch};
use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use common::{column, morbus, write_parquet, Run, TempDir};

/// Four codes of four distinct Charlson conditions (see the module
/// documentation).
const CODES: [&str; 4] = ["I21", "I50", "J44", "E119"];

fn ok(args: &[&str]) -> Run {
    let r = morbus(args);
    assert_eq!(r.code, 0, "{args:?}: {}", r.stderr);
    r
}

fn read_parquet(path: &Path) -> RecordBatch {
    let file = std::fs::File::open(path).unwrap();
    let reader = ParquetRecordBatchReaderBuilder::try_new(file)
        .unwrap()
        .build()
        .unwrap();
    let batches: Vec<RecordBatch> = reader.map(Result::unwrap).collect();
    arrow_select::concat::concat_batches(&batches[0].schema(), &batches).unwrap()
}

/// The day of 2020-01-01 plus `d`.
fn day(d: i32) -> i32 {
    18_262 + d
}

/// One id column of a hand-worked extract: its Arrow array, its values as a
/// delimited extract holds them (empty: missing), and the patient each row
/// belongs to (`None`: no id, a patient of its own).
struct Ids {
    name: &'static str,
    array: ArrayRef,
    text: Vec<String>,
    patient: Vec<Option<usize>>,
}

/// Id columns of every kind the row model reads, each with values whose
/// text or floating-point reading would merge or split patients wrongly.
/// Rows are dated one day apart, in order.
fn id_columns() -> Vec<Ids> {
    let big = 1i64 << 53;
    let ints = [big, big + 1, -7, 7, big, big + 1, i64::MAX, 7];
    let mut b = Int64Builder::new();
    ints.iter().for_each(|&v| b.append_value(v));
    let int64 = Ids {
        name: "int64",
        array: Arc::new(b.finish()),
        text: ints.iter().map(|v| v.to_string()).collect(),
        // 2^53 and 2^53 + 1 are one number as a double: two patients here.
        patient: vec![
            Some(0),
            Some(1),
            Some(2),
            Some(3),
            Some(0),
            Some(1),
            Some(4),
            Some(3),
        ],
    };
    let small = [7, -7, 0, 7, 0, -7, 12, 12];
    let mut b = Int32Builder::new();
    small.iter().for_each(|&v| b.append_value(v));
    let int32 = Ids {
        name: "int32",
        array: Arc::new(b.finish()),
        text: small.iter().map(|v| v.to_string()).collect(),
        patient: vec![
            Some(0),
            Some(1),
            Some(2),
            Some(0),
            Some(2),
            Some(1),
            Some(3),
            Some(3),
        ],
    };
    // Dates as ids: 2020-02-29 twice, a day before 1970, a null.
    let days = [
        Some(day(59)),
        Some(-1),
        Some(day(59)),
        None,
        Some(0),
        Some(-1),
        Some(0),
        Some(day(60)),
    ];
    let mut b = Date32Builder::new();
    days.iter().for_each(|&v| b.append_option(v));
    let date = Ids {
        name: "date_id",
        array: Arc::new(b.finish()),
        text: vec![
            "2020-02-29",
            "1969-12-31",
            "2020-02-29",
            "",
            "1970-01-01",
            "1969-12-31",
            "1970-01-01",
            "2020-03-01",
        ]
        .into_iter()
        .map(String::from)
        .collect(),
        patient: vec![
            Some(0),
            Some(1),
            Some(0),
            None,
            Some(2),
            Some(1),
            Some(2),
            Some(3),
        ],
    };
    // -0.0 and 0.0 are one number; NaN and null are missing; 0.1 + 0.2 is
    // not 0.3; 3.0 is written 3.
    let floats = [
        Some(-0.0),
        Some(0.1 + 0.2),
        Some(f64::NAN),
        Some(0.0),
        Some(0.3),
        None,
        Some(3.0),
        Some(0.1 + 0.2),
    ];
    let mut b = Float64Builder::new();
    floats.iter().for_each(|&v| b.append_option(v));
    let float = Ids {
        name: "float64",
        array: Arc::new(b.finish()),
        text: vec![
            "0",
            "0.30000000000000004",
            "",
            "0",
            "0.3",
            "",
            "3",
            "0.30000000000000004",
        ]
        .into_iter()
        .map(String::from)
        .collect(),
        patient: vec![
            Some(0),
            Some(1),
            None,
            Some(0),
            Some(2),
            None,
            Some(3),
            Some(1),
        ],
    };
    // Text: leading zeros and spaces make other ids; blank is missing.
    let texts = ["007", "7", " 7", "007", "  ", "7", "x", "x"];
    let mut b = StringBuilder::new();
    texts.iter().for_each(|v| b.append_value(v));
    let utf8 = Ids {
        name: "utf8",
        array: Arc::new(b.finish()),
        text: texts.iter().map(|v| v.to_string()).collect(),
        patient: vec![
            Some(0),
            Some(1),
            Some(2),
            Some(0),
            None,
            Some(1),
            Some(3),
            Some(3),
        ],
    };
    let mut b = LargeStringBuilder::new();
    texts.iter().for_each(|v| b.append_value(v));
    let large = Ids {
        name: "large_utf8",
        array: Arc::new(b.finish()),
        ..clone_ids(&utf8)
    };
    let mut b = StringDictionaryBuilder::<Int32Type>::new();
    texts.iter().for_each(|v| b.append_value(v));
    let dict = Ids {
        name: "dictionary",
        array: Arc::new(b.finish()),
        ..clone_ids(&utf8)
    };
    vec![int64, int32, date, float, utf8, large, dict]
}

fn clone_ids(i: &Ids) -> Ids {
    Ids {
        name: i.name,
        array: i.array.clone(),
        text: i.text.clone(),
        patient: i.patient.clone(),
    }
}

/// The hand-worked count of each row (wide layout, lookback over the whole
/// history): the rows of its patient up to itself, each a condition of
/// its own (rows without an id: 1).
fn expected_counts(ids: &Ids) -> Vec<String> {
    (0..ids.patient.len())
        .map(|i| match ids.patient[i] {
            None => 1,
            Some(p) => (0..=i)
                .filter(|&j| ids.patient[j] == Some(p))
                .map(|j| CODES[j % 4])
                .collect::<std::collections::BTreeSet<_>>()
                .len(),
        })
        .map(|n| n.to_string())
        .collect()
}

/// `ids` with a date and a code per row, as Parquet and as the CSV a
/// delimited extract would hold.
fn write_extract(ids: &Ids, dir: &TempDir) -> (String, String) {
    let n = ids.text.len();
    let mut dates = Date32Builder::new();
    let mut codes = StringBuilder::new();
    for i in 0..n {
        dates.append_value(day(i as i32));
        codes.append_value(CODES[i % 4]);
    }
    let batch = RecordBatch::try_from_iter(vec![
        ("pid", ids.array.clone()),
        ("date", Arc::new(dates.finish()) as ArrayRef),
        ("dx", Arc::new(codes.finish()) as ArrayRef),
    ])
    .unwrap();
    let pq = dir.join(&format!("{}.parquet", ids.name));
    write_parquet(Path::new(&pq), &batch, Some(3));
    let mut csv = String::from("pid,date,dx\n");
    for i in 0..n {
        let mut iso = String::new();
        let d = chrono_like(day(i as i32));
        iso.push_str(&d);
        csv.push_str(&format!(
            "{},{iso},{}\n",
            quoted(&ids.text[i]),
            CODES[i % 4]
        ));
    }
    (pq, dir.write(&format!("{}.csv", ids.name), &csv))
}

fn quoted(v: &str) -> String {
    if v.contains(',') || v.contains('"') {
        format!("\"{}\"", v.replace('"', "\"\""))
    } else {
        v.to_string()
    }
}

/// 2020-01-DD for the first days of the test extracts (all in January).
fn chrono_like(days: i32) -> String {
    let d = days - day(0) + 1;
    assert!((1..=31).contains(&d));
    format!("2020-01-{d:02}")
}

#[test]
fn typed_ids_are_one_patient_exactly_when_equal() {
    let dir = TempDir::new("typed-ids");
    for ids in id_columns() {
        let (pq, csv) = write_extract(&ids, &dir);
        let expected = expected_counts(&ids);
        let base = [
            "--dx",
            "dx",
            "--id",
            "pid",
            "--date",
            "date",
            "--lookback",
            "all",
            "--index",
            "charlson:count",
        ];
        let run = |input: &str, memory: &str| {
            let mut a = vec!["score", input, "--memory", memory];
            a.extend_from_slice(&base);
            ok(&a)
        };
        let from_text = run(&csv, "1GiB");
        assert_eq!(
            column(&from_text.stdout, "charlson_count"),
            expected,
            "{}: the text extract",
            ids.name
        );
        for memory in ["1GiB", "0"] {
            let r = run(&pq, memory);
            assert_eq!(
                column(&r.stdout, "charlson_count"),
                expected,
                "{} --memory {memory}",
                ids.name
            );
            // The same summary as the text (rows without an id counted
            // alike); a spilled run says so besides.
            if memory == "1GiB" {
                assert_eq!(r.stderr, from_text.stderr, "{}", ids.name);
            }
        }
        // Long layout, one unit per patient: the ids written back as the
        // text holds them, in order of first appearance, the same from
        // Parquet (in memory and spilled) as from the text.
        let long = |input: &str, memory: &str| {
            let mut a = vec!["score", input, "--layout", "long", "--memory", memory];
            a.extend_from_slice(&base);
            ok(&a).stdout
        };
        let text_long = long(&csv, "1GiB");
        assert_eq!(long(&pq, "1GiB"), text_long, "{}: long", ids.name);
        assert_eq!(long(&pq, "0"), text_long, "{}: long, spilled", ids.name);
        // Units: one per patient with an id; rows without one each... as
        // the text run groups them (compared above); patients with an id
        // each appear once.
        let got = column(&text_long, "pid");
        let mut seen = Vec::new();
        for (i, p) in ids.patient.iter().enumerate() {
            if let Some(p) = p {
                if !seen.contains(p) {
                    seen.push(*p);
                    assert!(got.contains(&ids.text[i]), "{}: {:?}", ids.name, got);
                }
            }
        }
        let with_id = got.iter().filter(|v| !v.trim().is_empty()).count();
        assert_eq!(with_id, seen.len(), "{}: {got:?}", ids.name);
    }
}

/// A long extract whose units carry kept columns of every kind, with
/// values whose text does not give them back (`-0.0`, `0.1 + 0.2`, bytes
/// that are not UTF-8, 2^53 + 1, a `Float32` 0.1).
struct Kept {
    batch: RecordBatch,
    /// Per unit (in order of first appearance): its first row.
    first_rows: Vec<usize>,
}

const KEPT: [&str; 8] = [
    "weight", "label", "flag", "born", "small", "single", "ward", "big",
];

fn kept_extract(units: usize, rows_per_unit: usize) -> Kept {
    let big = 1i64 << 53;
    let weights = [-0.0, 0.1 + 0.2, 1e300, 5e-324, 2.5, 0.0, -1e-310];
    let mut pid = Int64Builder::new();
    let mut stay = Int32Builder::new();
    let mut date = Date32Builder::new();
    let mut dx = StringBuilder::new();
    let mut weight = Float64Builder::new();
    let mut label = BinaryBuilder::new();
    let mut flag = BooleanBuilder::new();
    let mut born = Date32Builder::new();
    let mut small = Int16Builder::new();
    let mut single = Float32Builder::new();
    let mut ward = StringDictionaryBuilder::<Int32Type>::new();
    let mut bigs = Int64Builder::new();
    let mut first_rows = vec![usize::MAX; units];
    // Rows of the units interleaved: unit u's r-th row is row r * units + u
    // (units appear in order); every unit's kept values are the same on each
    // of its rows, null on its first row for some (the first non-empty one
    // counts).
    for r in 0..rows_per_unit {
        for u in 0..units {
            let row = r * units + u;
            if first_rows[u] == usize::MAX {
                first_rows[u] = row;
            }
            // Patients: two units (episodes 1 and 2) per patient.
            pid.append_value(big + (u / 2) as i64);
            stay.append_value((u % 2) as i32 + 1);
            date.append_value(day((r * 3 + u % 2) as i32));
            dx.append_value(CODES[(r + u) % 4]);
            let null_first = r == 0 && u % 3 == 0;
            if null_first {
                weight.append_null();
                label.append_null();
            } else {
                weight.append_value(weights[u % weights.len()]);
                label.append_value([0xff, b'a' + (u % 26) as u8, 0x00, 0xc3]);
            }
            flag.append_value(u % 2 == 0);
            born.append_value(-20_000 + u as i32);
            small.append_value(-(u as i16));
            single.append_value(0.1f32 * u as f32);
            ward.append_value(format!("ward {}", u % 5));
            bigs.append_value(big + 1 + u as i64);
        }
    }
    let batch = RecordBatch::try_from_iter(vec![
        ("pid", Arc::new(pid.finish()) as ArrayRef),
        ("stay", Arc::new(stay.finish()) as ArrayRef),
        ("date", Arc::new(date.finish()) as ArrayRef),
        ("dx", Arc::new(dx.finish()) as ArrayRef),
        ("weight", Arc::new(weight.finish()) as ArrayRef),
        ("label", Arc::new(label.finish()) as ArrayRef),
        ("flag", Arc::new(flag.finish()) as ArrayRef),
        ("born", Arc::new(born.finish()) as ArrayRef),
        ("small", Arc::new(small.finish()) as ArrayRef),
        ("single", Arc::new(single.finish()) as ArrayRef),
        ("ward", Arc::new(ward.finish()) as ArrayRef),
        ("big", Arc::new(bigs.finish()) as ArrayRef),
    ])
    .unwrap();
    Kept { batch, first_rows }
}

/// Whether two arrays hold the same values bit for bit (floating-point
/// numbers by their bits, so that `-0.0` is not `0.0`).
fn same_bits(a: &dyn Array, b: &dyn Array) -> bool {
    if a.data_type() != b.data_type() || a.len() != b.len() {
        return false;
    }
    if let DataType::Dictionary(_, v) = a.data_type() {
        // Dictionaries by their values (the keys may number them apart).
        let (a, b) = (
            arrow_cast::cast(a, v).unwrap(),
            arrow_cast::cast(b, v).unwrap(),
        );
        return same_bits(a.as_ref(), b.as_ref());
    }
    (0..a.len()).all(|i| {
        a.is_null(i) == b.is_null(i)
            && (a.is_null(i)
                || match a.data_type() {
                    DataType::Float64 => {
                        a.as_primitive::<Float64Type>().value(i).to_bits()
                            == b.as_primitive::<Float64Type>().value(i).to_bits()
                    }
                    DataType::Float32 => {
                        a.as_primitive::<Float32Type>().value(i).to_bits()
                            == b.as_primitive::<Float32Type>().value(i).to_bits()
                    }
                    _ => a.slice(i, 1).to_data() == b.slice(i, 1).to_data(),
                })
    })
}

/// What the long layout's output should hold in column `name`: each
/// unit's first non-null value, taken from the input.
fn expected_column(k: &Kept, name: &str, units: usize) -> ArrayRef {
    let a = k.batch.column_by_name(name).unwrap();
    let rows: Vec<u64> = (0..units)
        .map(|u| {
            let mut r = k.first_rows[u];
            while a.is_null(r) {
                r += units;
            }
            r as u64
        })
        .collect();
    arrow_select::take::take(a.as_ref(), &arrow_array::UInt64Array::from(rows), None).unwrap()
}

#[test]
fn the_long_layout_gives_typed_ids_and_kept_values_back_exactly() {
    let dir = TempDir::new("typed-kept");
    let units = 14;
    let k = kept_extract(units, 5);
    let pq = dir.join("kept.parquet");
    // Row groups of 9 rows: batches cut units apart.
    write_parquet(Path::new(&pq), &k.batch, Some(9));
    let keep = KEPT.join(",");
    let opts = [
        "--layout",
        "long",
        "--dx",
        "dx",
        "--id",
        "pid",
        "--episode",
        "stay",
        "--date",
        "date",
        "--lookback",
        "365",
        "--index",
        "charlson:count",
        "--keep",
        &keep,
    ];
    let mut csv_outputs = Vec::new();
    for memory in ["1GiB", "0"] {
        let out = dir.join(&format!("out-{memory}.parquet"));
        let mut a = vec!["score", &pq, "-o", &out, "--memory", memory];
        a.extend_from_slice(&opts);
        let r = ok(&a);
        if memory == "0" {
            assert!(r.stderr.contains("temporary files"), "{}", r.stderr);
        }
        let got = read_parquet(Path::new(&out));
        assert_eq!(got.num_rows(), units, "--memory {memory}");
        // The id and episode: each unit's, typed as the input's (2^53 + n
        // as Int64, not as text or a double).
        for name in ["pid", "stay"] {
            let want = expected_column(&k, name, units);
            let have = got.column_by_name(name).unwrap();
            assert!(
                same_bits(have.as_ref(), want.as_ref()),
                "--memory {memory}, {name}: {have:?} against {want:?}"
            );
        }
        let pid = got
            .column_by_name("pid")
            .unwrap()
            .as_primitive::<Int64Type>();
        assert_eq!(pid.value(1), (1i64 << 53), "units 0 and 1 are one patient");
        assert_eq!(pid.value(2), (1i64 << 53) + 1);
        // Every kept column: the first non-null value of each unit, with
        // the input's type and bits.
        for name in KEPT {
            let want = expected_column(&k, name, units);
            let have = got.column_by_name(name).unwrap();
            assert!(
                same_bits(have.as_ref(), want.as_ref()),
                "--memory {memory}, {name}: {have:?} against {want:?}"
            );
        }
        let weight = got
            .column_by_name("weight")
            .unwrap()
            .as_primitive::<Float64Type>();
        assert!(weight.value(0).is_sign_negative() && weight.value(0) == 0.0);
        assert_eq!(weight.value(1), 0.1 + 0.2);
        assert_eq!(
            got.column_by_name("small")
                .unwrap()
                .as_primitive::<Int16Type>()
                .value(3),
            -3
        );
        assert_eq!(
            got.column_by_name("born")
                .unwrap()
                .as_primitive::<Date32Type>()
                .value(0),
            -20_000
        );
        assert_eq!(
            got.column_by_name("ward").unwrap().data_type(),
            k.batch.column_by_name("ward").unwrap().data_type()
        );
        // The same run to CSV: every value as a delimited extract holds
        // it (a number without a fraction as a whole number, -0.0 as 0, the
        // shortest text that reads back as the number, ISO dates,
        // true/false, bytes as they are).
        let mut a = vec!["score", &pq, "--memory", memory];
        a.extend_from_slice(&opts);
        let o = common::pipe(&a, b"");
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        csv_outputs.push(o.stdout);
    }
    assert!(
        csv_outputs[0] == csv_outputs[1],
        "CSV output, spilled or not"
    );
    let text = String::from_utf8_lossy(&csv_outputs[0]).into_owned();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(
        lines[0],
        "pid,stay,weight,label,flag,born,small,single,ward,big,charlson_count"
    );
    // Unit 0: patient 2^53, episode 1; its weight -0.0 (from its second
    // row), written 0.
    assert!(
        lines[1].starts_with("9007199254740992,1,0,"),
        "{}",
        lines[1]
    );
    assert!(
        lines[1].contains(",true,1915-03-31,0,0,ward 0,9007199254740993,"),
        "{}",
        lines[1]
    );
    // Unit 1: 0.1 + 0.2 in its shortest round-trip form; unit 2: 1e300 as
    // its digits.
    assert!(
        lines[2].starts_with("9007199254740992,2,0.30000000000000004,"),
        "{}",
        lines[2]
    );
    assert!(
        lines[3].starts_with(&format!("9007199254740993,1,{},", 1e300)),
        "{}",
        lines[3]
    );
    // Unit 4: a Float32 0.4, read as the double it is.
    assert!(
        lines[5].contains(&format!(",{},", f64::from(0.1f32 * 4.0))),
        "{}",
        lines[5]
    );
}

/// `explain -o out.parquet` of a Parquet input gives each record its
/// episode's id, episode and label values with the input's types and
/// values (handed to the output typed, never as text), in memory and
/// spilled: an `Int64` id 2^53 + 1 (a double would make it 2^53), a
/// `Date32` episode column, a `Float64` label with `-0.0` (whose text is
/// `0`) and `0.1 + 0.2`, and nulls. Its CSV output writes
/// the same values as a delimited extract holds them, spilled or not.
///
/// Hand-worked, `--lookback 365`, one point per condition
/// (`charlson:count`); episodes in input order (the one of each output
/// record is its `row`, its first row):
///
/// | row | pid        | stay       | dx   | note       | episode                |
/// |-----|------------|------------|------|------------|------------------------|
/// | 1   | 2^53 + 1   | 2020-01-01 | I21  | -0.0       | A                      |
/// | 2   | 2^53 + 1   | 2020-02-10 | I50  | null       | B                      |
/// | 3   | 2^53       | 2020-01-01 | J44  | 0.1 + 0.2  | C                      |
/// | 4   | null       | 2020-01-06 | E119 | null       | D (no id: on its own)  |
/// | 5   | 2^53 + 1   | 2020-02-10 | J44  | 2.5        | B                      |
///
/// A: I21 counted, total (2 records). B (its label from its first row
/// with one: row 5): I50 and J44 counted, then A's I21 (40 days earlier)
/// counted, total (4). C: J44, total (2). D: E119, total (2).
#[test]
fn explain_gives_typed_ids_episodes_and_labels_back_exactly() {
    let dir = TempDir::new("typed-explain");
    let p1 = (1i64 << 53) + 1;
    let p0 = 1i64 << 53;
    let third = 0.1 + 0.2;
    let batch = RecordBatch::try_from_iter(vec![
        (
            "pid",
            Arc::new(arrow_array::Int64Array::from(vec![
                Some(p1),
                Some(p1),
                Some(p0),
                None,
                Some(p1),
            ])) as ArrayRef,
        ),
        (
            "stay",
            Arc::new(arrow_array::Date32Array::from(vec![
                day(0),
                day(40),
                day(0),
                day(5),
                day(40),
            ])) as ArrayRef,
        ),
        (
            "date",
            Arc::new(arrow_array::Date32Array::from(vec![
                day(0),
                day(40),
                day(0),
                day(5),
                day(40),
            ])) as ArrayRef,
        ),
        (
            "dx",
            Arc::new(arrow_array::StringArray::from(vec![
                "I21", "I50", "J44", "E119", "J44",
            ])) as ArrayRef,
        ),
        (
            "note",
            Arc::new(arrow_array::Float64Array::from(vec![
                Some(-0.0),
                None,
                Some(third),
                None,
                Some(2.5),
            ])) as ArrayRef,
        ),
    ])
    .unwrap();
    let pq = dir.join("explain.parquet");
    // Row groups of 2 rows: episode B's rows in two batches.
    write_parquet(Path::new(&pq), &batch, Some(2));
    let opts = [
        "--layout",
        "long",
        "--dx",
        "dx",
        "--id",
        "pid",
        "--episode",
        "stay",
        "--date",
        "date",
        "--lookback",
        "365",
        "--index",
        "charlson:count",
        "--label",
        "note",
    ];
    // Per output record: its episode's row, id, episode and note.
    let (a, b, c, d) = (
        (1, Some(p1), day(0), Some(-0.0)),
        (2, Some(p1), day(40), Some(2.5)),
        (3, Some(p0), day(0), Some(third)),
        (4, None, day(5), None),
    );
    let want = [a, a, b, b, b, b, c, c, d, d];
    let mut csv_outputs = Vec::new();
    let mut files = Vec::new();
    for (memory, threads) in [("1GiB", "1"), ("0", "1"), ("0", "2")] {
        let what = format!("--memory {memory} --threads {threads}");
        let out = dir.join(&format!("explained-{memory}-{threads}.parquet"));
        let mut args = vec![
            "explain",
            &pq,
            "-o",
            &out,
            "--memory",
            memory,
            "--threads",
            threads,
        ];
        args.extend_from_slice(&opts);
        let r = ok(&args);
        if memory == "0" {
            assert!(r.stderr.contains("temporary files"), "{}", r.stderr);
        }
        files.push(std::fs::read(&out).unwrap());
        let got = read_parquet(Path::new(&out));
        assert_eq!(got.num_rows(), want.len(), "{what}");
        let types: Vec<(&str, &DataType)> = got
            .schema_ref()
            .fields()
            .iter()
            .take(4)
            .map(|f| (f.name().as_str(), f.data_type()))
            .collect();
        assert_eq!(
            types,
            [
                ("pid", &DataType::Int64),
                ("stay", &DataType::Date32),
                ("note", &DataType::Float64),
                ("row", &DataType::Int64),
            ],
            "{what}"
        );
        let pid = got.column(0).as_primitive::<Int64Type>();
        let stay = got.column(1).as_primitive::<Date32Type>();
        let note = got.column(2).as_primitive::<Float64Type>();
        let row = got.column(3).as_primitive::<Int64Type>();
        for (i, &(r, id, ep, n)) in want.iter().enumerate() {
            let at = format!("{what}, record {}", i + 1);
            assert_eq!(row.value(i), r, "{at}: row");
            assert_eq!(pid.is_valid(i).then(|| pid.value(i)), id, "{at}: pid");
            assert!(stay.is_valid(i), "{at}: stay");
            assert_eq!(stay.value(i), ep, "{at}: stay");
            // Numbers by their bits: -0.0 is not 0.0.
            assert_eq!(
                note.is_valid(i).then(|| note.value(i).to_bits()),
                n.map(f64::to_bits),
                "{at}: note"
            );
        }
        // The totals (one per episode) hand-worked above.
        let status = got.column_by_name("status").unwrap().as_string::<i32>();
        let weight = got
            .column_by_name("weight")
            .unwrap()
            .as_primitive::<Int64Type>();
        let totals: Vec<(i64, i64)> = (0..got.num_rows())
            .filter(|&i| status.value(i) == "total")
            .map(|i| (row.value(i), weight.value(i)))
            .collect();
        assert_eq!(totals, [(1, 1), (2, 3), (3, 1), (4, 1)], "{what}");

        let mut args = vec!["explain", &pq, "--memory", memory, "--threads", threads];
        args.extend_from_slice(&opts);
        let o = common::pipe(&args, b"");
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        csv_outputs.push(o.stdout);
    }
    // The same files and the same text, spilled or not.
    assert!(files.iter().all(|f| *f == files[0]), "Parquet output");
    assert!(
        csv_outputs.iter().all(|o| *o == csv_outputs[0]),
        "CSV output"
    );
    // The CSV: each value as a delimited extract holds it (-0.0 as 0, 0.1 +
    // 0.2 in its shortest round-trip form, ISO dates, nulls empty).
    let text = String::from_utf8_lossy(&csv_outputs[0]).into_owned();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 1 + want.len(), "{text}");
    assert!(
        lines[0].starts_with("pid,stay,note,row,index,source_row,"),
        "{}",
        lines[0]
    );
    let starts = [
        "9007199254740993,2020-01-01,0,1,charlson:count,1,",
        "9007199254740993,2020-02-10,2.5,2,charlson:count,2,",
        "9007199254740992,2020-01-01,0.30000000000000004,3,charlson:count,3,",
        ",2020-01-06,,4,charlson:count,4,",
    ];
    for (line, start) in [1, 3, 7, 9].into_iter().zip(starts) {
        assert!(lines[line].starts_with(start), "{}", lines[line]);
    }
}

/// An id column of [`id_columns`] as a frame (the R and Python packages'
/// route), with the dates and codes of [`write_extract`].
struct Frame<'a> {
    ids: &'a Ids,
    codes: Vec<String>,
}

impl morbus::frame::Columns for Frame<'_> {
    fn rows(&self) -> usize {
        self.codes.len()
    }
    fn kind(&self, col: usize) -> morbus::rows::Kind {
        use morbus::rows::Kind;
        match (col, self.ids.array.data_type()) {
            (0, DataType::Int64 | DataType::Int32) => Kind::Integer,
            (0, DataType::Float64) => Kind::Number,
            (0, DataType::Date32) | (1, _) => Kind::Date,
            _ => Kind::Text,
        }
    }
    fn field(&self, col: usize, row: usize) -> morbus::rows::Field<'_> {
        use morbus::rows::Field;
        let a = &self.ids.array;
        match col {
            0 if a.is_null(row) => Field::Null,
            0 => match a.data_type() {
                DataType::Int64 => Field::Integer(a.as_primitive::<Int64Type>().value(row)),
                DataType::Int32 => Field::Integer(a.as_primitive::<Int32Type>().value(row).into()),
                DataType::Date32 => Field::Date(a.as_primitive::<Date32Type>().value(row).into()),
                DataType::Float64 => Field::Number(a.as_primitive::<Float64Type>().value(row)),
                DataType::Utf8 => Field::Text(a.as_string::<i32>().value(row).as_bytes()),
                DataType::LargeUtf8 => Field::Text(a.as_string::<i64>().value(row).as_bytes()),
                _ => {
                    let d = a.as_dictionary::<Int32Type>();
                    let k = d.keys().value(row) as usize;
                    Field::Text(d.values().as_string::<i32>().value(k).as_bytes())
                }
            },
            1 => Field::Date(day(row as i32).into()),
            _ => Field::Text(self.codes[row].as_bytes()),
        }
    }
}

#[test]
fn frames_key_typed_ids_by_their_values() {
    use morbus::lists::Catalogue;
    use morbus::pipeline::{Header, ScoreConfig};
    use morbus::score::{Engine, IndexSpec, ScoreOptions};
    let specs = IndexSpec::parse_many("charlson:count").unwrap();
    let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
    let cfg = ScoreConfig {
        dx: vec!["dx".into()],
        id: Some("pid".into()),
        date: Some("date".into()),
        lookback: Some(3650),
        ..ScoreConfig::default()
    };
    let header = Header {
        names: vec!["pid".into(), "date".into(), "dx".into()],
    };
    for ids in id_columns() {
        let frame = Frame {
            ids: &ids,
            codes: (0..ids.text.len())
                .map(|i| CODES[i % 4].to_string())
                .collect(),
        };
        let scored = morbus::frame::score(&engine, &cfg, &header, &frame, 1);
        if ids.array.data_type() == &DataType::Date32 {
            // A frame's ids are text or numbers.
            let e = scored.err().unwrap().to_string();
            assert!(e.contains("must hold text or whole numbers"), "{e}");
            continue;
        }
        let scored = scored.unwrap();
        let counts: Vec<String> = match &scored.columns[0] {
            morbus::frame::ScoreColumn::Int(v) => {
                v.iter().map(|c| c.unwrap().to_string()).collect()
            }
            other => panic!("{other:?}"),
        };
        assert_eq!(counts, expected_counts(&ids), "{}", ids.name);
        let without = ids.patient.iter().filter(|p| p.is_none()).count() as u64;
        assert_eq!(scored.summary.missing_ids, without, "{}", ids.name);
    }
}
