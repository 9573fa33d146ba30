//! Scoring without history over typed rows ([`crate::rows::Batch`]: a data
//! frame's rows, a Parquet file's record batches): the one plain scorer of
//! every non-text source. Rows are read through the run's [`Plan`] with the
//! readers of the text path ([`Plan::read_codes`], [`Plan::read_age`]), so
//! present on admission, the primary diagnosis, exclusions, editions,
//! `--strict` and the summary behave exactly as for a delimited extract;
//! what comes back is typed: each row's (wide) or each unit's (long)
//! [`Value`]s in the order of [`Engine::columns`], for a typed sink to write.
//!
//! Rows are numbered as the history reader numbers them: `first` is the
//! 1-based number of a batch's first row in its source, and errors carry it
//! as their line, for the source's [`crate::rows::RowNaming`] to name.
//!
//! ```
//! use morbus::lists::{Catalogue, SCALE};
//! use morbus::pipeline::plain::{plan, score_wide};
//! use morbus::pipeline::{Header, ScoreConfig};
//! use morbus::rows::{Batch, Field};
//! use morbus::score::{Engine, IndexSpec, ScoreOptions, Value};
//!
//! struct Two(Vec<[&'static str; 2]>);
//! impl Batch for Two {
//!     fn len(&self) -> usize { self.0.len() }
//!     fn field(&self, col: usize, row: usize) -> Field<'_> {
//!         Field::Text(self.0[row][col].as_bytes())
//!     }
//! }
//!
//! let specs = IndexSpec::parse_many("charlson:charlson1987").unwrap();
//! let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
//! let cfg = ScoreConfig { dx: vec!["dx*".into()], ..ScoreConfig::default() };
//! let header = Header { names: vec!["dx1".into(), "dx2".into()] };
//! let p = plan(&engine, &cfg, header).unwrap();
//! let mut values = Vec::new();
//! let rows = Two(vec![["I21.9", "C78.0"], ["", "not a code"]]);
//! let (summary, err) = score_wide(&engine, &cfg, &p, &rows, 1, &mut values);
//! assert!(err.is_none());
//! let n = engine.columns().len();
//! assert_eq!(values[0], Value::Score { scaled: 7 * SCALE, decimals: 0 });
//! assert_eq!(values[n], Value::Score { scaled: 0, decimals: 0 });
//! assert_eq!(summary.invalid_codes, 1);
//! ```

use std::collections::HashMap;
use std::hash::BuildHasherDefault;

use super::{
    check_collisions, disagreement, keep_first, Exclusion, Header, Layout, Plan, ScoreConfig,
    Summary,
};
use crate::matcher::KeyHasher;
use crate::rows::{Batch, BatchRow, Field, Row};
use crate::score::{Engine, Value};
use crate::Error;

/// The plan of a run without history over typed rows named by `header`,
/// with the command line's checks and messages: the columns resolved
/// ([`Plan::new`]), and output columns that would repeat an input column
/// (every input column in the wide layout, the id in the long layout).
pub fn plan(engine: &Engine, cfg: &ScoreConfig, header: Header) -> Result<TypedPlan, Error> {
    if super::reads_history(cfg) {
        return Err(Error::Usage(
            "internal error: a run with a history (--lookback, --episode, --keep) scored as a plain one"
                .into(),
        ));
    }
    let p = Plan::new(cfg, header, false)?;
    match cfg.layout {
        Layout::Wide => {
            let names: Vec<&str> = p.header.names.iter().map(String::as_str).collect();
            check_collisions(&names, engine)?;
        }
        Layout::Long => {
            check_collisions(&[p.header.names[p.id.unwrap_or(0)].as_str()], engine)?;
        }
    }
    Ok(TypedPlan(p))
}

/// The columns of a plain run over typed rows (see [`plan`]).
pub struct TypedPlan(pub(crate) Plan);

impl TypedPlan {
    /// The names of the diagnosis columns read, in reading order.
    pub fn dx_names(&self) -> Vec<String> {
        self.0.dx_names()
    }

    /// The id column (long layout), by position in the header.
    pub fn id(&self) -> Option<usize> {
        self.0.id
    }

    /// The summary of a run before any row: the diagnosis columns read.
    pub fn summary(&self) -> Summary {
        Summary {
            dx_columns: self.dx_names(),
            ..Summary::default()
        }
    }
}

/// Wide layout: scores every row of `batch` (whose first row is row `first`,
/// counted from 1, of its source), appending each row's values to `values`
/// (`Engine::columns().len()` per row). Stops at the first row that fails
/// (`--strict`): the values of the rows before it are there, and the error
/// is returned beside the counts.
pub fn score_wide(
    engine: &Engine,
    cfg: &ScoreConfig,
    plan: &TypedPlan,
    batch: &dyn Batch,
    first: u64,
    values: &mut Vec<Value>,
) -> (Summary, Option<Error>) {
    let p = &plan.0;
    let mut summary = Summary::default();
    let mut unit = engine.unit();
    let mut row_values: Vec<Value> = Vec::with_capacity(engine.columns().len());
    values.reserve(batch.len() * engine.columns().len());
    for i in 0..batch.len() {
        let row = BatchRow { batch, row: i };
        let line = first + i as u64;
        summary.rows_read += 1;
        unit.clear();
        let bits = &mut unit.bits;
        let mut excluded = (0u64, 0u64);
        let read = p.read_codes(cfg, &row, &mut summary, |_, code, excl| match excl {
            None => engine.add_code(bits, &code),
            Some(Exclusion::Primary) => excluded.0 += 1,
            Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
        });
        if let Err(issue) = read {
            return (summary, Some(p.issue_at(issue, line)));
        }
        summary.excluded_primary += excluded.0;
        summary.excluded_not_on_admission += excluded.1;
        let age = match p.read_age(cfg, &row, &mut summary) {
            Ok(a) => a,
            Err(issue) => return (summary, Some(p.issue_at(issue, line))),
        };
        engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
        engine.values(&unit.bits, age, &mut row_values);
        values.extend_from_slice(&row_values);
        summary.rows_written += 1;
        summary.units += 1;
    }
    (summary, None)
}

/// Long layout: code rows grouped by their id into units, in order of
/// first appearance, over batches taken in row order. Ids are compared by
/// their keys ([`Field::key_into`]: equal values, no text made); a missing id
/// (null) is a unit of its own, apart from an empty one, and both count as
/// rows without an id (a `--strict` stop), as an empty id of a text
/// extract does.
pub struct LongScorer<'e> {
    engine: &'e Engine,
    index: HashMap<Box<[u8]>, usize, BuildHasherDefault<KeyHasher>>,
    null: Option<usize>,
    /// The key of the row being added.
    key: Vec<u8>,
    /// The row (counted from 1) where each unit first appears.
    first_rows: Vec<u64>,
    bits: Vec<u64>,
    ages: Vec<Option<u32>>,
    disagrees: Vec<bool>,
    summary: Summary,
}

impl<'e> LongScorer<'e> {
    pub fn new(engine: &'e Engine, plan: &TypedPlan) -> LongScorer<'e> {
        LongScorer {
            engine,
            index: HashMap::default(),
            null: None,
            key: Vec::new(),
            first_rows: Vec::new(),
            bits: Vec::new(),
            ages: Vec::new(),
            disagrees: Vec::new(),
            summary: plan.summary(),
        }
    }

    fn unit(&mut self, id: Option<&[u8]>, line: u64) -> usize {
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
        self.first_rows.push(line);
        self.bits.resize(self.bits.len() + self.engine.words(), 0);
        self.ages.push(None);
        self.disagrees.push(false);
        u
    }

    /// Adds the rows of `batch` (whose first row is row `first`, counted
    /// from 1, of its source) to their units.
    pub fn add(
        &mut self,
        cfg: &ScoreConfig,
        plan: &TypedPlan,
        batch: &dyn Batch,
        first: u64,
    ) -> Result<(), Error> {
        let p = &plan.0;
        let engine = self.engine;
        let words = engine.words();
        let idc = p.id.unwrap_or(0);
        for i in 0..batch.len() {
            let row = BatchRow { batch, row: i };
            let line = first + i as u64;
            self.summary.rows_read += 1;
            let field = row.field(idc);
            let mut key = std::mem::take(&mut self.key);
            key.clear();
            if !field.key_into(&mut key) {
                if cfg.strict {
                    return Err(p.missing_id(line));
                }
                self.summary.missing_ids += 1;
            }
            let u = self.unit(
                match field {
                    Field::Null => None,
                    _ => Some(&key),
                },
                line,
            );
            self.key = key;
            let age = p
                .read_age(cfg, &row, &mut self.summary)
                .map_err(|i| p.issue_at(i, line))?;
            if let Some((first, a)) = keep_first(&mut self.ages[u], age) {
                let message = disagreement("age", a, first);
                if cfg.strict {
                    return Err(Error::Strict {
                        line: Some(line),
                        message,
                    });
                }
                self.summary.count_disagreeing(&mut self.disagrees[u]);
            }
            let bits = &mut self.bits[u * words..(u + 1) * words];
            let mut excluded = (0u64, 0u64);
            p.read_codes(cfg, &row, &mut self.summary, |_, code, excl| match excl {
                None => engine.add_code(bits, &code),
                Some(Exclusion::Primary) => excluded.0 += 1,
                Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
            })
            .map_err(|i| p.issue_at(i, line))?;
            self.summary.excluded_primary += excluded.0;
            self.summary.excluded_not_on_admission += excluded.1;
        }
        Ok(())
    }

    /// Scores every unit in order of first appearance, handing `out` the
    /// row (counted from 1) where the unit first appears and its values;
    /// returns the run's summary.
    pub fn finish(
        mut self,
        mut out: impl FnMut(u64, &[Value]) -> Result<(), Error>,
    ) -> Result<Summary, Error> {
        let engine = self.engine;
        let words = engine.words();
        let mut scratch = vec![0u64; words];
        let mut values: Vec<Value> = Vec::with_capacity(engine.columns().len());
        for (u, &first) in self.first_rows.iter().enumerate() {
            let b = &mut self.bits[u * words..(u + 1) * words];
            engine.apply_hierarchy(b, &mut scratch);
            engine.values(b, self.ages[u], &mut values);
            out(first, &values)?;
            self.summary.rows_written += 1;
            self.summary.units += 1;
        }
        Ok(self.summary)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::{Catalogue, SCALE};
    use crate::score::{IndexSpec, ScoreOptions};

    /// Rows of (id, code, age) values.
    struct Rows(Vec<[Field<'static>; 3]>);

    impl Batch for Rows {
        fn len(&self) -> usize {
            self.0.len()
        }
        fn field(&self, col: usize, row: usize) -> Field<'_> {
            self.0[row][col]
        }
    }

    fn engine() -> Engine {
        let specs = IndexSpec::parse_many("charlson:count").unwrap();
        let opts = ScoreOptions {
            age: true,
            ..ScoreOptions::default()
        };
        Engine::new(&Catalogue::builtin(), &specs, opts).unwrap()
    }

    fn cfg(strict: bool) -> ScoreConfig {
        ScoreConfig {
            dx: vec!["code".into()],
            layout: Layout::Long,
            id: Some("pid".into()),
            age: Some("age".into()),
            strict,
            ..ScoreConfig::default()
        }
    }

    fn header() -> Header {
        Header {
            names: vec!["pid".into(), "code".into(), "age".into()],
        }
    }

    const T: fn(&'static str) -> Field<'static> = |s| Field::Text(s.as_bytes());

    #[test]
    fn long_units_in_order_of_first_appearance_across_batches() {
        let e = engine();
        let c = cfg(false);
        let p = plan(&e, &c, header()).unwrap();
        let mut s = LongScorer::new(&e, &p);
        // I21 and I22 are one condition, myocardial infarction (Quan et
        // al., Med Care 2005;43:1130-9, Table 1, from memory).
        let a = Rows(vec![
            [T("b"), T("I21"), Field::Null],
            [Field::Integer(7), T("I50"), Field::Number(55.0)],
            [T("b"), T("I22"), Field::Integer(60)],
        ]);
        let b = Rows(vec![
            [Field::Null, T("G30"), Field::Null],
            [Field::Integer(7), T("N18"), Field::Null],
            [T(""), T("J44"), Field::Null],
        ]);
        s.add(&c, &p, &a, 1).unwrap();
        s.add(&c, &p, &b, 4).unwrap();
        let mut got = Vec::new();
        let summary = s
            .finish(|row, v| {
                got.push((row, v[0]));
                Ok(())
            })
            .unwrap();
        let count = |n: i64| Value::Score {
            scaled: n * SCALE,
            decimals: 0,
        };
        // b; 7 (one integer in two batches); null; "" (apart from
        // null).
        assert_eq!(
            got,
            vec![(1, count(1)), (2, count(2)), (4, count(1)), (6, count(1))]
        );
        assert_eq!(summary.units, 4);
        assert_eq!(summary.rows_read, 6);
        // The null and the empty id are rows without an id.
        assert_eq!(summary.missing_ids, 2);
        // b: no age on its first row, 60 on its third: no disagreement.
        assert_eq!(summary.disagreeing_units, 0);
    }

    #[test]
    fn a_long_unit_with_another_age_is_counted_or_stops_a_strict_run() {
        let e = engine();
        let rows = Rows(vec![
            [T("a"), T("I21"), Field::Number(70.0)],
            [T("a"), T("I50"), Field::Null],
            [T("a"), T("J44"), Field::Integer(71)],
        ]);
        let c = cfg(false);
        let p = plan(&e, &c, header()).unwrap();
        let mut s = LongScorer::new(&e, &p);
        s.add(&c, &p, &rows, 1).unwrap();
        let summary = s.finish(|_, _| Ok(())).unwrap();
        assert_eq!((summary.disagreeing_units, summary.missing_ages), (1, 1));
        let c = ScoreConfig {
            age: None,
            ..cfg(true)
        };
        let p = plan(&e, &c, header()).unwrap();
        let mut s = LongScorer::new(&e, &p);
        let rows = Rows(vec![
            [T("a"), T("I21"), Field::Null],
            [Field::Null, T("I50"), Field::Null],
        ]);
        let err = s.add(&c, &p, &rows, 10).unwrap_err();
        assert_eq!(
            err.to_string(),
            "line 11: missing id (column 'pid' is empty) (--strict)"
        );
    }

    #[test]
    fn runs_with_a_history_are_not_plain() {
        let e = engine();
        let c = ScoreConfig {
            lookback: Some(30),
            ..cfg(false)
        };
        assert!(plan(&e, &c, header()).is_err());
    }
}
