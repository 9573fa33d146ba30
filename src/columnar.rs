//! `score` over in-memory columns (Arrow arrays, data frames) instead of
//! delimited text, with the rules, messages and summary of
//! [`crate::pipeline::score_stream`]: the same column resolution (names and
//! globs), the same reading of codes and ages, the same hierarchy and values,
//! wide or long.
//!
//! The caller owns the data and hands it over in batches of rows through the
//! [`Rows`] trait; the scorer hands back each row's (wide) or each unit's
//! (long) [`Value`]s in the order of [`Engine::columns`]. Rows are numbered
//! from 0 across batches, as a data frame numbers its rows.
//!
//! ```
//! use morbus::columnar::{plan, Age, Rows, Scorer};
//! use morbus::lists::{Catalogue, SCALE};
//! use morbus::pipeline::{Header, ScoreConfig};
//! use morbus::score::{Engine, IndexSpec, ScoreOptions, Value};
//!
//! struct Two(Vec<[&'static str; 2]>);
//! impl Rows for Two {
//!     fn len(&self) -> usize { self.0.len() }
//!     fn dx(&self, k: usize, row: usize) -> &[u8] { self.0[row][k].as_bytes() }
//!     fn age(&self, _row: usize) -> Age<'_> { Age::Missing }
//!     fn id(&self, _row: usize) -> Option<&[u8]> { None }
//! }
//!
//! let specs = IndexSpec::parse_many("charlson:charlson1987").unwrap();
//! let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
//! let cfg = ScoreConfig { dx: vec!["dx*".into()], ..ScoreConfig::default() };
//! let header = Header { names: vec!["id".into(), "dx1".into(), "dx2".into()] };
//! let p = plan(&engine, &cfg, &header).unwrap();
//! assert_eq!(p.dx, vec![1, 2]);
//!
//! let mut scorer = Scorer::new(&engine, &cfg, &header, &p);
//! let mut scores = Vec::new();
//! let rows = Two(vec![["I21.9", "C78.0"], ["", "not a code"]]);
//! scorer.wide(&rows, |v| scores.push(v[0])).unwrap();
//! assert_eq!(scores[0], Value::Score { scaled: 7 * SCALE, decimals: 0 });
//! assert_eq!(scores[1], Value::Score { scaled: 0, decimals: 0 });
//! assert_eq!(scorer.summary().invalid_codes, 1);
//! ```

use std::collections::HashMap;
use std::hash::BuildHasherDefault;

use crate::code::Reading;
use crate::matcher::KeyHasher;
use crate::pipeline::{
    check_collisions, disagreement, keep_first, Header, Layout, ScoreConfig, Summary,
};
use crate::score::{Engine, Unit, Value};
use crate::Error;

/// The columns a run uses, by position among the frame's columns.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Plan {
    /// Diagnosis columns, in the order given (header order within a glob).
    pub dx: Vec<usize>,
    pub age: Option<usize>,
    /// Id column (long layout only).
    pub id: Option<usize>,
}

/// Resolves the columns of a run against a frame's column names, with the
/// checks and messages of the command line: unknown, duplicated or
/// unmatched columns, a long layout without an id, output columns that
/// would collide with input columns.
pub fn plan(engine: &Engine, cfg: &ScoreConfig, header: &Header) -> Result<Plan, Error> {
    let unsupported = [
        (cfg.uses_history(), "--lookback"),
        (cfg.episode.is_some(), "--episode"),
        (cfg.date.is_some(), "--date"),
        (cfg.exclude_primary, "--exclude-primary"),
        (cfg.primary.is_some(), "--primary"),
        (cfg.poa.is_some(), "--poa"),
    ];
    if let Some((_, option)) = unsupported.iter().find(|(set, _)| *set) {
        return Err(Error::Usage(format!(
            "{option} is not available when scoring in-memory columns yet"
        )));
    }
    let dx = header.columns(&cfg.dx, "diagnosis")?;
    let age = cfg
        .age
        .as_deref()
        .map(|a| header.column(a, "age"))
        .transpose()?;
    let id = match cfg.layout {
        Layout::Long => {
            let name = cfg
                .id
                .as_deref()
                .ok_or_else(|| Error::Usage("--layout long needs --id COL".into()))?;
            Some(header.column(name, "id")?)
        }
        Layout::Wide => None,
    };
    let kept: Vec<&str> = match id {
        None => header.names.iter().map(String::as_str).collect(),
        Some(i) => vec![header.names[i].as_str()],
    };
    check_collisions(&kept, engine)?;
    Ok(Plan { dx, age, id })
}

use crate::rows::age_text;
pub use crate::rows::{read_age_value, Age, AgeReading};

/// A batch of rows, as the scorer reads it.
pub trait Rows {
    /// Number of rows in the batch.
    fn len(&self) -> usize;
    /// Whether the batch has no rows.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// The value of the `k`-th diagnosis column of [`Plan::dx`] at `row`
    /// (empty for a null).
    fn dx(&self, k: usize, row: usize) -> &[u8];
    /// The age at `row` ([`Age::Missing`] when the run has no age column).
    fn age(&self, row: usize) -> Age<'_>;
    /// The id at `row` (long layout), `None` for a null; all null ids form
    /// one unit, apart from an empty id.
    fn id(&self, row: usize) -> Option<&[u8]>;
}

/// Scores batches of rows; keeps the summary and, in the long layout, the
/// units.
pub struct Scorer<'e> {
    reader: Reader<'e>,
    unit: Unit,
    values: Vec<Value>,
    row: u64,
    long: Units,
}

/// Reads codes and ages into units and counts what it read.
struct Reader<'e> {
    engine: &'e Engine,
    dx_sep: Option<u8>,
    strict: bool,
    edition: crate::editions::Edition,
    has_age: bool,
    dx_names: Vec<String>,
    summary: Summary,
}

impl Reader<'_> {
    fn dx(&mut self, rows: &impl Rows, i: usize, row: u64, bits: &mut [u64]) -> Result<(), Error> {
        for (k, name) in self.dx_names.iter().enumerate() {
            let v = rows.dx(k, i);
            if v.is_empty() {
                continue;
            }
            let mut one = |part: &[u8]| -> Result<(), Error> {
                match self.engine.add_raw(bits, part) {
                    Reading::Valid(code) => {
                        let e = self.summary.valid_code(&code, self.edition);
                        if e == crate::editions::Existence::Unknown && self.strict {
                            return Err(Error::Strict {
                                line: None,
                                message: format!(
                                    "row {row}: {}",
                                    crate::pipeline::unknown_code_message(
                                        &String::from_utf8_lossy(part),
                                        name,
                                        self.edition
                                    )
                                ),
                            });
                        }
                    }
                    Reading::Empty => {}
                    Reading::Invalid => {
                        if self.strict {
                            return Err(Error::Strict {
                                line: None,
                                message: format!(
                                    "row {row}: invalid code '{}' in column '{name}'",
                                    String::from_utf8_lossy(part)
                                ),
                            });
                        }
                        self.summary.invalid(part);
                    }
                }
                Ok(())
            };
            match self.dx_sep {
                Some(sep) => {
                    for part in v.split(|&b| b == sep) {
                        one(part)?;
                    }
                }
                None => one(v)?,
            }
        }
        Ok(())
    }

    fn age(&mut self, rows: &impl Rows, i: usize, row: u64) -> Result<Option<u32>, Error> {
        if !self.has_age {
            return Ok(None);
        }
        let a = rows.age(i);
        match read_age_value(a) {
            AgeReading::Years(y) => Ok(Some(y)),
            AgeReading::Missing => {
                self.summary.missing_ages += 1;
                Ok(None)
            }
            AgeReading::Unreadable => {
                if self.strict {
                    return Err(Error::Strict {
                        line: None,
                        message: format!("row {row}: unreadable age '{}'", age_text(a)),
                    });
                }
                self.summary.unreadable_ages += 1;
                Ok(None)
            }
        }
    }
}

/// Units of a long run, in order of first appearance.
#[derive(Default)]
struct Units {
    index: HashMap<Box<[u8]>, usize, BuildHasherDefault<KeyHasher>>,
    null: Option<usize>,
    first_rows: Vec<u64>,
    bits: Vec<u64>,
    ages: Vec<Option<u32>>,
    /// Whether a later row gave another age than the first readable one.
    disagrees: Vec<bool>,
}

impl Units {
    fn unit(&mut self, id: Option<&[u8]>, row: u64, words: usize) -> usize {
        let found = match id {
            Some(id) => self.index.get(id).copied(),
            None => self.null,
        };
        if let Some(u) = found {
            return u;
        }
        let u = self.first_rows.len();
        match id {
            Some(id) => {
                self.index.insert(id.into(), u);
            }
            None => self.null = Some(u),
        }
        self.first_rows.push(row);
        self.bits.resize(self.bits.len() + words, 0);
        self.ages.push(None);
        self.disagrees.push(false);
        u
    }
}

impl<'e> Scorer<'e> {
    /// A scorer for a run planned by [`plan`] over `header`.
    pub fn new(engine: &'e Engine, cfg: &ScoreConfig, header: &Header, plan: &Plan) -> Self {
        Scorer {
            reader: Reader {
                engine,
                dx_sep: cfg.dx_sep,
                strict: cfg.strict,
                edition: cfg.edition,
                has_age: plan.age.is_some(),
                dx_names: plan.dx.iter().map(|&i| header.names[i].clone()).collect(),
                summary: Summary {
                    dx_columns: plan.dx.iter().map(|&i| header.names[i].clone()).collect(),
                    ..Summary::default()
                },
            },
            unit: engine.unit(),
            values: Vec::with_capacity(engine.columns().len()),
            row: 0,
            long: Units::default(),
        }
    }

    /// Numbers the rows from `row` on instead of 0: for a scorer that
    /// scores the part of a frame starting at that row (in parallel with
    /// others, whose summaries are then [merged](Summary::merge) in row
    /// order).
    pub fn starting_at(mut self, row: u64) -> Self {
        self.row = row;
        self
    }

    /// What has been read so far.
    pub fn summary(&self) -> &Summary {
        &self.reader.summary
    }

    /// The summary of the run.
    pub fn into_summary(self) -> Summary {
        self.reader.summary
    }

    /// Wide layout: scores every row of a batch and hands its values to
    /// `out`, row by row.
    pub fn wide(&mut self, rows: &impl Rows, mut out: impl FnMut(&[Value])) -> Result<(), Error> {
        let engine = self.reader.engine;
        for i in 0..rows.len() {
            let row = self.row;
            self.reader.summary.rows_read += 1;
            self.unit.clear();
            self.reader.dx(rows, i, row, &mut self.unit.bits)?;
            let age = self.reader.age(rows, i, row)?;
            engine.apply_hierarchy(&mut self.unit.bits, &mut self.unit.scratch);
            engine.values(&self.unit.bits, age, &mut self.values);
            out(&self.values);
            self.reader.summary.rows_written += 1;
            self.reader.summary.units += 1;
            self.row += 1;
        }
        Ok(())
    }

    /// Long layout: adds the codes (and first readable age) of every row of
    /// a batch to its unit; a unit's row with another age is counted in
    /// [`Summary::disagreeing_units`].
    pub fn long(&mut self, rows: &impl Rows) -> Result<(), Error> {
        let words = self.reader.engine.words();
        for i in 0..rows.len() {
            let row = self.row;
            self.reader.summary.rows_read += 1;
            let u = self.long.unit(rows.id(i), row, words);
            let bits = &mut self.long.bits[u * words..(u + 1) * words];
            self.reader.dx(rows, i, row, bits)?;
            if self.reader.has_age {
                let age = self.reader.age(rows, i, row)?;
                // The first readable age counts; another one later is
                // counted (and stops a strict run), as on the command line.
                if let Some((first, a)) = keep_first(&mut self.long.ages[u], age) {
                    let message = disagreement("age", a, first);
                    if self.reader.strict {
                        return Err(Error::Strict {
                            line: None,
                            message: format!("row {row}: {message}"),
                        });
                    }
                    let counted = &mut self.long.disagrees[u];
                    self.reader.summary.count_disagreeing(counted);
                }
            }
            self.row += 1;
        }
        Ok(())
    }

    /// Long layout: scores every unit in order of first appearance, handing
    /// `out` the row where the unit first appeared and its values.
    pub fn finish_long(&mut self, mut out: impl FnMut(u64, &[Value])) {
        let engine = self.reader.engine;
        let words = engine.words();
        let mut scratch = vec![0u64; words];
        let units = std::mem::take(&mut self.long);
        let mut bits = units.bits;
        for (u, &first) in units.first_rows.iter().enumerate() {
            let b = &mut bits[u * words..(u + 1) * words];
            engine.apply_hierarchy(b, &mut scratch);
            engine.values(b, units.ages[u], &mut self.values);
            out(first, &self.values);
            self.reader.summary.rows_written += 1;
            self.reader.summary.units += 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::{Catalogue, SCALE};
    use crate::score::{IndexSpec, ScoreOptions};

    struct Frame {
        dx: Vec<Vec<&'static str>>,
        ages: Vec<Age<'static>>,
        ids: Vec<Option<&'static str>>,
    }

    impl Rows for Frame {
        fn len(&self) -> usize {
            self.dx.len()
        }
        fn dx(&self, k: usize, row: usize) -> &[u8] {
            self.dx[row][k].as_bytes()
        }
        fn age(&self, row: usize) -> Age<'_> {
            self.ages.get(row).copied().unwrap_or(Age::Missing)
        }
        fn id(&self, row: usize) -> Option<&[u8]> {
            self.ids.get(row).copied().flatten().map(str::as_bytes)
        }
    }

    fn engine(spec: &str, age: bool) -> Engine {
        let specs = IndexSpec::parse_many(spec).unwrap();
        let opts = ScoreOptions {
            age,
            ..ScoreOptions::default()
        };
        Engine::new(&Catalogue::builtin(), &specs, opts).unwrap()
    }

    fn header(names: &[&str]) -> Header {
        Header {
            names: names.iter().map(|s| s.to_string()).collect(),
        }
    }

    #[test]
    fn plan_resolves_globs_and_reports_like_the_cli() {
        let e = engine("charlson", false);
        let h = header(&["id", "dx2", "age", "dx1"]);
        let cfg = ScoreConfig {
            dx: vec!["dx*".into()],
            age: Some("age".into()),
            ..ScoreConfig::default()
        };
        let p = plan(&e, &cfg, &h).unwrap();
        assert_eq!(p.dx, vec![1, 3]);
        assert_eq!(p.age, Some(2));
        let bad = ScoreConfig {
            dx: vec!["diag".into()],
            ..ScoreConfig::default()
        };
        let msg = plan(&e, &bad, &h).unwrap_err().to_string();
        assert!(msg.contains("diagnosis column 'diag' not found"), "{msg}");
        let long = ScoreConfig {
            dx: vec!["dx1".into()],
            layout: Layout::Long,
            ..ScoreConfig::default()
        };
        assert!(plan(&e, &long, &h)
            .unwrap_err()
            .to_string()
            .contains("--id"));
        let clash = header(&["dx1", "charlson_quan2011"]);
        let msg = plan(&e, &long_cfg("dx1", "dx1"), &clash).err();
        assert!(msg.is_none(), "long layout keeps only the id column");
        let wide = ScoreConfig {
            dx: vec!["dx1".into()],
            ..ScoreConfig::default()
        };
        let msg = plan(&e, &wide, &clash).unwrap_err().to_string();
        assert!(msg.contains("already exists"), "{msg}");
    }

    #[test]
    fn options_of_dated_histories_are_refused() {
        let e = engine("charlson", false);
        let h = header(&["pid", "dx1", "when"]);
        let cfg = ScoreConfig {
            dx: vec!["dx1".into()],
            id: Some("pid".into()),
            date: Some("when".into()),
            lookback: Some(365),
            ..ScoreConfig::default()
        };
        let err = plan(&e, &cfg, &h).unwrap_err();
        assert_eq!(err.exit_code(), 2);
        assert!(
            err.to_string().starts_with("--lookback is not available"),
            "{err}"
        );
    }

    fn long_cfg(dx: &str, id: &str) -> ScoreConfig {
        ScoreConfig {
            dx: vec![dx.into()],
            layout: Layout::Long,
            id: Some(id.into()),
            ..ScoreConfig::default()
        }
    }

    #[test]
    fn wide_rows_score_and_count_like_the_stream() {
        let e = engine("charlson:charlson1987", true);
        let h = header(&["dx1", "dx2", "age"]);
        let cfg = ScoreConfig {
            dx: vec!["dx1,dx2".into()],
            age: Some("age".into()),
            ..ScoreConfig::default()
        };
        let p = plan(&e, &cfg, &h).unwrap();
        let mut s = Scorer::new(&e, &cfg, &h, &p);
        let f = Frame {
            dx: vec![vec!["I21.9", "E11.2"], vec!["xx", ""], vec!["", "I50"]],
            ages: vec![Age::Number(72.5), Age::Text(b"old"), Age::Missing],
            ids: vec![],
        };
        let mut got = Vec::new();
        s.wide(&f, |v| got.push(v.to_vec())).unwrap();
        assert_eq!(got.len(), 3);
        assert_eq!(got[0][0].as_f64(), Some(3.0));
        // 3 points plus 3 for age 70-79
        assert_eq!(got[0][1].as_f64(), Some(6.0));
        assert_eq!(got[1][1], Value::Missing);
        assert_eq!(got[2][0].as_f64(), Some(1.0));
        let sum = s.summary();
        assert_eq!((sum.rows_read, sum.rows_written, sum.units), (3, 3, 3));
        assert_eq!((sum.codes_read, sum.invalid_codes), (3, 1));
        assert_eq!((sum.missing_ages, sum.unreadable_ages), (1, 1));
    }

    #[test]
    fn strict_names_row_and_column() {
        let e = engine("hfrs", false);
        let h = header(&["a", "b"]);
        let cfg = ScoreConfig {
            dx: vec!["a,b".into()],
            strict: true,
            ..ScoreConfig::default()
        };
        let p = plan(&e, &cfg, &h).unwrap();
        let mut s = Scorer::new(&e, &cfg, &h, &p);
        let f = Frame {
            dx: vec![vec!["F00", ""], vec!["R41", "??"]],
            ages: vec![],
            ids: vec![],
        };
        let err = s.wide(&f, |_| {}).unwrap_err();
        assert_eq!(err.exit_code(), 3);
        assert_eq!(
            err.to_string(),
            "row 1: invalid code '??' in column 'b' (--strict)"
        );
    }

    #[test]
    fn parts_scored_apart_merge_into_the_whole() {
        let e = engine("charlson", true);
        let h = header(&["a", "b", "age"]);
        let cfg = ScoreConfig {
            dx: vec!["a,b".into()],
            age: Some("age".into()),
            ..ScoreConfig::default()
        };
        let p = plan(&e, &cfg, &h).unwrap();
        let rows = |r: std::ops::Range<usize>| {
            let dx = [
                vec!["I21", "x1"],
                vec!["", "G30"],
                vec!["x1", "x2"],
                vec!["E11.2", ""],
            ];
            let ages = [
                Age::Missing,
                Age::Text(b"?"),
                Age::Number(70.0),
                Age::Missing,
            ];
            Frame {
                dx: dx[r.clone()].to_vec(),
                ages: ages[r].to_vec(),
                ids: vec![],
            }
        };
        let mut whole = Scorer::new(&e, &cfg, &h, &p);
        let mut all = Vec::new();
        whole.wide(&rows(0..4), |v| all.push(v.to_vec())).unwrap();
        let mut first = Scorer::new(&e, &cfg, &h, &p);
        let mut second = Scorer::new(&e, &cfg, &h, &p).starting_at(2);
        let mut parts = Vec::new();
        first.wide(&rows(0..2), |v| parts.push(v.to_vec())).unwrap();
        second
            .wide(&rows(2..4), |v| parts.push(v.to_vec()))
            .unwrap();
        assert_eq!(parts, all);
        let mut merged = first.into_summary();
        merged.merge(second.into_summary());
        assert_eq!(&merged, whole.summary());
        assert_eq!(merged.invalid_values.get(&b"x1"[..]), Some(&2));
        let strict = ScoreConfig {
            strict: true,
            ..cfg.clone()
        };
        let err = Scorer::new(&e, &strict, &h, &p)
            .starting_at(2)
            .wide(&rows(2..4), |_| {})
            .unwrap_err();
        assert!(
            err.to_string().starts_with("row 2: invalid code 'x1'"),
            "{err}"
        );
    }

    #[test]
    fn long_units_in_order_of_first_appearance_across_batches() {
        let e = engine("charlson:count", true);
        let h = header(&["pid", "dx", "age"]);
        let mut cfg = long_cfg("dx", "pid");
        cfg.age = Some("age".into());
        cfg.dx_sep = Some(b';');
        let p = plan(&e, &cfg, &h).unwrap();
        let mut s = Scorer::new(&e, &cfg, &h, &p);
        let a = Frame {
            dx: vec![vec!["I21"], vec!["I50;J44"], vec!["I22"]],
            ages: vec![Age::Missing, Age::Number(55.0), Age::Number(60.0)],
            ids: vec![Some("b"), Some("a"), Some("b")],
        };
        let b = Frame {
            dx: vec![vec!["G30"], vec!["N18"], vec![""]],
            ages: vec![Age::Number(81.0), Age::Missing, Age::Missing],
            ids: vec![None, Some("a"), Some("")],
        };
        s.long(&a).unwrap();
        s.long(&b).unwrap();
        let mut got = Vec::new();
        s.finish_long(|first, v| got.push((first, v[0], v[1])));
        let count = |n: i64| Value::Score {
            scaled: n * SCALE,
            decimals: 0,
        };
        assert_eq!(
            got.iter().map(|g| g.0).collect::<Vec<_>>(),
            vec![0, 1, 3, 5]
        );
        // b: I21 and I22 are one condition; its first readable age is 60
        assert_eq!(got[0].1, count(1));
        assert_eq!(got[0].2.as_f64(), Some(1.0 + 2.0));
        // a: heart failure, pulmonary, renal
        assert_eq!(got[1].1, count(3));
        assert_eq!(got[2].1, count(1));
        assert_eq!(got[3].1, count(0));
        assert_eq!(got[3].2, Value::Missing);
        assert_eq!(s.summary().units, 4);
        assert_eq!(s.summary().rows_read, 6);
        assert_eq!(s.summary().disagreeing_units, 0);
    }

    #[test]
    fn long_rows_of_a_unit_with_another_age_are_counted() {
        let e = engine("charlson:count", true);
        let h = header(&["pid", "dx", "age"]);
        let mut cfg = long_cfg("dx", "pid");
        cfg.age = Some("age".into());
        let p = plan(&e, &cfg, &h).unwrap();
        let rows = Frame {
            dx: vec![vec!["I21"], vec!["I50"], vec!["J44"], vec![""]],
            ages: vec![
                Age::Number(70.0),
                Age::Missing,
                Age::Number(71.0),
                Age::Number(72.0),
            ],
            ids: vec![Some("a"), Some("a"), Some("a"), Some("b")],
        };
        let mut s = Scorer::new(&e, &cfg, &h, &p);
        s.long(&rows).unwrap();
        assert_eq!(s.summary().disagreeing_units, 1);
        cfg.strict = true;
        let mut s = Scorer::new(&e, &cfg, &h, &p);
        let err = s.long(&rows).unwrap_err();
        assert_eq!(
            err.to_string(),
            "row 2: a row of a unit gives another age 71 (the unit's first age is 70) (--strict)"
        );
    }
}
