//! One row model, three sources: the same generated extract gives the same
//! scores, `explain` records, `compare` results and summary counts whether
//! it is read as
//! delimited text, as a data frame's typed columns (`frame::Columns`, what
//! the R package hands over) or as a Parquet file's record batches, for the
//! wide and long layouts, `--episode`, lookback of 365 days and of the
//! whole history, `--window earlier-only` and a window per list, with the
//! primary-diagnosis and present-on-admission rules on; and without
//! history (the plain scorer over typed rows, `pipeline::plain`), wide and
//! long, with present on admission, the primary diagnosis, an edition,
//! `--strict` and ages, through every output (CSV and Parquet).
//!
//! The text path is the reference (checked against hand-worked histories
//! in tests/history.rs and tests/properties.rs); this test proves that the
//! typed sources read every value as the text reader does. The extract is
//! invented and seeded: messy and invalid codes, missing and unreadable
//! dates and ages, several episodes per patient (some on the same day),
//! and, in the long layout, rows of one episode that disagree on its age.
//! It comes in two forms: every column text, and typed columns (integer
//! ids, dates as dates, ages as floating-point numbers, primary flags as
//! true/false) with the same values written as text for the CSV.

#![cfg(feature = "parquet")]

mod common;

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::{
    ArrayRef, BooleanArray, Date32Array, Float64Array, Int64Array, RecordBatch, StringArray,
};
use morbus::compare::{self, CompareOptions};
use morbus::frame::{self, Columns, Explained, Field, Kind, ScoreColumn};
use morbus::io::parquet::{
    score_plain, JoinedText, OutputColumns, ParquetRows, ParquetSink, Source, TypedOutput,
};
use morbus::lists::Catalogue;
use morbus::pipeline::explain::ExplainFormat;
use morbus::pipeline::history::Input;
use morbus::pipeline::{
    explain_stream, score_stream, Edition, Header, Layout, ScoreConfig, Summary, WindowScope,
};
use morbus::score::{Engine, IndexSpec, ScoreOptions};
use morbus::Error;

use common::{Lcg, TempDir};

/// A column of the generated extract.
#[derive(Clone)]
enum Col {
    Text(Vec<Option<String>>),
    Int(Vec<Option<i64>>),
    Num(Vec<Option<f64>>),
    Bool(Vec<Option<bool>>),
    Date(Vec<Option<i64>>),
}

struct Table {
    names: Vec<String>,
    cols: Vec<Col>,
}

impl Columns for Table {
    fn rows(&self) -> usize {
        match &self.cols[0] {
            Col::Text(v) => v.len(),
            Col::Int(v) => v.len(),
            Col::Num(v) => v.len(),
            Col::Bool(v) => v.len(),
            Col::Date(v) => v.len(),
        }
    }
    fn kind(&self, col: usize) -> Kind {
        match &self.cols[col] {
            Col::Text(_) => Kind::Text,
            Col::Int(_) => Kind::Integer,
            Col::Num(_) => Kind::Number,
            Col::Bool(_) => Kind::Logical,
            Col::Date(_) => Kind::Date,
        }
    }
    fn field(&self, col: usize, row: usize) -> Field<'_> {
        match &self.cols[col] {
            Col::Text(v) => v[row]
                .as_deref()
                .map_or(Field::Null, |t| Field::Text(t.as_bytes())),
            Col::Int(v) => v[row].map_or(Field::Null, Field::Integer),
            Col::Num(v) => v[row].map_or(Field::Null, Field::Number),
            Col::Bool(v) => v[row].map_or(Field::Null, Field::Logical),
            Col::Date(v) => v[row].map_or(Field::Null, Field::Date),
        }
    }
}

impl Table {
    /// Whether any column is not text.
    fn typed(&self) -> bool {
        self.cols.iter().any(|c| !matches!(c, Col::Text(_)))
    }

    fn header(&self) -> Header {
        Header {
            names: self.names.clone(),
        }
    }

    /// The same values as CSV text (nulls and NaN empty, dates ISO,
    /// numbers in Rust's shortest form).
    fn csv(&self) -> Vec<u8> {
        let mut w = csv::Writer::from_writer(Vec::new());
        w.write_record(&self.names).unwrap();
        for r in 0..self.rows() {
            let rec: Vec<String> = self
                .cols
                .iter()
                .map(|c| match c {
                    Col::Text(v) => v[r].clone().unwrap_or_default(),
                    Col::Int(v) => v[r].map_or(String::new(), |x| x.to_string()),
                    // NaN is a missing number (as in R and pandas).
                    Col::Num(v) => v[r]
                        .filter(|x| !x.is_nan())
                        .map_or(String::new(), |x| x.to_string()),
                    Col::Bool(v) => v[r].map_or(String::new(), |x| x.to_string()),
                    Col::Date(v) => v[r].map_or(String::new(), |d| {
                        let mut t = Vec::new();
                        morbus::pipeline::dates::write_iso_date(d, &mut t);
                        String::from_utf8(t).unwrap()
                    }),
                })
                .collect();
            w.write_record(&rec).unwrap();
        }
        w.into_inner().unwrap()
    }

    /// The same values as Parquet with typed columns, in row groups of 37
    /// rows (so that batches and groups do not line up with episodes).
    fn parquet(&self, path: &Path) {
        let arrays: Vec<(String, ArrayRef)> = self
            .names
            .iter()
            .zip(&self.cols)
            .map(|(n, c)| {
                let a: ArrayRef = match c {
                    Col::Text(v) => Arc::new(StringArray::from(v.clone())),
                    Col::Int(v) => Arc::new(Int64Array::from(v.clone())),
                    Col::Num(v) => Arc::new(Float64Array::from(v.clone())),
                    Col::Bool(v) => Arc::new(BooleanArray::from(v.clone())),
                    Col::Date(v) => Arc::new(Date32Array::from(
                        v.iter().map(|d| d.map(|d| d as i32)).collect::<Vec<_>>(),
                    )),
                };
                (n.clone(), a)
            })
            .collect();
        let batch = RecordBatch::try_from_iter(arrays).unwrap();
        common::write_parquet(path, &batch, Some(37));
    }
}

/// Seeded test data: the top 31 bits of the generator's state.
fn rng(seed: u64) -> Lcg {
    Lcg::new(seed, 31)
}

/// Codes as extracts hold them: valid codes of many conditions, written
/// with dots or without, lower case, padded, with filler; invalid values.
const CODES: &[&str] = &[
    "I21.9",
    "i21.9",
    "I50.0",
    " I50 ",
    "E11.2",
    "E11.9",
    "E112",
    "C78.0",
    "C18.7",
    "F00.1",
    "R41.0",
    "J44.9",
    "N18.5",
    "I10",
    "E66.9",
    "K70.3",
    "R29.6",
    "W19",
    "Z99.1",
    "G30.9",
    "I63.9",
    "B20",
    "F32.9",
    "I48",
    "C34.1",
    "E11.2-",
    "I2l.9",
    "??",
    "Q",
    "not a code",
    "",
];
const POA: &[&str] = &["Y", "Y", "y", "N", "U", "W", "1", "", "E"];
const TEXT_DATES_BAD: &[&str] = &["", "2021-13-45", "yesterday", "03/04/2021"];
const TEXT_AGES: &[&str] = &["80", "79.5", "", "abc", "150", " 67 ", "-3", "45"];
const NUM_AGES: &[Option<f64>] = &[
    Some(80.0),
    Some(79.5),
    None,
    Some(-3.0),
    Some(150.0),
    Some(67.0),
    Some(45.0),
    Some(f64::NAN),
];

/// Day 19000 is 2022-01-08.
const BASE_DAY: i64 = 19_000;

fn iso(d: i64) -> String {
    let mut t = Vec::new();
    morbus::pipeline::dates::write_iso_date(d, &mut t);
    String::from_utf8(t).unwrap()
}

/// The wide extract: one row per episode. `typed`: integer ids, dates as
/// dates (an unreadable one becomes missing), ages as numbers.
fn wide(typed: bool) -> Table {
    let mut r = rng(20_261_203);
    let mut patient = Vec::new();
    let mut date_text = Vec::new();
    let mut date_day = Vec::new();
    let mut age_text = Vec::new();
    let mut age_num = Vec::new();
    let mut dx: Vec<Vec<Option<String>>> = vec![Vec::new(); 4];
    let mut poa: Vec<Vec<Option<String>>> = vec![Vec::new(); 4];
    for p in 0..60i64 {
        let episodes = 1 + r.below(6);
        let mut day = BASE_DAY + r.below(300) as i64;
        for _ in 0..episodes {
            patient.push(p);
            // Some on the same day, some a few days, some a year or more on.
            day += [0, 0, 3, 40, 200, 364, 366, 800][r.below(8) as usize];
            if r.below(10) == 0 {
                let bad = r.pick(TEXT_DATES_BAD);
                date_text.push((!bad.is_empty()).then(|| bad.to_string()));
                date_day.push(None);
            } else {
                date_text.push(Some(iso(day)));
                date_day.push(Some(day));
            }
            let a = r.pick(TEXT_AGES);
            age_text.push((!a.is_empty()).then(|| a.to_string()));
            // NaN too: every source reads it as missing (the CSV of the
            // typed table writes it empty).
            age_num.push(NUM_AGES[r.below(NUM_AGES.len() as u64) as usize]);
            for k in 0..4 {
                let c = if k > 0 && r.below(3) == 0 {
                    ""
                } else {
                    r.pick(CODES)
                };
                dx[k].push((!c.is_empty()).then(|| c.to_string()));
                let i = r.pick(POA);
                poa[k].push((!i.is_empty()).then(|| i.to_string()));
            }
        }
    }
    let mut names = vec!["patient".to_string(), "admitted".into(), "age".into()];
    let mut cols = if typed {
        vec![
            Col::Int(patient.iter().map(|&p| Some(1000 + p)).collect()),
            Col::Date(date_day),
            Col::Num(age_num),
        ]
    } else {
        vec![
            Col::Text(patient.iter().map(|p| Some(format!("P{p:03}"))).collect()),
            Col::Text(date_text),
            Col::Text(age_text),
        ]
    };
    for (k, d) in dx.into_iter().enumerate() {
        names.push(format!("dx{}", k + 1));
        cols.push(Col::Text(d));
    }
    for (k, i) in poa.into_iter().enumerate() {
        names.push(format!("poa{}", k + 1));
        cols.push(Col::Text(i));
    }
    Table { names, cols }
}

/// The long extract: one row per code; an episode's rows share its date,
/// and some give another age.
fn long(typed: bool) -> Table {
    let mut r = rng(5_150_001);
    let (mut patient, mut episode, mut date_text, mut date_day) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut age_text, mut age_num, mut code, mut primary_text, mut primary_bool, mut poa) = (
        Vec::new(),
        Vec::new(),
        Vec::new(),
        Vec::new(),
        Vec::new(),
        Vec::new(),
    );
    let mut n = 0;
    for p in 0..50i64 {
        let episodes = 1 + r.below(5);
        let mut day = BASE_DAY + r.below(300) as i64;
        for _ in 0..episodes {
            n += 1;
            day += [0, 2, 30, 180, 365, 700][r.below(6) as usize];
            let bad_date = r.below(12) == 0;
            let bad = r.pick(TEXT_DATES_BAD);
            let a = r.below(TEXT_AGES.len() as u64) as usize;
            for k in 0..1 + r.below(4) {
                patient.push(p);
                episode.push(Some(format!("E{n:04}")));
                if bad_date {
                    date_text.push((!bad.is_empty()).then(|| bad.to_string()));
                    date_day.push(None);
                } else {
                    date_text.push(Some(iso(day)));
                    date_day.push(Some(day));
                }
                // Now and then a row of the episode gives another age.
                let a = if r.below(8) == 0 { (a + 1) % 8 } else { a };
                age_text.push((!TEXT_AGES[a].is_empty()).then(|| TEXT_AGES[a].to_string()));
                age_num.push(NUM_AGES[a]);
                let c = r.pick(CODES);
                code.push((!c.is_empty()).then(|| c.to_string()));
                primary_text.push(Some(if k == 0 { "1" } else { "0" }.to_string()));
                primary_bool.push(Some(k == 0));
                let i = r.pick(POA);
                poa.push((!i.is_empty()).then(|| i.to_string()));
            }
        }
    }
    let names = [
        "patient", "episode", "admitted", "age", "code", "primary", "poa",
    ]
    .map(String::from)
    .to_vec();
    let cols = if typed {
        vec![
            Col::Int(patient.iter().map(|&p| Some(7000 + p)).collect()),
            Col::Text(episode),
            Col::Date(date_day),
            Col::Num(age_num),
            Col::Text(code),
            Col::Bool(primary_bool),
            Col::Text(poa),
        ]
    } else {
        vec![
            Col::Text(patient.iter().map(|p| Some(format!("Q{p:02}"))).collect()),
            Col::Text(episode),
            Col::Text(date_text),
            Col::Text(age_text),
            Col::Text(code),
            Col::Text(primary_text),
            Col::Text(poa),
        ]
    };
    Table { names, cols }
}

fn engine() -> Engine {
    let specs =
        IndexSpec::parse_many("charlson:quan2011,elixhauser:vanwalraven2009,hfrs:gilbert2018")
            .unwrap();
    let options = ScoreOptions {
        age: true,
        ..ScoreOptions::default()
    };
    Engine::new(&Catalogue::builtin(), &specs, options).unwrap()
}

/// The runs compared, by name.
fn configs(layout: Layout) -> Vec<(&'static str, ScoreConfig)> {
    let base = ScoreConfig {
        layout,
        id: Some("patient".into()),
        date: Some("admitted".into()),
        age: Some("age".into()),
        exclude_primary: true,
        poa: Some(match layout {
            Layout::Wide => "poa*".into(),
            Layout::Long => "poa".into(),
        }),
        poa_values: morbus::pipeline::DEFAULT_POA_VALUES
            .iter()
            .map(|v| v.to_string())
            .collect(),
        max_unreadable_dates: 100.0,
        dx: vec![match layout {
            Layout::Wide => "dx*".into(),
            Layout::Long => "code".into(),
        }],
        primary: (layout == Layout::Long).then(|| "primary".into()),
        episode: (layout == Layout::Long).then(|| "episode".into()),
        ..ScoreConfig::default()
    };
    let mut out = vec![
        (
            "lookback 365",
            ScoreConfig {
                lookback: Some(365),
                ..base.clone()
            },
        ),
        (
            "lookback all, earlier only",
            ScoreConfig {
                lookback: Some(u32::MAX),
                window: WindowScope::EarlierOnly,
                ..base.clone()
            },
        ),
        (
            "a window per list",
            ScoreConfig {
                lookback_lists: vec![("charlson".into(), 365), ("hfrs".into(), 730)],
                ..base.clone()
            },
        ),
    ];
    if layout == Layout::Long {
        // Without --episode: one unit per patient, dated by its first row.
        out.push((
            "long without episodes, lookback all",
            ScoreConfig {
                episode: None,
                lookback: Some(u32::MAX),
                ..base.clone()
            },
        ));
    }
    out
}

fn records(csv_text: &[u8]) -> Vec<Vec<String>> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .from_reader(csv_text)
        .records()
        .map(|r| r.unwrap().iter().map(String::from).collect())
        .collect()
}

/// The score columns of a CSV output (the last `n` columns), row by row.
fn score_cells(out: &[u8], n: usize) -> (Vec<String>, Vec<Vec<String>>) {
    let recs = records(out);
    let w = recs[0].len();
    let head = recs[0][w - n..].to_vec();
    let rows = recs[1..].iter().map(|r| r[w - n..].to_vec()).collect();
    (head, rows)
}

/// A frame's score columns as the command line writes them.
fn frame_cells(columns: &[ScoreColumn], rows: usize) -> Vec<Vec<String>> {
    (0..rows)
        .map(|r| {
            columns
                .iter()
                .map(|c| match c {
                    ScoreColumn::Int(v) => v[r].map_or(String::new(), |x| x.to_string()),
                    // Compared as numbers: the text has the list's decimals.
                    ScoreColumn::Float(v) => v[r].map_or(String::new(), |x| format!("{x:.4}")),
                    ScoreColumn::Band { names, values } => {
                        values[r].map_or(String::new(), |b| names[b as usize].clone())
                    }
                    ScoreColumn::Flag(v) => v[r].map_or(String::new(), |x| x.to_string()),
                })
                .collect()
        })
        .collect()
}

fn same_decimals(text: &[Vec<String>], columns: &[ScoreColumn]) -> Vec<Vec<String>> {
    text.iter()
        .map(|row| {
            row.iter()
                .zip(columns)
                .map(|(v, c)| match c {
                    ScoreColumn::Float(_) if !v.is_empty() => {
                        format!("{:.4}", v.parse::<f64>().unwrap())
                    }
                    _ => v.clone(),
                })
                .collect()
        })
        .collect()
}

struct Files {
    _dir: TempDir,
    path: PathBuf,
}

fn parquet_file(t: &Table, stem: &str) -> Files {
    let dir = TempDir::new(&format!("row-sources-{stem}"));
    let path = dir.path().join(format!("{stem}.parquet"));
    t.parquet(&path);
    Files { _dir: dir, path }
}

fn typed_rows(path: &Path) -> Input<'static> {
    Input::Rows(Box::new(
        ParquetRows::from_source(Source::File(path.to_path_buf()), None, "in.parquet").unwrap(),
    ))
}

/// Scores and summary through the three sources agree.
fn check_scores(engine: &Engine, t: &Table, pq: &Path, what: &str, cfg: &ScoreConfig) {
    let n = engine.columns().len();
    let mut text_out = Vec::new();
    let text_summary = score_stream(engine, cfg, &t.csv()[..], &mut text_out).unwrap();
    let (head, text_rows) = score_cells(&text_out, n);
    let names: Vec<&str> = engine.columns().iter().map(|c| c.name.as_str()).collect();
    assert_eq!(head, names, "{what}");

    // Parquet, as the command line reads it for a CSV output: typed rows;
    // in the wide layout the run writes the scores only and the input's
    // rows are formatted in front of them from the file's record batches.
    let mut pq_out = Vec::new();
    let pq_summary = match cfg.layout {
        Layout::Long => score_stream(engine, cfg, typed_rows(pq), &mut pq_out),
        Layout::Wide => {
            let mut joined =
                JoinedText::new(&mut pq_out, Source::File(pq.to_path_buf()), b',').unwrap();
            let s = score_stream(engine, cfg, typed_rows(pq), &mut joined);
            joined.finish().unwrap();
            s
        }
    }
    .unwrap();
    let (_, pq_rows) = score_cells(&pq_out, n);
    assert_eq!(pq_rows, text_rows, "{what}: Parquet scores");
    assert_eq!(pq_summary, text_summary, "{what}: Parquet summary");
    if cfg.layout == Layout::Wide && !t.typed() {
        // Every column text: the values print the same, so the whole
        // output is the text run's, byte for byte.
        assert!(pq_out == text_out, "{what}: Parquet to CSV differs");
    }
    if cfg.layout == Layout::Long {
        // The units and their ids, in the same order.
        let ids = |out: &[u8]| -> Vec<Vec<String>> {
            let k = 1 + usize::from(cfg.episode.is_some());
            records(out).iter().map(|r| r[..k].to_vec()).collect()
        };
        assert_eq!(ids(&pq_out), ids(&text_out), "{what}: Parquet units");
    }

    if cfg.layout == Layout::Wide {
        // Typed, as a Parquet output of a Parquet input reads it: the
        // output holds the scores only (the input's columns are copied by
        // the Parquet writer).
        let mut typed_out = Vec::new();
        let typed_summary = score_stream(engine, cfg, typed_rows(pq), &mut typed_out).unwrap();
        assert_eq!(records(&typed_out)[0], head, "{what}: typed wide header");
        assert_eq!(
            score_cells(&typed_out, n).1,
            text_rows,
            "{what}: typed wide"
        );
        assert_eq!(typed_summary, text_summary, "{what}: typed wide summary");
    }

    // The frame.
    let scored = frame::score(engine, cfg, &t.header(), t, 1).unwrap();
    assert_eq!(
        frame_cells(&scored.columns, text_rows.len()),
        same_decimals(&text_rows, &scored.columns),
        "{what}: frame scores"
    );
    assert_eq!(scored.summary, text_summary, "{what}: frame summary");
    if let Some(first) = &scored.first_rows {
        let text_ids: Vec<String> = records(&text_out)[1..]
            .iter()
            .map(|r| r[0].clone())
            .collect();
        let frame_ids: Vec<String> = first
            .iter()
            .map(|&row| match t.field(0, row as usize) {
                Field::Text(b) => String::from_utf8(b.to_vec()).unwrap(),
                Field::Integer(i) => i.to_string(),
                other => panic!("id {other:?}"),
            })
            .collect();
        assert_eq!(frame_ids, text_ids, "{what}: frame units");
    }
    // Not a vacuous comparison: the extract exercises every rule.
    let s = &text_summary;
    assert!(s.invalid_codes > 0, "{what}: {s:?}");
    assert!(s.missing_ages + s.unreadable_ages > 0, "{what}");
    assert!(
        s.excluded_primary > 0 && s.excluded_not_on_admission > 0,
        "{what}"
    );
    assert!(s.unrecognised_poa > 0, "{what}");
    assert!(s.missing_dates > 0, "{what}");
}

/// A frame's explain records as the command line's CSV writes them.
fn explained_cells(ex: &Explained) -> Vec<Vec<String>> {
    let opt = |v: &Option<String>| v.clone().unwrap_or_default();
    let num = |x: f64| format!("{x:.4}");
    (0..ex.row.len())
        .map(|i| {
            vec![
                ex.row[i].to_string(),
                ex.index[i].clone(),
                ex.source_row[i].map_or(String::new(), |r| r.to_string()),
                ex.source_date[i].map_or(String::new(), iso),
                opt(&ex.code_as_written[i]),
                opt(&ex.code[i]),
                opt(&ex.condition[i]),
                num(ex.weight[i]),
                ex.status[i].clone(),
                ex.age_points[i].map_or(String::new(), num),
            ]
        })
        .collect()
}

/// `explain` through the three sources agrees.
fn check_explain(engine: &Engine, t: &Table, pq: &Path, what: &str, cfg: &ScoreConfig) {
    let mut text_out = Vec::new();
    let text_summary =
        explain_stream(engine, cfg, ExplainFormat::Csv, &t.csv()[..], &mut text_out).unwrap();
    let mut pq_out = Vec::new();
    let pq_summary =
        explain_stream(engine, cfg, ExplainFormat::Csv, typed_rows(pq), &mut pq_out).unwrap();
    assert!(
        pq_out == text_out,
        "{what}: Parquet explain differs from the text's"
    );
    assert_eq!(pq_summary, text_summary, "{what}: Parquet explain summary");

    let (ex, frame_summary) = frame::explain(engine, cfg, &t.header(), t, 1).unwrap();
    assert_eq!(frame_summary, text_summary, "{what}: frame explain summary");
    let recs = records(&text_out);
    let skip = 1 + usize::from(cfg.episode.is_some());
    let text_cells: Vec<Vec<String>> = recs[1..]
        .iter()
        .map(|r| {
            let mut c = r[skip..].to_vec();
            for k in [7, 9] {
                if !c[k].is_empty() {
                    c[k] = format!("{:.4}", c[k].parse::<f64>().unwrap());
                }
            }
            c
        })
        .collect();
    assert!(
        text_cells.len() > 100,
        "{what}: {} records",
        text_cells.len()
    );
    assert_eq!(explained_cells(&ex), text_cells, "{what}: frame explain");
}

/// Scores and explanations of the `layout` extract, as text and as typed
/// columns, agree through the three sources for every configuration.
fn check_layout_reads_alike(layout: Layout) {
    let engine = engine();
    let kind = match layout {
        Layout::Wide => "wide",
        Layout::Long => "long",
    };
    for typed in [false, true] {
        let t = match layout {
            Layout::Wide => wide(typed),
            Layout::Long => long(typed),
        };
        let stem = format!("{kind}-{}", if typed { "typed" } else { "text" });
        let pq = parquet_file(&t, &stem);
        for (name, cfg) in configs(layout) {
            let what = format!("{kind}, typed {typed}, {name}");
            check_scores(&engine, &t, &pq.path, &what, &cfg);
            check_explain(&engine, &t, &pq.path, &what, &cfg);
        }
    }
}

#[test]
fn wide_extracts_read_alike_from_text_frames_and_parquet() {
    check_layout_reads_alike(Layout::Wide);
}

#[test]
fn long_extracts_read_alike_from_text_frames_and_parquet() {
    check_layout_reads_alike(Layout::Long);
}

/// With --strict the first problem stops every source at the same row:
/// the text names its line, a frame its row, a Parquet file its row and
/// name.
#[test]
fn strict_stops_name_the_same_row_in_every_source() {
    let engine = engine();
    let t = long(false);
    let pq = parquet_file(&t, "long-strict");
    let (_, base) = configs(Layout::Long).remove(0);
    let cfg = ScoreConfig {
        strict: true,
        ..base
    };
    check_strict_stop(&engine, &t, &cfg, "long", || {
        score_stream(&engine, &cfg, typed_rows(&pq.path), &mut Vec::new()).unwrap_err()
    });
}

/// A strict run over `t` stops at a row: the text, the frame and the
/// Parquet file (read by `parquet`) name the same row and problem.
fn check_strict_stop(
    engine: &Engine,
    t: &Table,
    cfg: &ScoreConfig,
    what: &str,
    parquet: impl FnOnce() -> Error,
) {
    let text = score_stream(engine, cfg, &t.csv()[..], &mut Vec::new()).unwrap_err();
    let Error::Strict {
        line: Some(line),
        message,
    } = text
    else {
        panic!("{what}: {text:?}")
    };
    // Header on line 1, one line per record.
    let row = line - 1;
    let framed = frame::score(engine, cfg, &t.header(), t, 1).unwrap_err();
    assert_eq!(
        framed.to_string(),
        format!("row {row}: {message} (--strict)"),
        "{what}"
    );
    assert_eq!(
        parquet().to_string(),
        format!("row {row} of in.parquet: {message} (--strict)"),
        "{what}"
    );
}

/// The summary type is compared whole above; make sure it carries the
/// counts this test relies on.
#[test]
fn the_generated_extracts_disagree_within_episodes() {
    let engine = engine();
    let t = long(false);
    let (_, cfg) = configs(Layout::Long).remove(0);
    let s: Summary = score_stream(&engine, &cfg, &t.csv()[..], &mut Vec::new()).unwrap();
    assert!(s.disagreeing_units > 0, "{s:?}");
    assert!(s.unreadable_dates > 0, "{s:?}");
}

// ---------------------------------------------------------------------
// compare

/// SplitMix64: a unit's values from its number, so that every row of a
/// unit carries the same ones.
fn mix(mut x: u64) -> u64 {
    x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    x ^ (x >> 31)
}

/// The unit of each row: the row (wide), or the number of its episode
/// value `E0001` (long).
fn units_of(t: &Table) -> Vec<u64> {
    let ep = t.names.iter().position(|n| n == "episode");
    (0..t.rows())
        .map(|r| match ep {
            Some(c) => match t.field(c, r) {
                Field::Text(b) => std::str::from_utf8(&b[1..]).unwrap().parse().unwrap(),
                other => panic!("{other:?}"),
            },
            None => r as u64,
        })
        .collect()
}

/// How the outcome column is typed.
#[derive(Clone, Copy, Debug)]
enum Outcome {
    Text,
    Integer,
    Number,
    Logical,
}

/// Adds `compare`'s columns, one value per unit: the outcome `died`
/// (about a tenth missing), a numeric `severity` (0 to 3 in halves, some
/// missing), a categorical `grade` (1 to 3), a provider `site` (10 to 40).
/// `typed`: severity a number, grade and site whole numbers; else text.
/// In the long layout a unit's later rows sometimes leave a value empty
/// (the unit takes its first non-empty one).
fn with_compare_columns(t: &mut Table, typed: bool, outcome: Outcome) {
    let units = units_of(t);
    let long = t.names.iter().any(|n| n == "episode");
    let mut died = Vec::new();
    let (mut severity, mut grade, mut site) = (Vec::new(), Vec::new(), Vec::new());
    for (r, &u) in units.iter().enumerate() {
        let h = mix(u);
        // A later row of a long unit: now and then empty.
        let blank = long && r > 0 && units[r - 1] == u && mix(r as u64) % 3 == 0;
        let v = |x: Option<u64>| if blank { None } else { x };
        died.push(v((h % 10 != 0).then(|| u64::from((h >> 8) % 10 < 3))));
        severity.push(v(((h >> 16) % 9 != 0).then_some((h >> 20) % 7)));
        grade.push(v(((h >> 24) % 13 != 0).then_some(1 + (h >> 28) % 3)));
        site.push(v(Some(10 * (1 + (h >> 32) % 4))));
    }
    let outcome_col = match outcome {
        Outcome::Text => Col::Text(died.iter().map(|d| d.map(|d| d.to_string())).collect()),
        Outcome::Integer => Col::Int(died.iter().map(|d| d.map(|d| d as i64)).collect()),
        Outcome::Number => Col::Num(died.iter().map(|d| d.map(|d| d as f64)).collect()),
        Outcome::Logical => Col::Bool(died.iter().map(|d| d.map(|d| d == 1)).collect()),
    };
    let half = |s: &Option<u64>| s.map(|s| s as f64 / 2.0);
    let (sev, gr, si) = if typed {
        (
            Col::Num(severity.iter().map(half).collect()),
            Col::Int(grade.iter().map(|g| g.map(|g| g as i64)).collect()),
            Col::Int(site.iter().map(|s| s.map(|s| s as i64)).collect()),
        )
    } else {
        let text = |v: Vec<Option<String>>| Col::Text(v);
        (
            text(
                severity
                    .iter()
                    .map(|s| half(s).map(|x| x.to_string()))
                    .collect(),
            ),
            text(grade.iter().map(|g| g.map(|g| g.to_string())).collect()),
            text(site.iter().map(|s| s.map(|s| s.to_string())).collect()),
        )
    };
    for (name, col) in [
        ("died", outcome_col),
        ("severity", sev),
        ("grade", gr),
        ("site", si),
    ] {
        t.names.push(name.into());
        t.cols.push(col);
    }
}

/// The comparisons made: providers, clusters, folds by id, a numeric, a
/// categorical and a spline adjustment.
fn compare_options() -> CompareOptions {
    CompareOptions {
        outcome: "died".into(),
        adjust: vec!["severity".into()],
        adjust_categorical: vec!["grade".into()],
        splines: vec![("severity".into(), 3)],
        by: Some("site".into()),
        cluster: Some("patient".into()),
        min_expected: 0.0,
        folds: Some(3),
        ..CompareOptions::default()
    }
}

/// The JSON and plain-text table of a comparison (the version aside, the
/// same for every source).
fn compared(
    r: Result<(compare::Comparison, Summary), Error>,
    what: &str,
) -> (String, String, Summary) {
    let (c, summary) = r.unwrap_or_else(|e| panic!("{what}: {e}"));
    (
        compare::json_text(&c).unwrap(),
        compare::text_table(&c),
        summary,
    )
}

/// `compare` gives the same JSON, table and summary from the text, the
/// frame and the Parquet file of `t`.
fn check_compare(engine: &Engine, t: &Table, stem: &str, what: &str, cfg: &ScoreConfig) -> String {
    let opts = compare_options();
    let text = compared(compare::compare(engine, cfg, &opts, &t.csv()[..]), what);
    let pq = parquet_file(t, stem);
    let parquet = compared(
        compare::compare(engine, cfg, &opts, typed_rows(&pq.path)),
        what,
    );
    let framed = compared(frame::compare(engine, cfg, &opts, &t.header(), t, 1), what);
    assert!(parquet.0 == text.0, "{what}: Parquet JSON differs");
    assert_eq!(parquet.1, text.1, "{what}: Parquet table");
    assert_eq!(parquet.2, text.2, "{what}: Parquet summary");
    assert!(framed.0 == text.0, "{what}: frame JSON differs");
    assert_eq!(framed.1, text.1, "{what}: frame table");
    assert_eq!(framed.2, text.2, "{what}: frame summary");
    // Not vacuous: every part of the comparison is there.
    let j: serde_json::Value = serde_json::from_str(&text.0).unwrap();
    assert!(
        j["units"]["missing_outcome"].as_u64().unwrap() > 0,
        "{what}"
    );
    assert!(
        j["units"]["missing_adjustment"].as_u64().unwrap() > 0,
        "{what}"
    );
    assert_eq!(
        j["providers"]["names"].as_array().unwrap().len(),
        4,
        "{what}"
    );
    assert!(j["cross_validation"]["fold_units"].is_array(), "{what}");
    assert!(j["clusters"]["clusters"].as_u64().unwrap() > 10, "{what}");
    let terms: Vec<&str> = j["adjustment"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["name"].as_str().unwrap())
        .collect();
    assert_eq!(
        terms,
        ["severity", "severity_spline1", "grade=2", "grade=3"],
        "{what}"
    );
    text.0
}

#[test]
fn compare_reads_alike_from_text_frames_and_parquet() {
    let engine = engine();
    for layout in [Layout::Wide, Layout::Long] {
        for typed in [false, true] {
            let mut t = match layout {
                Layout::Wide => wide(typed),
                Layout::Long => long(typed),
            };
            with_compare_columns(&mut t, typed, Outcome::Integer);
            for (name, cfg) in configs(layout).into_iter().take(2) {
                let what = format!("compare, {layout:?}, typed {typed}, {name}");
                let stem = format!("compare-{layout:?}-{typed}");
                check_compare(&engine, &t, &stem, &what, &cfg);
            }
        }
    }
}

/// An outcome typed as true/false, whole numbers 0/1, numbers 0.0/1.0 or
/// text gives the same comparison (and its text form the same too).
#[test]
fn typed_outcomes_read_as_their_text() {
    let engine = engine();
    let (_, cfg) = configs(Layout::Wide).remove(0);
    let mut results = Vec::new();
    for outcome in [
        Outcome::Text,
        Outcome::Integer,
        Outcome::Number,
        Outcome::Logical,
    ] {
        let mut t = wide(true);
        with_compare_columns(&mut t, true, outcome);
        let what = format!("outcome {outcome:?}");
        results.push((
            what.clone(),
            check_compare(&engine, &t, "outcomes", &what, &cfg),
        ));
    }
    for (what, json) in &results[1..] {
        assert!(
            *json == results[0].1,
            "{what}: differs from the text outcome"
        );
    }
}

/// The place of the first row of `t` whose unit's outcome is given, and
/// that row.
fn set_outcome(t: &mut Table, row: usize, value: Field<'static>) {
    let c = t.names.iter().position(|n| n == "died").unwrap();
    match (&mut t.cols[c], value) {
        (Col::Text(v), Field::Text(b)) => v[row] = Some(String::from_utf8(b.to_vec()).unwrap()),
        (Col::Int(v), Field::Integer(i)) => v[row] = Some(i),
        (Col::Num(v), Field::Number(x)) => v[row] = Some(x),
        (Col::Bool(v), Field::Logical(b)) => v[row] = Some(b),
        (_, other) => panic!("{other:?}"),
    }
}

/// Every source stops at the same row with the same message (lines for
/// text, rows for a frame and a Parquet file), for the errors `compare`
/// finds in an outcome: a value that is not 0 or 1 (typed or text), and
/// rows of one unit that disagree.
#[test]
fn outcome_errors_name_the_same_row_in_every_source() {
    let engine = engine();
    let opts = CompareOptions {
        outcome: "died".into(),
        ..CompareOptions::default()
    };
    let check = |t: &Table, cfg: &ScoreConfig, stem: &str, expected: (String, String, String)| {
        let text = compare::compare(&engine, cfg, &opts, &t.csv()[..]).unwrap_err();
        assert!(matches!(text, Error::Data { .. }), "{text:?}");
        assert_eq!(text.to_string(), expected.0, "{stem}: text");
        let framed = frame::compare(&engine, cfg, &opts, &t.header(), t, 1).unwrap_err();
        assert!(matches!(framed, Error::Data { .. }), "{framed:?}");
        assert_eq!(framed.to_string(), expected.1, "{stem}: frame");
        let pq = parquet_file(t, stem);
        let parquet = compare::compare(&engine, cfg, &opts, typed_rows(&pq.path)).unwrap_err();
        assert!(matches!(parquet, Error::Data { .. }), "{parquet:?}");
        assert_eq!(parquet.to_string(), expected.2, "{stem}: Parquet");
    };
    let message = |v: &str| {
        format!(
            "outcome column 'died' holds '{v}': expected 0 or 1, or true/false (empty, NA, N/A, N/K, NK, NULL or . for missing)"
        )
    };
    // An invalid value on row 7 (line 8): 2, typed as each kind.
    let (_, wide_cfg) = configs(Layout::Wide).remove(0);
    for (outcome, bad, shown) in [
        (Outcome::Text, Field::Text(b"2"), "2"),
        (Outcome::Text, Field::Text(b"yes"), "yes"),
        (Outcome::Integer, Field::Integer(2), "2"),
        (Outcome::Number, Field::Number(2.0), "2"),
        (Outcome::Number, Field::Number(0.5), "0.5"),
    ] {
        let mut t = wide(true);
        with_compare_columns(&mut t, true, outcome);
        set_outcome(&mut t, 6, bad);
        let m = message(shown);
        check(
            &t,
            &wide_cfg,
            "bad-outcome",
            (
                format!("line 8: {m}"),
                format!("row 7: {m}"),
                format!("row 7 of in.parquet: {m}"),
            ),
        );
    }
    // Two rows of one episode disagree: the first episode with two rows.
    let (_, long_cfg) = configs(Layout::Long).remove(0);
    for outcome in [Outcome::Text, Outcome::Integer, Outcome::Logical] {
        let mut t = long(false);
        with_compare_columns(&mut t, false, outcome);
        let units = units_of(&t);
        let r = (1..units.len())
            .find(|&r| units[r] == units[r - 1])
            .unwrap();
        let (a, b) = match outcome {
            Outcome::Text => (Field::Text(b"1"), Field::Text(b"0")),
            Outcome::Integer => (Field::Integer(1), Field::Integer(0)),
            _ => (Field::Logical(true), Field::Logical(false)),
        };
        set_outcome(&mut t, r - 1, a);
        set_outcome(&mut t, r, b);
        let (sa, sb) = (a.text().unwrap(), b.text().unwrap());
        let m = |place: &str| {
            format!(
                "column 'died' holds '{}' here but '{}' on {place} of the same episode",
                String::from_utf8_lossy(&sb),
                String::from_utf8_lossy(&sa)
            )
        };
        // Header on line 1: data row r (0-based) is line r + 2, frame row r + 1.
        check(
            &t,
            &long_cfg,
            "disagreeing-outcome",
            (
                format!("line {}: {}", r + 2, m(&format!("line {}", r + 1))),
                format!("row {}: {}", r + 1, m(&format!("row {r}"))),
                format!("row {} of in.parquet: {}", r + 1, m(&format!("row {r}"))),
            ),
        );
    }
}

/// Runs without history: the plain scorer over typed rows, by name.
fn plain_configs(layout: Layout) -> Vec<(&'static str, ScoreConfig)> {
    let long = layout == Layout::Long;
    let base = ScoreConfig {
        layout,
        id: long.then(|| "patient".into()),
        age: Some("age".into()),
        exclude_primary: true,
        primary: long.then(|| "primary".into()),
        poa: Some(if long { "poa".into() } else { "poa*".into() }),
        dx: vec![if long { "code".into() } else { "dx*".into() }],
        ..ScoreConfig::default()
    };
    vec![
        (
            "plain, present on admission, primary left out",
            base.clone(),
        ),
        (
            "plain, WHO edition, no exclusions",
            ScoreConfig {
                edition: Edition::Who,
                exclude_primary: false,
                primary: None,
                poa: None,
                ..base.clone()
            },
        ),
        (
            "plain, ICD-10-CM edition, primary left out, no indicators",
            ScoreConfig {
                edition: Edition::Cm,
                poa: None,
                ..base
            },
        ),
    ]
}

/// Scores a Parquet file without history to CSV text.
fn plain_csv(engine: &Engine, cfg: &ScoreConfig, pq: &Path) -> Result<(Vec<u8>, Summary), Error> {
    let mut out = Vec::new();
    let s = score_plain(
        engine,
        cfg,
        Source::File(pq.to_path_buf()),
        "in.parquet",
        TypedOutput::Text {
            out: &mut out,
            delimiter: b',',
        },
        &mut |_| {},
    )?;
    Ok((out, s))
}

/// Scores a Parquet file without history to a Parquet file, and reads it
/// back.
fn plain_parquet(engine: &Engine, cfg: &ScoreConfig, pq: &Path, out: &Path) -> RecordBatch {
    let file = File::create(out).unwrap();
    let mut sink = ParquetSink::new(Box::new(file), b',', OutputColumns::default(), None);
    score_plain(
        engine,
        cfg,
        Source::File(pq.to_path_buf()),
        "in.parquet",
        TypedOutput::Parquet(&mut sink),
        &mut |_| {},
    )
    .unwrap();
    sink.finish().unwrap();
    read_parquet(out)
}

fn read_parquet(path: &Path) -> RecordBatch {
    let reader = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(
        File::open(path).unwrap(),
    )
    .unwrap()
    .build()
    .unwrap();
    let batches: Vec<RecordBatch> = reader.map(|b| b.unwrap()).collect();
    arrow_select::concat::concat_batches(&batches[0].schema(), &batches).unwrap()
}

/// A score column of a Parquet output as the CSV writes it (floating-point
/// scores compared with 4 decimals).
fn parquet_cells(batch: &RecordBatch, from: usize) -> Vec<Vec<String>> {
    use arrow_array::cast::AsArray;
    use arrow_array::types::{Float64Type, Int64Type, Int8Type};
    use arrow_array::Array;
    use arrow_schema::DataType;
    (0..batch.num_rows())
        .map(|r| {
            batch.columns()[from..]
                .iter()
                .map(|a| {
                    if a.is_null(r) {
                        return String::new();
                    }
                    match a.data_type() {
                        DataType::Int64 => a.as_primitive::<Int64Type>().value(r).to_string(),
                        DataType::Int8 => a.as_primitive::<Int8Type>().value(r).to_string(),
                        DataType::Float64 => {
                            format!("{:.4}", a.as_primitive::<Float64Type>().value(r))
                        }
                        DataType::Utf8 => a.as_string::<i32>().value(r).to_string(),
                        t => panic!("score column of type {t}"),
                    }
                })
                .collect()
        })
        .collect()
}

/// Text score cells with the floating-point ones to 4 decimals.
fn four_decimals(rows: &[Vec<String>]) -> Vec<Vec<String>> {
    rows.iter()
        .map(|r| {
            r.iter()
                .map(|v| match v.split_once('.') {
                    Some(_) => format!("{:.4}", v.parse::<f64>().unwrap()),
                    None => v.clone(),
                })
                .collect()
        })
        .collect()
}

/// Scores, units and summary of a run without history agree through the
/// text reader, a frame, and a Parquet file to CSV and to Parquet.
fn check_plain(engine: &Engine, t: &Table, pq: &Path, what: &str, cfg: &ScoreConfig) {
    let n = engine.columns().len();
    let mut text_out = Vec::new();
    let text_summary = score_stream(engine, cfg, &t.csv()[..], &mut text_out).unwrap();
    let (head, text_rows) = score_cells(&text_out, n);
    assert!(text_rows.len() > 40, "{what}");

    // Parquet to CSV.
    let (pq_out, pq_summary) = plain_csv(engine, cfg, pq).unwrap();
    assert_eq!(pq_summary, text_summary, "{what}: Parquet summary");
    let (pq_head, pq_rows) = score_cells(&pq_out, n);
    assert_eq!(
        (&pq_head, &pq_rows),
        (&head, &text_rows),
        "{what}: Parquet to CSV"
    );
    if !t.typed() {
        assert!(
            pq_out == text_out,
            "{what}: Parquet to CSV differs from CSV to CSV"
        );
    } else if cfg.layout == Layout::Wide {
        // Typed columns print in their own form; the rows line up.
        assert_eq!(records(&pq_out).len(), records(&text_out).len(), "{what}");
    }
    let text_ids: Vec<String> = records(&text_out)[1..]
        .iter()
        .map(|r| r[0].clone())
        .collect();
    if cfg.layout == Layout::Long {
        let pq_ids: Vec<String> = records(&pq_out)[1..].iter().map(|r| r[0].clone()).collect();
        assert_eq!(pq_ids, text_ids, "{what}: Parquet units");
    }

    // Parquet to Parquet: the input's columns with their types, the scores
    // typed.
    let out = pq.with_extension(format!("out-{}.parquet", what.len()));
    let back = plain_parquet(engine, cfg, pq, &out);
    let input = read_parquet(pq);
    let kept = match cfg.layout {
        Layout::Wide => input.num_columns(),
        Layout::Long => 1,
    };
    assert_eq!(back.num_columns(), kept + n, "{what}");
    let names: Vec<String> = back
        .schema()
        .fields()
        .iter()
        .map(|f| f.name().clone())
        .collect();
    assert_eq!(names[kept..], head[..], "{what}: Parquet output names");
    match cfg.layout {
        Layout::Wide => {
            for k in 0..kept {
                assert_eq!(back.schema().field(k), input.schema().field(k), "{what}");
                assert_eq!(back.column(k), input.column(k), "{what}: column {k} copied");
            }
        }
        Layout::Long => {
            assert_eq!(
                back.schema().field(0).data_type(),
                input.schema().field(0).data_type(),
                "{what}: id type kept"
            );
            let shown = arrow_cast::display::ArrayFormatter::try_new(
                back.column(0).as_ref(),
                &arrow_cast::display::FormatOptions::default(),
            )
            .unwrap();
            let ids: Vec<String> = (0..back.num_rows())
                .map(|r| shown.value(r).to_string())
                .collect();
            let pq_ids: Vec<String> = records(&pq_out)[1..].iter().map(|r| r[0].clone()).collect();
            assert_eq!(ids, pq_ids, "{what}: Parquet output units");
        }
    }
    assert_eq!(
        parquet_cells(&back, kept),
        four_decimals(&text_rows),
        "{what}: Parquet output scores"
    );
    std::fs::remove_file(&out).unwrap();

    // The frame.
    let scored = frame::score(engine, cfg, &t.header(), t, 1).unwrap();
    assert_eq!(
        frame_cells(&scored.columns, text_rows.len()),
        same_decimals(&text_rows, &scored.columns),
        "{what}: frame scores"
    );
    assert_eq!(scored.summary, text_summary, "{what}: frame summary");
    if let Some(first) = &scored.first_rows {
        let frame_ids: Vec<String> = first
            .iter()
            .map(|&row| match t.field(0, row as usize) {
                Field::Text(b) => String::from_utf8(b.to_vec()).unwrap(),
                Field::Integer(i) => i.to_string(),
                other => panic!("id {other:?}"),
            })
            .collect();
        assert_eq!(frame_ids, text_ids, "{what}: frame units");
    }
    // Not a vacuous comparison.
    let s = &text_summary;
    assert!(s.invalid_codes > 0, "{what}: {s:?}");
    assert!(s.missing_ages + s.unreadable_ages > 0, "{what}");
    if cfg.poa.is_some() {
        assert!(
            s.excluded_not_on_admission > 0 && s.unrecognised_poa > 0,
            "{what}"
        );
    }
    if cfg.exclude_primary {
        assert!(s.excluded_primary > 0, "{what}");
    }
    if cfg.edition != Edition::Any {
        assert!(s.unknown_codes + s.extended_codes > 0, "{what}: {s:?}");
    }
}

#[test]
fn plain_runs_read_alike_from_text_frames_and_parquet_to_every_output() {
    let engine = engine();
    for layout in [Layout::Wide, Layout::Long] {
        for typed in [false, true] {
            let t = match layout {
                Layout::Wide => wide(typed),
                Layout::Long => long(typed),
            };
            let stem = format!("plain-{layout:?}-{typed}");
            let pq = parquet_file(&t, &stem);
            for (name, cfg) in plain_configs(layout) {
                let what = format!("{layout:?}, typed {typed}, {name}");
                check_plain(&engine, &t, &pq.path, &what, &cfg);
            }
        }
    }
}

/// Without history too, --strict stops every source at the same row, and
/// a Parquet input is named with it.
#[test]
fn plain_strict_stops_name_the_same_row_in_every_source() {
    let engine = engine();
    for layout in [Layout::Wide, Layout::Long] {
        let t = match layout {
            Layout::Wide => wide(false),
            Layout::Long => long(false),
        };
        let pq = parquet_file(&t, &format!("plain-strict-{layout:?}"));
        for (name, base) in plain_configs(layout) {
            let cfg = ScoreConfig {
                strict: true,
                ..base
            };
            check_strict_stop(&engine, &t, &cfg, name, || {
                plain_csv(&engine, &cfg, &pq.path).unwrap_err()
            });
        }
    }
}

/// A Parquet output of a plain run keeps the input's columns as they are:
/// integers, true/false, dates, timestamps with a time zone, and nulls in
/// each; the score columns are typed.
#[test]
fn plain_parquet_output_keeps_every_input_type() {
    use arrow_array::TimestampMicrosecondArray;
    let tmp = TempDir::new("row-sources-types");
    let dir = tmp.path();
    let ts = TimestampMicrosecondArray::from(vec![
        Some(1_700_000_000_000_000),
        None,
        Some(-86_400_000_000),
        Some(0),
    ])
    .with_timezone("Europe/Paris");
    let columns: Vec<(&str, ArrayRef)> = vec![
        (
            "id",
            Arc::new(Int64Array::from(vec![Some(1), None, Some(3), Some(-4)])),
        ),
        (
            "flag",
            Arc::new(BooleanArray::from(vec![
                Some(true),
                Some(false),
                None,
                Some(true),
            ])),
        ),
        (
            "day",
            Arc::new(Date32Array::from(vec![
                Some(19_000),
                None,
                Some(-1),
                Some(0),
            ])),
        ),
        ("stamp", Arc::new(ts)),
        (
            "age",
            Arc::new(Float64Array::from(vec![
                Some(80.5),
                None,
                Some(f64::NAN),
                Some(7.0),
            ])),
        ),
        (
            "dx1",
            Arc::new(StringArray::from(vec![
                Some("I21.9"),
                Some("R41.0"),
                None,
                Some("??"),
            ])),
        ),
        (
            "dx2",
            Arc::new(StringArray::from(vec![
                Some("C78.0"),
                Some(""),
                Some("F00.1"),
                None,
            ])),
        ),
    ];
    let input = RecordBatch::try_from_iter(columns).unwrap();
    let pq = dir.join("types.parquet");
    common::write_parquet(&pq, &input, None);
    let engine = engine();
    let cfg = ScoreConfig {
        dx: vec!["dx*".into()],
        age: Some("age".into()),
        ..ScoreConfig::default()
    };
    let back = plain_parquet(&engine, &cfg, &pq, &dir.join("out.parquet"));
    let k = input.num_columns();
    assert_eq!(back.schema().fields()[..k], input.schema().fields()[..]);
    for c in 0..k {
        assert_eq!(back.column(c), input.column(c), "column {c}");
    }
    use arrow_schema::DataType;
    let types: Vec<DataType> = back.schema().fields()[k..]
        .iter()
        .map(|f| f.data_type().clone())
        .collect();
    // Charlson and its age variant (whole numbers), Elixhauser (whole), the
    // frailty score (one decimal) and its band.
    assert_eq!(
        types,
        [
            DataType::Int64,
            DataType::Int64,
            DataType::Int64,
            DataType::Float64,
            DataType::Utf8
        ]
    );
    // Row 2's age is missing: its Charlson with age is null; row 3's NaN
    // counts as missing too.
    let with_age = back.column(k + 1);
    assert!(!with_age.is_null(0) && with_age.is_null(1) && with_age.is_null(2));
    // The CSV of the same run: the same number of rows, every input value
    // formatted (the timestamp in its zone's own form).
    let (text, summary) = plain_csv(&engine, &cfg, &pq).unwrap();
    assert_eq!(records(&text).len(), 5);
    assert_eq!(summary.missing_ages, 2);
    assert_eq!(summary.invalid_codes, 1);
    let stamp = &records(&text)[1][3];
    assert!(stamp.starts_with("2023-11-14T23:13:20+01:00"), "{stamp}");
}
