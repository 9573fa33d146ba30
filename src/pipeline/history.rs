//! Patient history: scoring each episode from its own codes and those of the
//! same patient's episodes whose date lies in `[date - lookback, date]`
//! (both ends inclusive; later episodes never count, episodes of the same day
//! count each other). Each list may have a window of its own, and with
//! [`WindowScope::EarlierOnly`] only episodes of earlier days count (the
//! window is `[date - lookback, date - 1]` and the episode's own codes are
//! left out).
//!
//! The extract is read into memory once: per episode its patient, date, age,
//! and two condition sets: `own_all` (every code, used when the episode is an
//! earlier one) and `own_current` (without the codes that the primary and
//! present-on-admission rules leave out, used when the episode is the one
//! being scored). Episodes are then sorted per patient by date and each
//! window slides along a patient's episodes with a count per condition
//! ([`History::resolve`]): linear in the episodes, however many one patient
//! has.

use std::io::{Read, Write};
use std::sync::atomic::{AtomicU32, Ordering};
use std::sync::{Mutex, PoisonError};

use super::dates;
use super::ids::Ids;
use super::parallel::{run_batches, run_blocks};
use super::partition::Spill;
use super::rows_store::{Loaded, RowStore};
use super::{
    check_collisions, disagreement, keep_first, Exclusion, Layout, OutputForm, Plan, Progress,
    RowIssue, ScoreConfig, Summary, WindowScope,
};
use crate::code::Code;
use crate::io::{write_field, RecordScanner};
use crate::rows::{Batch, BatchRow, Field, Keys, Row, RowNaming, RowSource};
use crate::score::{Engine, Value};
use crate::Error;

/// Where a history's rows come from.
pub enum Input<'a> {
    /// Delimited text (a file, standard input, a buffer), read in blocks.
    Text(Box<dyn Read + Send + 'a>),
    /// Typed rows (a data frame, a Parquet file's record batches), read
    /// batch by batch without any text in between.
    Rows(Box<dyn RowSource<'a> + 'a>),
}

impl<'a, R: Read + Send + 'a> From<R> for Input<'a> {
    fn from(r: R) -> Input<'a> {
        Input::Text(Box::new(r))
    }
}

/// One episode of the extract, packed into 12 bytes.
#[derive(Clone, Copy, Debug)]
pub struct Episode {
    pub patient: u32,
    /// Days since 1970-01-01; [`NO_DATE`] when missing or unreadable.
    date: i32,
    /// Whole years (0 to 130); [`NO_AGE`] when missing.
    age: u8,
    /// [`UNREADABLE_DATE`], [`DISAGREES`], [`NO_ID`].
    flags: u8,
}

const NO_DATE: i32 = i32::MIN;
const NO_AGE: u8 = u8::MAX;
/// The episode's date was unreadable (not merely missing).
const UNREADABLE_DATE: u8 = 1;
/// A later row of the episode gave another date, age or kept value (long
/// layout).
const DISAGREES: u8 = 2;
/// The episode's patient is a row without an id, nobody's history.
const NO_ID: u8 = 4;

impl Episode {
    /// Days since 1970-01-01; `None` when missing or unreadable.
    pub fn date(&self) -> Option<i32> {
        (self.date != NO_DATE).then_some(self.date)
    }

    /// Whole years; `None` when missing.
    pub fn age(&self) -> Option<u32> {
        (self.age != NO_AGE).then_some(self.age as u32)
    }

    fn set_date(&mut self, d: Option<i32>) {
        self.date = d.unwrap_or(NO_DATE);
    }

    fn set_age(&mut self, a: Option<u32>) {
        // `read_age` gives 0 to 130.
        self.age = a.map_or(NO_AGE, |a| a.min(NO_AGE as u32 - 1) as u8);
    }

    fn flag(&self, f: u8) -> bool {
        self.flags & f != 0
    }
}

/// One code of an episode (kept for `explain`).
#[derive(Clone, Debug)]
pub struct CodeRecord {
    pub episode: u32,
    pub written: Box<[u8]>,
    pub code: Code,
    pub exclusion: Option<Exclusion>,
}

/// A column whose value every unit carries, checked: `compare`'s outcome,
/// adjustment, `--by` and `--cluster` columns. A unit's value is the first
/// non-empty one among its rows, kept typed as the row gives it (text
/// trimmed; a whole number, a number, true/false, a date as such); a later
/// row of the unit with another non-empty value stops the run, naming both
/// rows. Read with the history, in the same pass
/// ([`History::read_with_values`]); only a history held in memory has them.
#[derive(Clone, Debug)]
pub struct ValueColumn {
    pub name: String,
    /// What the column is, in the message for a column not found
    /// (`outcome column 'x' not found; ...`).
    pub role: &'static str,
}

const CELL_NONE: u8 = 0;
const CELL_TEXT: u8 = 1;
const CELL_INTEGER: u8 = 2;
const CELL_NUMBER: u8 = 3;
const CELL_LOGICAL: u8 = 4;
const CELL_DATE: u8 = 5;

/// A value of a checked column, packed: its kind, its bits (a whole
/// number, a number's bits, true/false, a day; text: where it starts in
/// its arena) and (text) its length, and the line (or row) it was read
/// from.
#[derive(Clone, Copy, Debug)]
struct Cell {
    kind: u8,
    len: u32,
    bits: u64,
    line: u64,
}

impl Cell {
    const NONE: Cell = Cell {
        kind: CELL_NONE,
        len: 0,
        bits: 0,
        line: 0,
    };

    /// A row's value: nothing for a missing value, a NaN or text that is
    /// empty once trimmed; text is trimmed and copied into `arena`.
    fn read(f: Field<'_>, arena: &mut Vec<u8>) -> Cell {
        let (kind, bits) = match f {
            Field::Null => return Cell::NONE,
            Field::Number(x) if x.is_nan() => return Cell::NONE,
            Field::Text(t) => {
                let t = t.trim_ascii();
                if t.is_empty() {
                    return Cell::NONE;
                }
                let at = arena.len();
                arena.extend_from_slice(t);
                return Cell {
                    kind: CELL_TEXT,
                    len: t.len() as u32,
                    bits: at as u64,
                    line: 0,
                };
            }
            Field::Integer(i) => (CELL_INTEGER, i as u64),
            Field::Number(x) => (CELL_NUMBER, x.to_bits()),
            Field::Logical(b) => (CELL_LOGICAL, b as u64),
            Field::Date(d) => (CELL_DATE, d as u64),
        };
        Cell {
            kind,
            len: 0,
            bits,
            line: 0,
        }
    }

    /// The value as a [`Field`] (text from `arena`).
    fn field<'a>(&self, arena: &'a [u8]) -> Field<'a> {
        match self.kind {
            CELL_TEXT => {
                let s = self.bits as usize;
                Field::Text(&arena[s..s + self.len as usize])
            }
            CELL_INTEGER => Field::Integer(self.bits as i64),
            CELL_NUMBER => Field::Number(f64::from_bits(self.bits)),
            CELL_LOGICAL => Field::Logical(self.bits != 0),
            CELL_DATE => Field::Date(self.bits as i64),
            _ => Field::Null,
        }
    }
}

/// Whether two values of one column are the same value (text byte for
/// byte, once trimmed; typed values by value).
fn same_value(a: Field<'_>, b: Field<'_>) -> bool {
    match (a, b) {
        (Field::Number(x), Field::Number(y)) => x == y,
        (a, b) => a == b,
    }
}

/// A row as messages name it: `line N` for text, `row N` for a typed
/// source (numbered as its [`RowNaming`] says).
fn place(naming: Option<&RowNaming>, line: u64) -> String {
    match naming {
        None => format!("line {line}"),
        Some(n) => format!("row {}", line.saturating_sub(1) + n.first),
    }
}

/// The extract held in memory.
pub struct History {
    pub(crate) plan: Plan,
    /// The header's raw bytes.
    pub header_raw: Vec<u8>,
    /// Patient ids, numbered by first appearance (`Episode::patient`).
    pub(crate) patients: Ids,
    pub episodes: Vec<Episode>,
    /// Each episode's data row number (1-based, its first record); empty
    /// while every episode `e` is row `e + 1` (the wide layout read whole).
    rows: Vec<u64>,
    /// Long layout with `--episode`: each episode's value.
    keys: Ids,
    /// Kept columns (`ScoreConfig::keep`): per episode, one value per
    /// column (the first non-empty one of its rows).
    kept: Vec<Option<Box<[u8]>>>,
    /// The data row (1-based) each kept value was taken from (0: none),
    /// like `kept`.
    kept_rows: Vec<u64>,
    /// Checked columns ([`ValueColumn`]): per episode, one value per
    /// column, typed; text in `value_bytes`.
    values: Vec<Cell>,
    value_bytes: Vec<u8>,
    /// How the rows of a typed source are named in messages (`None`: text,
    /// named by line).
    naming: Option<RowNaming>,
    words: usize,
    own_all: Vec<u64>,
    /// Empty when no exclusion rule is on (then it equals `own_all`).
    own_current: Vec<u64>,
    /// Wide layout: each episode's raw row ends at `raw_ends[e]` in its
    /// block of `raw_blocks` (starting where the previous one ended, or at
    /// 0 for a block's first); block `b` starts at episode `raw_first[b]`.
    raw_ends: Vec<u32>,
    raw_first: Vec<u32>,
    raw_blocks: RowStore,
    /// Every code, when asked for.
    pub codes: Vec<CodeRecord>,
    /// `own_all` holds each episode's windowed set ([`History::resolve`]).
    resolved: bool,
    /// Wide layout, spilled: the raw rows are put in front of each output
    /// line elsewhere (`partition.rs`); a line holds the scores, each after
    /// its delimiter.
    rows_apart: bool,
}

/// How a row's date read.
#[derive(Clone, Copy)]
pub(crate) enum DateRead {
    Day(i32),
    Missing,
    Unreadable,
}

/// One data row (or, when a run starts spilling, one episode read so far)
/// on its way into a [`Builder`].
pub(crate) struct RowIn<'a> {
    /// Data row number (1-based).
    pub row: u64,
    /// Line of the record (long layout only, for messages; else 0).
    pub line: u64,
    /// An id column was given but this row's id is empty.
    pub no_id: bool,
    /// The episode's rows already disagreed (an episode carried over).
    pub disagrees: bool,
    pub date: DateRead,
    pub age: Option<u32>,
    pub pid: &'a [u8],
    /// `pid`'s hash when it was made ahead ([`super::ids::hash`]).
    pub pid_hash: Option<u64>,
    pub ekey: &'a [u8],
    /// Kept values: spans into `kept_bytes`, one per kept column.
    pub kept_bytes: &'a [u8],
    pub kept: &'a [(usize, usize)],
    /// Condition sets: every code, and (with an exclusion rule) the codes
    /// the rules keep.
    pub all: &'a [u64],
    pub cur: &'a [u64],
}

/// Episodes being read: merges rows into episodes (the long layout's rows
/// by patient and episode value), whether they come straight from the
/// input or back from a partition file.
pub(crate) struct Builder {
    layout: Layout,
    strict: bool,
    words: usize,
    exclusions: bool,
    nkeep: usize,
    long_episodes: bool,
    patients: Ids,
    episodes: Vec<Episode>,
    rows: Vec<u64>,
    keys: Ids,
    kept: Vec<Option<Box<[u8]>>>,
    kept_rows: Vec<u64>,
    /// Checked columns: their number and names, each episode's values.
    nvalues: usize,
    value_names: Vec<String>,
    values: Vec<Cell>,
    value_bytes: Vec<u8>,
    own_all: Vec<u64>,
    own_current: Vec<u64>,
    /// Long layout: the (patient, episode value) of each episode, numbered
    /// like the episodes.
    episode_index: Ids,
    key: Vec<u8>,
}

impl Builder {
    pub fn new(cfg: &ScoreConfig, plan: &Plan, words: usize) -> Builder {
        Builder {
            layout: cfg.layout,
            strict: cfg.strict,
            words,
            exclusions: cfg.exclude_primary || cfg.poa.is_some(),
            nkeep: plan.keep.len(),
            long_episodes: plan.episode.is_some(),
            patients: Ids::default(),
            episodes: Vec::new(),
            rows: Vec::new(),
            keys: Ids::default(),
            kept: Vec::new(),
            kept_rows: Vec::new(),
            nvalues: plan.values.len(),
            value_names: plan
                .values
                .iter()
                .map(|&c| plan.header.names[c].clone())
                .collect(),
            values: Vec::new(),
            value_bytes: Vec::new(),
            own_all: Vec::new(),
            own_current: Vec::new(),
            episode_index: Ids::default(),
            key: Vec::new(),
        }
    }

    pub fn episodes(&self) -> usize {
        self.episodes.len()
    }

    /// Bytes held, and those the resolution will add (the window order).
    pub fn heap_bytes(&self) -> usize {
        self.episodes.capacity() * std::mem::size_of::<Episode>()
            + self.rows.capacity() * 8
            + self.kept.capacity() * 24
            + self.values.capacity() * std::mem::size_of::<Cell>()
            + self.value_bytes.capacity()
            + (self.own_all.capacity() + self.own_current.capacity()) * 8
            + self.patients.heap_bytes()
            + self.keys.heap_bytes()
            + self.episode_index.heap_bytes()
            + self.episodes.len() * 4
            + self.patients.len() * 4
    }

    /// Episode `e` as a row to carry over into a partition (`raw` is its
    /// raw row, if any, given by the caller).
    pub fn carried<'a>(
        &'a self,
        e: usize,
        kept: &'a mut Vec<(usize, usize)>,
        kept_bytes: &'a mut Vec<u8>,
    ) -> RowIn<'a> {
        let w = self.words;
        let ep = &self.episodes[e];
        kept.clear();
        kept_bytes.clear();
        for j in 0..self.nkeep {
            let s = kept_bytes.len();
            if let Some(v) = &self.kept[e * self.nkeep + j] {
                kept_bytes.extend_from_slice(v);
            }
            kept.push((s, kept_bytes.len()));
        }
        RowIn {
            row: self.rows.get(e).copied().unwrap_or(e as u64 + 1),
            line: 0,
            no_id: ep.flag(NO_ID),
            disagrees: ep.flag(DISAGREES),
            date: match ep.date() {
                Some(d) => DateRead::Day(d),
                None if ep.flag(UNREADABLE_DATE) => DateRead::Unreadable,
                None => DateRead::Missing,
            },
            age: ep.age(),
            pid: self.patients.get(ep.patient),
            pid_hash: None,
            ekey: if self.long_episodes {
                self.keys.get(e as u32)
            } else {
                &[]
            },
            kept_bytes,
            kept,
            all: &self.own_all[e * w..(e + 1) * w],
            cur: if self.exclusions {
                &self.own_current[e * w..(e + 1) * w]
            } else {
                &[]
            },
        }
    }

    /// Adds a row: a new episode, or (long layout) more of an episode seen
    /// before. Returns the episode's number.
    pub fn add_row(
        &mut self,
        plan: &Plan,
        r: &RowIn<'_>,
        summary: &mut Summary,
    ) -> Result<u32, Error> {
        let words = self.words;
        let e = match self.layout {
            // Every wide row is an episode.
            Layout::Wide => self.fresh(r),
            // In the long layout one per (patient, episode value), or per
            // patient.
            Layout::Long => {
                self.key.clear();
                self.key
                    .extend_from_slice(&(r.pid.len() as u32).to_le_bytes());
                self.key.extend_from_slice(r.pid);
                self.key.extend_from_slice(r.ekey);
                let key = std::mem::take(&mut self.key);
                let (x, new) = self.episode_index.intern(&key);
                self.key = key;
                if new {
                    let x2 = self.fresh(r);
                    debug_assert_eq!(x, x2);
                    if self.long_episodes {
                        self.keys.push(r.ekey);
                    }
                }
                x
            }
        };
        let nkeep = self.nkeep;
        let ep = &mut self.episodes[e as usize];
        if r.disagrees {
            ep.flags |= DISAGREES;
        }
        // The first readable date and age of an episode's rows count; a
        // later row giving another one is counted (and stops a --strict
        // run).
        let day = match r.date {
            DateRead::Day(d) => Some(d),
            DateRead::Unreadable => {
                if ep.date().is_none() {
                    ep.flags |= UNREADABLE_DATE;
                }
                None
            }
            DateRead::Missing => None,
        };
        let iso = |d: i32| {
            let mut t = Vec::new();
            dates::write_iso_date(d as i64, &mut t);
            String::from_utf8_lossy(&t).into_owned()
        };
        let mut date = ep.date();
        let other_date =
            keep_first(&mut date, day).map(|(first, d)| disagreement("date", iso(d), iso(first)));
        ep.set_date(date);
        let mut age = ep.age();
        let other_age = keep_first(&mut age, r.age).map(|(first, a)| disagreement("age", a, first));
        ep.set_age(age);
        let mut other_kept = None;
        let form = plan.keys;
        for j in 0..nkeep {
            let (s, t) = r.kept[j];
            let v = &r.kept_bytes[s..t];
            if v.trim_ascii().is_empty() {
                continue;
            }
            match &self.kept[e as usize * nkeep + j] {
                None => {
                    self.kept[e as usize * nkeep + j] = Some(v.into());
                    self.kept_rows[e as usize * nkeep + j] = r.row;
                }
                Some(first) if !form.same(first, v) && other_kept.is_none() => {
                    let name = &plan.header.names[plan.keep[j]];
                    other_kept = Some(disagreement(
                        &format!("value of column '{name}'"),
                        String::from_utf8_lossy(&form.text(v)),
                        String::from_utf8_lossy(&form.text(first)),
                    ));
                }
                Some(_) => {}
            }
        }
        if let Some(message) = other_date.or(other_age).or(other_kept) {
            if self.strict {
                return Err(Error::Strict {
                    line: Some(r.line),
                    message,
                });
            }
            let ep = &mut self.episodes[e as usize];
            let mut counted = ep.flag(DISAGREES);
            summary.count_disagreeing(&mut counted);
            ep.flags |= DISAGREES;
        }
        let dst = e as usize * words;
        for k in 0..words {
            self.own_all[dst + k] |= r.all[k];
        }
        if self.exclusions {
            for k in 0..words {
                self.own_current[dst + k] |= r.cur[k];
            }
        }
        Ok(e)
    }

    /// Prepares the lookup of patient id `pid`, to be added a few rows
    /// later (wide layout: every row looks its patient up).
    #[inline]
    pub fn prefetch(&self, pid_hash: u64, step: u8) {
        if self.layout == Layout::Wide {
            self.patients.prefetch(pid_hash, step);
        }
    }

    /// A new episode for row `r`, of its patient (rows without an id get a
    /// patient of their own).
    fn fresh(&mut self, r: &RowIn<'_>) -> u32 {
        let patient = if r.no_id {
            self.patients.push(r.pid)
        } else {
            let h = r.pid_hash.unwrap_or_else(|| super::ids::hash(r.pid));
            self.patients.intern_hashed(r.pid, h).0
        };
        let e = self.episodes.len();
        self.episodes.push(Episode {
            patient,
            date: NO_DATE,
            age: NO_AGE,
            flags: if r.no_id { NO_ID } else { 0 },
        });
        // Row numbers are kept only once one is not implied by the order.
        if self.rows.is_empty() && r.row != e as u64 + 1 {
            self.rows.extend(1..=e as u64);
        }
        if !self.rows.is_empty() || r.row != e as u64 + 1 {
            self.rows.push(r.row);
        }
        self.own_all.resize(self.own_all.len() + self.words, 0);
        if self.exclusions {
            self.own_current
                .resize(self.own_current.len() + self.words, 0);
        }
        self.kept.resize(self.kept.len() + self.nkeep, None);
        self.kept_rows.resize(self.kept_rows.len() + self.nkeep, 0);
        self.values
            .resize(self.values.len() + self.nvalues, Cell::NONE);
        e as u32
    }

    /// Adds a row's values of the checked columns (`cells`, text in
    /// `bytes`) to episode `e`: the first non-empty value of each column
    /// is the episode's; a later row with another non-empty value is an
    /// error naming both rows (`line`: the row's line, or its 1-based row
    /// for a typed source, named by `naming`).
    fn add_values(
        &mut self,
        e: u32,
        cells: &[Cell],
        bytes: &[u8],
        line: u64,
        naming: Option<&RowNaming>,
    ) -> Result<(), Error> {
        let base = e as usize * self.nvalues;
        for (j, c) in cells.iter().enumerate() {
            if c.kind == Cell::NONE.kind {
                continue;
            }
            let first = self.values[base + j];
            if first.kind == Cell::NONE.kind {
                let mut c = *c;
                c.line = line;
                if c.kind == CELL_TEXT {
                    let (s, n) = (c.bits as usize, c.len as usize);
                    c.bits = self.value_bytes.len() as u64;
                    self.value_bytes.extend_from_slice(&bytes[s..s + n]);
                }
                self.values[base + j] = c;
                continue;
            }
            let new = c.field(bytes);
            let old = first.field(&self.value_bytes);
            if !same_value(new, old) {
                let shown = |f: Field<'_>| String::from_utf8_lossy(&f.text_or_empty()).into_owned();
                return Err(Error::data(
                    Some(line),
                    format!(
                        "column '{}' holds '{}' here but '{}' on {} of the same episode",
                        self.value_names[j],
                        shown(new),
                        shown(old),
                        place(naming, first.line)
                    ),
                ));
            }
        }
        Ok(())
    }

    /// The history of the episodes read: their missing and unreadable
    /// dates counted into `summary`.
    pub fn finish(
        self,
        plan: Plan,
        header_raw: Vec<u8>,
        raw: (Vec<u32>, Vec<u32>, RowStore),
        codes: Vec<CodeRecord>,
        summary: &mut Summary,
    ) -> History {
        if plan.date.is_some() {
            for ep in &self.episodes {
                if ep.date().is_none() {
                    if ep.flag(UNREADABLE_DATE) {
                        summary.unreadable_dates += 1;
                    } else {
                        summary.missing_dates += 1;
                    }
                }
            }
        }
        let (raw_ends, raw_first, raw_blocks) = raw;
        History {
            plan,
            header_raw,
            patients: self.patients,
            episodes: self.episodes,
            rows: self.rows,
            keys: self.keys,
            kept: self.kept,
            kept_rows: self.kept_rows,
            values: self.values,
            value_bytes: self.value_bytes,
            naming: None,
            words: self.words,
            own_all: self.own_all,
            own_current: self.own_current,
            raw_ends,
            raw_first,
            raw_blocks,
            codes,
            resolved: false,
            rows_apart: false,
        }
    }
}

/// What a [`History`] keeps besides the condition sets.
#[derive(Clone, Copy, Debug, Default)]
pub struct Needs {
    /// Every code, for `explain`.
    pub codes: bool,
    /// The wide layout's raw rows, for an output that copies them.
    pub rows: bool,
    /// The output's columns checked against the input's, once its header
    /// is read and before any row ([`OutputCheck`]).
    pub(crate) output: Option<OutputCheck>,
}

/// A check of a run's output columns against its input's (`score`'s names
/// taken twice, `explain`'s `--label`): a usage error found once the
/// header is read stops the run before its rows, so that it is the same
/// first error whether the history is held or spilled (and comes before
/// reading a large input for nothing).
pub(crate) type OutputCheck = fn(&Engine, &ScoreConfig, &Plan) -> Result<(), Error>;

/// The lookback windows of a run: the lists grouped by window length, each
/// group with the mask of its conditions.
pub struct Windows {
    pub groups: Vec<WindowGroup>,
    /// Every condition of a list scored over a window.
    pub windowed: Vec<u64>,
    pub scope: WindowScope,
    /// Each engine list's window (`None`: scored from the episode alone).
    pub per_list: Vec<Option<u32>>,
}

/// The lists sharing one window length.
pub struct WindowGroup {
    /// Days before the episode's date (`u32::MAX`: the whole history).
    pub days: u32,
    pub mask: Vec<u64>,
}

impl Windows {
    /// The windows of `cfg` over the engine's lists. A list named in
    /// `lookback_lists` that is not an index of the run is a usage error.
    pub fn new(engine: &Engine, cfg: &ScoreConfig) -> Result<Windows, Error> {
        let w = engine.words();
        for (name, _) in &cfg.lookback_lists {
            if !engine.lists().iter().any(|l| &l.list.name == name) {
                let run: Vec<&str> = engine
                    .lists()
                    .iter()
                    .map(|l| l.list.name.as_str())
                    .collect();
                return Err(Error::Usage(format!(
                    "--lookback names list '{name}', which is not scored in this run (lists: {})",
                    run.join(", ")
                )));
            }
        }
        let mut groups: Vec<WindowGroup> = Vec::new();
        let mut windowed = vec![0u64; w];
        let mut per_list = Vec::new();
        for l in engine.lists() {
            let days = cfg
                .lookback_lists
                .iter()
                .find(|(n, _)| *n == l.list.name)
                .map(|&(_, d)| d)
                .or(cfg.lookback);
            per_list.push(days);
            let Some(days) = days else { continue };
            let gi = match groups.iter().position(|g| g.days == days) {
                Some(i) => i,
                None => {
                    groups.push(WindowGroup {
                        days,
                        mask: vec![0; w],
                    });
                    groups.len() - 1
                }
            };
            for id in l.offset..l.offset + l.list.conditions.len() {
                groups[gi].mask[id >> 6] |= 1 << (id & 63);
                windowed[id >> 6] |= 1 << (id & 63);
            }
        }
        Ok(Windows {
            groups,
            windowed,
            scope: cfg.window,
            per_list,
        })
    }
}

/// Adds an episode's conditions (under `mask`) to a window's counts.
fn count_in(own: &[u64], mask: &[u64], counts: &mut [u32], present: &mut [u64], multi: &mut [u64]) {
    for (j, (&o, &m)) in own.iter().zip(mask).enumerate() {
        let mut x = o & m;
        while x != 0 {
            let b = x.trailing_zeros() as usize;
            x &= x - 1;
            let c = &mut counts[j * 64 + b];
            *c += 1;
            match *c {
                1 => present[j] |= 1 << b,
                2 => multi[j] |= 1 << b,
                _ => {}
            }
        }
    }
}

/// Removes an episode's conditions (under `mask`) from a window's counts.
fn count_out(
    own: &[u64],
    mask: &[u64],
    counts: &mut [u32],
    present: &mut [u64],
    multi: &mut [u64],
) {
    for (j, (&o, &m)) in own.iter().zip(mask).enumerate() {
        let mut x = o & m;
        while x != 0 {
            let b = x.trailing_zeros() as usize;
            x &= x - 1;
            let c = &mut counts[j * 64 + b];
            *c -= 1;
            match *c {
                0 => present[j] &= !(1 << b),
                1 => multi[j] &= !(1 << b),
                _ => {}
            }
        }
    }
}

/// Fewest episodes in a piece of a resolution on several threads
/// ([`History::resolve`]): smaller pieces cost more to hand out than they
/// gain.
const MIN_PIECE: usize = 4096;

/// Sorts one patient's episodes by date, undated last; a stable sort keeps
/// input order among ties.
fn sort_by_date(seg: &mut [u32], episodes: &[Episode]) {
    if seg.len() > 1 {
        seg.sort_by_key(|&e| episodes[e as usize].date().map_or(i64::MAX, i64::from));
    }
}

/// Runs `work` over every item on up to `threads` threads (the calling
/// thread among them), each with a `state` of its own and taking the next
/// item when done with one, so that a thread slowed by other work takes
/// fewer. Returns once every item is done.
fn on_threads<T: Send, S>(
    threads: usize,
    items: Vec<T>,
    state: impl Fn() -> S + Sync,
    work: impl Fn(&mut S, T) + Sync,
) {
    let spawn = threads.min(items.len()).saturating_sub(1);
    let queue = Mutex::new(items.into_iter());
    let run = || {
        let mut s = state();
        loop {
            let next = queue.lock().unwrap_or_else(PoisonError::into_inner).next();
            let Some(item) = next else { break };
            work(&mut s, item);
        }
    };
    std::thread::scope(|scope| {
        for _ in 0..spawn {
            scope.spawn(run);
        }
        run();
    });
}

/// What resolving a patient's episodes reads, the same for every patient.
struct Slide<'a> {
    w: usize,
    windows: &'a Windows,
    earlier_only: bool,
    episodes: &'a [Episode],
}

/// A window's state as it slides: the count of each condition among the
/// episodes inside, and the conditions counted once or more and twice or
/// more. Empty again after each patient.
struct SlideState {
    counts: Vec<u32>,
    present: Vec<u64>,
    multi: Vec<u64>,
}

impl Slide<'_> {
    fn state(&self) -> SlideState {
        SlideState {
            counts: vec![0; self.w * 64],
            present: vec![0; self.w],
            multi: vec![0; self.w],
        }
    }

    /// Resolves one patient's episodes `seg` (in window order) from their
    /// own sets into `out` (`seg.len()` sets of `w` words, in the same
    /// order; every word written): see [`History::resolve`].
    fn patient(
        &self,
        seg: &[u32],
        own_all: &[u64],
        own_current: &[u64],
        st: &mut SlideState,
        out: &mut [u64],
    ) {
        let w = self.w;
        let earlier_only = self.earlier_only;
        let windows = self.windows;
        let episodes = self.episodes;
        let date = |e: u32| episodes[e as usize].date().map_or(0, i64::from);
        let own = |e: u32| &own_all[e as usize * w..(e as usize + 1) * w];
        for (k, &e) in seg.iter().enumerate() {
            let e = e as usize;
            let cur = if own_current.is_empty() {
                &own_all[e * w..(e + 1) * w]
            } else {
                &own_current[e * w..(e + 1) * w]
            };
            for j in 0..w {
                out[k * w + j] = if earlier_only {
                    cur[j] & !windows.windowed[j]
                } else {
                    cur[j]
                };
            }
        }
        let dated = seg
            .iter()
            .take_while(|&&e| episodes[e as usize].date().is_some())
            .count();
        let SlideState {
            counts,
            present,
            multi,
        } = st;
        for g in &windows.groups {
            let (mut lo, mut hi) = (0usize, 0usize);
            for k in 0..dated {
                let d = date(seg[k]);
                while hi < dated && (date(seg[hi]) < d || (!earlier_only && date(seg[hi]) == d)) {
                    count_in(own(seg[hi]), &g.mask, counts, present, multi);
                    hi += 1;
                }
                while lo < hi && date(seg[lo]) < d - g.days as i64 {
                    count_out(own(seg[lo]), &g.mask, counts, present, multi);
                    lo += 1;
                }
                let mine = own(seg[k]);
                let o = &mut out[k * w..(k + 1) * w];
                for j in 0..w {
                    let others = if earlier_only {
                        present[j]
                    } else {
                        multi[j] | (present[j] & !mine[j])
                    };
                    o[j] |= others & g.mask[j];
                }
            }
            while lo < hi {
                count_out(own(seg[lo]), &g.mask, counts, present, multi);
                lo += 1;
            }
        }
    }
}

/// One data row as a worker read it.
struct RowRead {
    /// An id column was given but this row's id is empty: the row is
    /// nobody's history and gets a patient of its own.
    no_id: bool,
    pid: (usize, usize),
    /// The hash of the id ([`super::ids::hash`]), made here so that the
    /// thread merging the rows need not.
    pid_hash: u64,
    ekey: (usize, usize),
    date: DateRead,
    age: Option<u32>,
    /// Line of the record (long layout only, for messages; else 0).
    line: u64,
}

/// A block's rows, read on a worker thread.
struct BlockRows {
    summary: Summary,
    err: Option<Error>,
    rows: Vec<RowRead>,
    /// Patient ids, episode values and kept values of the rows.
    ids: Vec<u8>,
    /// Kept values: `plan.keep.len()` spans into `ids` per row.
    keep: Vec<(usize, usize)>,
    /// Checked values: `plan.values.len()` per row (text in `ids`).
    values: Vec<Cell>,
    all: Vec<u64>,
    cur: Vec<u64>,
    raw: Vec<u8>,
    raw_ends: Vec<usize>,
    /// Codes with `episode` holding the row's index in the block.
    codes: Vec<CodeRecord>,
}

impl BlockRows {
    fn new() -> BlockRows {
        BlockRows {
            summary: Summary::default(),
            err: None,
            rows: Vec::new(),
            ids: Vec::new(),
            keep: Vec::new(),
            values: Vec::new(),
            all: Vec::new(),
            cur: Vec::new(),
            raw: Vec::new(),
            raw_ends: Vec::new(),
            codes: Vec::new(),
        }
    }
}

/// What a block reader keeps of each row besides its conditions.
#[derive(Clone, Copy)]
struct Keeps {
    codes: bool,
    /// Two condition sets (an exclusion rule is on).
    exclusions: bool,
    /// The wide layout's raw rows.
    rows: bool,
}

/// Reads one row, whatever its source, into `b`: the one reader of the
/// history's rows. `line` gives the row's place for messages (the line of
/// a text record, the 1-based row of a typed source); `raw` is the text
/// record's bytes.
#[allow(clippy::too_many_arguments)]
fn read_row(
    engine: &Engine,
    cfg: &ScoreConfig,
    p: &Plan,
    b: &mut BlockRows,
    row: &impl Row,
    mut line: impl FnMut() -> u64,
    raw: Option<&[u8]>,
    keeps: Keeps,
) -> Result<(), Error> {
    let words = engine.words();
    // Ids and episode values as keys (a text field's bytes, a typed
    // value's key: no text is made of a typed value); kept values as keys
    // that give the value back exactly, empty when missing.
    let s = b.ids.len();
    let has_id = p.id.is_some_and(|c| row.key_into(c, false, &mut b.ids));
    let pid = (s, b.ids.len());
    let no_id = p.id.is_some() && !has_id;
    if no_id {
        if cfg.strict {
            return Err(p.missing_id(line()));
        }
        b.summary.missing_ids += 1;
    }
    let s = b.ids.len();
    if let Some(c) = p.episode {
        row.key_into(c, false, &mut b.ids);
    }
    let ekey = (s, b.ids.len());
    for &c in &p.keep {
        let s = b.ids.len();
        if !row.key_into(c, true, &mut b.ids) {
            b.ids.truncate(s);
        }
        b.keep.push((s, b.ids.len()));
    }
    for &c in &p.values {
        let cell = Cell::read(row.field(c), &mut b.ids);
        b.values.push(cell);
    }
    let date = match p.read_date(cfg, row, &mut b.summary) {
        Ok(Some(d)) => DateRead::Day(d),
        Ok(None) => DateRead::Missing,
        Err(raw) => {
            if cfg.strict {
                return Err(match raw {
                    Some(v) => p.issue_at(RowIssue::UnreadableDate(v), line()),
                    None => Error::Strict {
                        line: Some(line()),
                        message: "missing date".into(),
                    },
                });
            }
            if raw.is_some() {
                DateRead::Unreadable
            } else {
                DateRead::Missing
            }
        }
    };
    let age = p
        .read_age(cfg, row, &mut b.summary)
        .map_err(|i| p.issue_at(i, line()))?;
    let index = b.rows.len();
    b.all.resize(b.all.len() + words, 0);
    if keeps.exclusions {
        b.cur.resize(b.cur.len() + words, 0);
    }
    let base = index * words;
    let (all, cur, codes) = (&mut b.all, &mut b.cur, &mut b.codes);
    let mut excluded = (0u64, 0u64);
    p.read_codes(cfg, row, &mut b.summary, |written, code, excl| {
        engine.add_code(&mut all[base..base + words], &code);
        match excl {
            None if keeps.exclusions => engine.add_code(&mut cur[base..base + words], &code),
            None => {}
            Some(Exclusion::Primary) => excluded.0 += 1,
            Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
        }
        if keeps.codes {
            codes.push(CodeRecord {
                episode: index as u32,
                written: written.into(),
                code,
                exclusion: excl,
            });
        }
    })
    .map_err(|i| p.issue_at(i, line()))?;
    b.summary.excluded_primary += excluded.0;
    b.summary.excluded_not_on_admission += excluded.1;
    if let (true, Layout::Wide, Some(raw)) = (keeps.rows, cfg.layout, raw) {
        b.raw.extend_from_slice(raw);
        b.raw_ends.push(b.raw.len());
    }
    // Messages about a long layout's episodes, or about checked values,
    // name the row's line.
    let line = match cfg.layout {
        Layout::Long => line(),
        Layout::Wide if !p.values.is_empty() => line(),
        Layout::Wide => 0,
    };
    b.rows.push(RowRead {
        no_id,
        pid,
        pid_hash: super::ids::hash(&b.ids[pid.0..pid.1]),
        ekey,
        date,
        age,
        line,
    });
    Ok(())
}

/// Reads the data records of one block of text.
fn read_block(
    engine: &Engine,
    cfg: &ScoreConfig,
    p: &Plan,
    block: &crate::io::Block,
    start: usize,
    scanner: &mut RecordScanner,
    keeps: Keeps,
) -> BlockRows {
    let mut b = BlockRows::new();
    // Lines counted incrementally: O(block) per block.
    let mut lines = super::LineCursor::new(block);
    let r = scanner.scan_from(&block.data, start, block.last, |rec| -> Result<(), Error> {
        b.summary.rows_read += 1;
        p.check_width(block, &rec)?;
        let line = || lines.line_at(block, rec.offset);
        read_row(
            engine,
            cfg,
            p,
            &mut b,
            &rec.fields,
            line,
            Some(rec.raw),
            keeps,
        )
    });
    b.err = r.err();
    b
}

/// Reads the rows of one typed batch, whose first row is data row `first`
/// (1-based) of its source.
fn read_batch(
    engine: &Engine,
    cfg: &ScoreConfig,
    p: &Plan,
    batch: &dyn Batch,
    first: u64,
    keeps: Keeps,
) -> BlockRows {
    let mut b = BlockRows::new();
    for i in 0..batch.len() {
        b.summary.rows_read += 1;
        let row = BatchRow { batch, row: i };
        let line = || first + i as u64;
        if let Err(e) = read_row(engine, cfg, p, &mut b, &row, line, None, keeps) {
            b.err = Some(e);
            break;
        }
    }
    b
}

/// Stops a run whose share of unreadable dates (among episodes with a
/// non-empty date) is over `--max-unreadable-dates`: the format is likely
/// the wrong one, and every such episode would be scored alone.
pub(crate) fn check_unreadable_dates(
    cfg: &ScoreConfig,
    summary: &Summary,
    episodes: u64,
) -> Result<(), Error> {
    let unreadable = summary.unreadable_dates;
    let non_empty = episodes - summary.missing_dates;
    if unreadable == 0 || (unreadable as f64) * 100.0 <= cfg.max_unreadable_dates * non_empty as f64
    {
        return Ok(());
    }
    let share = unreadable as f64 * 100.0 / non_empty as f64;
    Err(Error::data(
        None,
        format!(
            "{unreadable} of {non_empty} episodes with a date ({share:.2}%) have an unreadable date, more than the {}% allowed by --max-unreadable-dates; e.g. {} (expected {}); give the dates' format with --date-format, or raise --max-unreadable-dates",
            cfg.max_unreadable_dates,
            summary.date_examples(),
            cfg.date_format
        ),
    ))
}

/// Whether a history holding `held` bytes after `progress.bytes_read` of
/// an input of `size` bytes will clearly pass `limit` by the end: once 8
/// MiB (or a sixteenth of a smaller input) are read, the history so far
/// scaled to the whole input is over one and a half times the limit.
fn will_not_fit(held: usize, progress: &Progress, size: Option<u64>, limit: usize) -> bool {
    let Some(size) = size else { return false };
    let done = progress.bytes_read;
    if done == 0 || done < (8 << 20).min(size / 16) {
        return false;
    }
    let projected = held as f64 * size as f64 / done as f64;
    projected > limit as f64 * 1.5
}

/// A history as read: in memory, or (when it would not fit in the memory
/// limit) spread over partition files.
// Made once per run: the size of the variants does not matter.
#[allow(clippy::large_enum_variant)]
pub(crate) enum ReadHistory {
    Memory(History),
    Spilled(Spill, Plan, Vec<u8>),
}

/// Reads the whole extract, parsing blocks on every core and merging them
/// in input order. With `spill_at`, once the history holds more than that
/// many bytes everything read so far and every later row goes to partition
/// files instead ([`Spill`]).
pub(crate) fn read_history<'a>(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Into<Input<'a>>,
    needs: Needs,
    spill_at: Option<usize>,
    values: &[ValueColumn],
) -> Result<(ReadHistory, Summary), Error> {
    let input = input.into();
    let naming = match &input {
        Input::Rows(source) => Some(source.naming()),
        Input::Text(_) => None,
    };
    // The plan of the run, with the checked columns resolved.
    let with_values = |mut plan: Plan| -> Result<Plan, Error> {
        plan.values = values
            .iter()
            .map(|v| plan.header.column(&v.name, v.role))
            .collect::<Result<_, _>>()?;
        if let Some(check) = needs.output {
            check(engine, cfg, &plan)?;
        }
        Ok(plan)
    };
    let keep_codes = needs.codes;
    let words = engine.words();
    let exclusions = cfg.exclude_primary || cfg.poa.is_some();
    let mut summary = Summary::default();
    let mut builder: Option<Builder> = None;
    let mut spill: Option<Spill> = None;
    let mut raw_ends: Vec<u32> = Vec::new();
    let mut raw_first: Vec<u32> = Vec::new();
    let temp_dir = cfg.temp_dir.clone().unwrap_or_else(std::env::temp_dir);
    let mut raw_blocks = RowStore::new((cfg.memory / 2) as usize, &temp_dir);
    // Typed rows have no raw text to keep.
    let keep_rows = needs.rows && cfg.layout == Layout::Wide && matches!(input, Input::Text(_));
    let mut codes: Vec<CodeRecord> = Vec::new();
    // What the codes kept for `explain` take on the heap.
    let mut code_bytes = 0usize;
    let code_cost = |c: &CodeRecord| std::mem::size_of::<CodeRecord>() + c.written.len() + 16;
    let mut rows_seen = 0u64;
    let (mut kept_spans, mut kept_bytes) = (Vec::new(), Vec::new());
    let keeps = Keeps {
        codes: keep_codes,
        exclusions,
        rows: needs.rows,
    };
    // Merges the rows of each block (or batch), in input order.
    let mut consume = |h: &(Plan, Vec<u8>), b: BlockRows, read: Progress| -> Result<(), Error> {
        let plan = &h.0;
        let nkeep = plan.keep.len();
        let raw_of = |i: usize| -> &[u8] {
            if !keep_rows {
                return &[];
            }
            let s = if i == 0 { 0 } else { b.raw_ends[i - 1] };
            &b.raw[s..b.raw_ends[i]]
        };
        let nvalues = plan.values.len();
        let row_in = |i: usize, r: &RowRead, row: u64| RowIn {
            row,
            line: r.line,
            no_id: r.no_id,
            disagrees: false,
            date: r.date,
            age: r.age,
            pid: &b.ids[r.pid.0..r.pid.1],
            pid_hash: Some(r.pid_hash),
            ekey: &b.ids[r.ekey.0..r.ekey.1],
            kept_bytes: &b.ids,
            kept: &b.keep[i * nkeep..(i + 1) * nkeep],
            all: &b.all[i * words..(i + 1) * words],
            cur: if exclusions {
                &b.cur[i * words..(i + 1) * words]
            } else {
                &[]
            },
        };
        // Over the limit with this block: everything read so far, and
        // every row from now on, goes to partitions.
        let coming = b.rows.len() * (16 + words * 8)
            + b.raw.len()
            + b.codes.iter().map(code_cost).sum::<usize>();
        let hb = match spill {
            None => Some(&*builder.get_or_insert_with(|| Builder::new(cfg, plan, words))),
            Some(_) => None,
        };
        if let Some(hb) = hb.filter(|hb| {
            spill_at.is_some_and(|limit| {
                let spare = (codes.capacity() - codes.len()) * std::mem::size_of::<CodeRecord>();
                let held = hb.heap_bytes() + raw_ends.capacity() * 4 + code_bytes + spare + coming;
                held > limit || will_not_fit(held, &read, cfg.input_size, limit)
            })
        }) {
            let mut sp = Spill::new(
                &temp_dir,
                (words, nkeep, exclusions, keep_codes),
                keep_rows,
                cfg,
                (plan, naming.as_ref()),
            )?;
            let n = hb.episodes();
            // Each episode's codes together, in the order they were read.
            codes.sort_by_key(|c| c.episode);
            let mut at = 0;
            let mut codes_of = |e: usize| -> &[CodeRecord] {
                let s = at;
                while at < codes.len() && codes[at].episode as usize == e {
                    at += 1;
                }
                &codes[s..at]
            };
            let mut e = 0;
            for bi in 0..raw_first.len() {
                let loaded = raw_blocks.load(bi as u32, bi as u32)?;
                let end = raw_first.get(bi + 1).map_or(n, |&f| f as usize);
                let mut s = 0;
                while e < end {
                    let t = raw_ends[e];
                    let raw = loaded.slice(bi as u32, s, t);
                    let r = hb.carried(e, &mut kept_spans, &mut kept_bytes);
                    sp.write(&r, raw, codes_of(e))?;
                    s = t;
                    e += 1;
                }
            }
            while e < n {
                let r = hb.carried(e, &mut kept_spans, &mut kept_bytes);
                sp.write(&r, &[], codes_of(e))?;
                e += 1;
            }
            builder = None;
            codes = Vec::new();
            code_bytes = 0;
            raw_blocks = RowStore::new(0, &temp_dir);
            raw_ends = Vec::new();
            raw_first = Vec::new();
            spill = Some(sp);
        }
        if let Some(sp) = spill.as_mut() {
            if nvalues > 0 {
                return Err(Error::data(
                    None,
                    "internal error: a history with checked columns went to partitions",
                ));
            }
            // A block's codes are in the order of its rows.
            let mut at = 0;
            for (i, r) in b.rows.iter().enumerate() {
                rows_seen += 1;
                let s = at;
                while at < b.codes.len() && b.codes[at].episode as usize == i {
                    at += 1;
                }
                sp.write(&row_in(i, r, rows_seen), raw_of(i), &b.codes[s..at])?;
            }
            summary.merge(b.summary);
            return b.err.map_or(Ok(()), Err);
        }
        let Some(hb) = builder.as_mut() else {
            return Err(Error::data(None, "internal error: no history being built"));
        };
        let first = hb.episodes() as u32;
        let mut block_episode = Vec::with_capacity(b.rows.len());
        // What a lookup of the id reads is fetched ahead of its use, in
        // steps (`Ids::prefetch`): the table slot 16 rows ahead, the
        // string's end 8 ahead, its bytes 4 ahead.
        const AHEAD: [usize; 3] = [16, 8, 4];
        for (step, &ahead) in AHEAD.iter().enumerate() {
            for r in b.rows.iter().take(ahead) {
                hb.prefetch(r.pid_hash, step as u8);
            }
        }
        for (i, r) in b.rows.iter().enumerate() {
            rows_seen += 1;
            for (step, &ahead) in AHEAD.iter().enumerate() {
                if let Some(n) = b.rows.get(i + ahead) {
                    hb.prefetch(n.pid_hash, step as u8);
                }
            }
            let e = hb.add_row(plan, &row_in(i, r, rows_seen), &mut summary)?;
            if nvalues > 0 {
                let cells = &b.values[i * nvalues..(i + 1) * nvalues];
                let line = match naming {
                    // A typed source's rows are named by their number.
                    Some(_) => rows_seen,
                    None => r.line,
                };
                hb.add_values(e, cells, &b.ids, line, naming.as_ref())?;
            }
            block_episode.push(e);
        }
        if keep_rows && !b.rows.is_empty() {
            raw_blocks.push(b.raw)?;
            raw_first.push(first);
            raw_ends.extend(b.raw_ends.iter().map(|&x| x as u32));
        }
        for mut c in b.codes {
            c.episode = block_episode[c.episode as usize];
            code_bytes += code_cost(&c);
            codes.push(c);
        }
        summary.merge(b.summary);
        b.err.map_or(Ok(()), Err)
    };
    let read = match input {
        Input::Text(input) => run_blocks(
            cfg,
            input,
            |block, rec| {
                let plan = with_values(Plan::from_header(cfg, block, rec)?)?;
                Ok((plan, rec.raw.to_vec()))
            },
            |h, block, start, scanner| read_block(engine, cfg, &h.0, block, start, scanner, keeps),
            |h, b, p| consume(h, b, p),
        ),
        Input::Rows(source) => run_batches(
            cfg,
            source,
            |header| {
                let mut plan = Plan::new(cfg, header, false)?;
                plan.keys = Keys::Typed;
                Ok((with_values(plan)?, Vec::new()))
            },
            |h, batch, first| read_batch(engine, cfg, &h.0, batch, first, keeps),
            |h, b, p| consume(h, b, p),
        ),
    };
    let (plan, header_raw) = read.map_err(|e| {
        // Spilled, a run stopped while reading stops where the in-memory
        // run would have: at a disagreement on an earlier row, if the
        // partitions written so far hold one.
        let e = spill
            .as_mut()
            .and_then(|sp| sp.first_disagreement(cfg))
            .unwrap_or(e);
        // A typed source's rows by their number.
        match &naming {
            Some(n) => n.name(e),
            None => e,
        }
    })?;
    summary.dx_columns = plan.dx_names();
    if plan.date.is_some() {
        summary.date_format = Some(cfg.date_format.to_string());
    }
    if let Some(sp) = spill {
        return Ok((ReadHistory::Spilled(sp, plan, header_raw), summary));
    }
    let builder = builder.unwrap_or_else(|| Builder::new(cfg, &plan, words));
    let mut hist = builder.finish(
        plan,
        header_raw,
        (raw_ends, raw_first, raw_blocks),
        codes,
        &mut summary,
    );
    hist.naming = naming;
    if hist.plan.date.is_some() {
        check_unreadable_dates(cfg, &summary, hist.episodes.len() as u64)?;
    }
    Ok((ReadHistory::Memory(hist), summary))
}

impl History {
    /// Reads the whole extract into memory, parsing blocks on every core and
    /// merging them in input order.
    pub fn read<'a>(
        engine: &Engine,
        cfg: &ScoreConfig,
        input: impl Into<Input<'a>>,
        needs: Needs,
    ) -> Result<(History, Summary), Error> {
        History::read_with_values(engine, cfg, input, needs, &[])
    }

    /// [`History::read`], with the checked columns `values` read in the
    /// same pass: each unit's value of each ([`History::value`]). A
    /// column not in the input is a usage error naming its role; a unit
    /// whose rows give two different non-empty values of one is a data
    /// error naming both rows.
    pub fn read_with_values<'a>(
        engine: &Engine,
        cfg: &ScoreConfig,
        input: impl Into<Input<'a>>,
        needs: Needs,
        values: &[ValueColumn],
    ) -> Result<(History, Summary), Error> {
        match read_history(engine, cfg, input, needs, None, values)? {
            (ReadHistory::Memory(h), s) => Ok((h, s)),
            (ReadHistory::Spilled(..), _) => Err(Error::data(
                None,
                "internal error: a history read in memory was spilled",
            )),
        }
    }

    /// Episode `e`'s value of checked column `k` (see [`ValueColumn`]) and
    /// the line (text) or 1-based row (typed rows) it was read from;
    /// `None` when no row of the episode has one.
    pub fn value(&self, e: usize, k: usize) -> Option<(Field<'_>, u64)> {
        let n = self.plan.values.len();
        let c = self.values.get(e * n + k)?;
        (c.kind != CELL_NONE).then(|| (c.field(&self.value_bytes), c.line))
    }

    /// An error about the row at `line` (as [`History::value`] gives it),
    /// named as the input names its rows: `line N` for text, `row N` (of
    /// FILE) for typed rows.
    pub fn row_error(&self, line: u64, message: String) -> Error {
        let e = Error::data(Some(line), message);
        match &self.naming {
            Some(n) => n.name(e),
            None => e,
        }
    }

    /// The data row (1-based) whose value of kept column `j` episode `e`
    /// carries (its first row with a non-empty value); `None` when none
    /// has one. (A history read back from partitions gives the episode's
    /// first row instead; the frames that ask never spill.)
    pub fn kept_row(&self, e: usize, j: usize) -> Option<u64> {
        let k = self.plan.keep.len();
        Some(self.kept_rows[e * k + j]).filter(|&r| r != 0)
    }

    /// Episode `e`'s data row number (1-based, its first record).
    pub fn row(&self, e: usize) -> u64 {
        self.rows.get(e).copied().unwrap_or(e as u64 + 1)
    }

    /// Patient `p`'s id as written.
    pub fn patient_id(&self, p: u32) -> &[u8] {
        self.patients.get(p)
    }

    /// Number of patients (rows without an id each count as one).
    pub(crate) fn patients_len(&self) -> usize {
        self.patients.len()
    }

    /// Episodes grouped by patient (a counting sort: patients are numbered
    /// by first appearance, episodes come in input order, so each patient's
    /// are in input order), and where each patient's end in that order.
    fn by_patient(&self) -> (Vec<u32>, Vec<u32>) {
        let np = self.patients.len();
        let mut start = vec![0u32; np + 1];
        for ep in &self.episodes {
            start[ep.patient as usize + 1] += 1;
        }
        for p in 0..np {
            start[p + 1] += start[p];
        }
        let mut order = vec![0u32; self.episodes.len()];
        for (e, ep) in self.episodes.iter().enumerate() {
            let at = &mut start[ep.patient as usize];
            order[*at as usize] = e as u32;
            *at += 1;
        }
        // `start[p]` is now where patient p's episodes end.
        start.truncate(np);
        (order, start)
    }

    /// Episodes in window order: per patient, dated episodes by date, then
    /// undated ones; input order breaks ties.
    pub fn window_order(&self) -> Vec<u32> {
        let (mut order, ends) = self.by_patient();
        let mut from = 0usize;
        for &end in &ends {
            sort_by_date(&mut order[from..end as usize], &self.episodes);
            from = end as usize;
        }
        order
    }

    /// Replaces every episode's own condition set by the set its windows
    /// give it (before the hierarchy): its own codes (after the primary and
    /// present-on-admission rules; none for lists scored over earlier
    /// episodes only) and, per list, every code of the same patient's
    /// episodes in that list's window. Returns the window order
    /// ([`History::window_order`]).
    ///
    /// Per patient and window, a count per condition of the episodes in the
    /// window is kept while the window slides along the patient's episodes
    /// in date order: each episode enters and leaves a window once, so the
    /// cost is linear in the episodes (times the set size), however many
    /// episodes one patient has. An episode's history holds a condition when
    /// some other episode of its window has it: two or more in the window,
    /// or one that is not the episode itself.
    ///
    /// Patients are independent: on `threads` threads the window order is
    /// cut into pieces of whole patients, each sorted by date and resolved
    /// by whichever thread takes it ([`History::resolve_pieces`]); the
    /// result is the same whatever the number of threads.
    pub fn resolve(&mut self, windows: &Windows, threads: usize) -> Vec<u32> {
        // Pieces of about a thirty-second of an even share each, so that a
        // thread slowed by other work on the machine (or started late)
        // holds the others up little.
        let piece = (self.episodes.len() / (threads.max(1) * 32)).max(MIN_PIECE);
        self.resolve_pieces(windows, threads, piece)
    }

    /// [`History::resolve`] with pieces of at least `piece` episodes (whole
    /// patients each; one thread, or a single piece, resolves the patients
    /// one after the other in place).
    pub(crate) fn resolve_pieces(
        &mut self,
        windows: &Windows,
        threads: usize,
        piece: usize,
    ) -> Vec<u32> {
        if self.resolved {
            return self.window_order();
        }
        let (mut order, ends) = self.by_patient();
        let n = order.len();
        let w = self.words;
        // Cuts between pieces, each at the end of a patient.
        let mut cuts = vec![0usize];
        while let Some(&last) = cuts.last().filter(|&&c| c < n) {
            let at = last + piece.max(1);
            let p = ends.partition_point(|&end| (end as usize) < at);
            cuts.push(ends.get(p).map_or(n, |&end| end as usize));
        }
        let slide = Slide {
            w,
            windows,
            earlier_only: windows.scope == WindowScope::EarlierOnly,
            episodes: &self.episodes,
        };
        if threads <= 1 || cuts.len() <= 2 || w == 0 {
            // The patients one after the other, each resolved into `res`
            // and copied over its episodes' own sets.
            let mut from = 0usize;
            for &end in &ends {
                sort_by_date(&mut order[from..end as usize], &self.episodes);
                from = end as usize;
            }
            let mut state = slide.state();
            let mut res: Vec<u64> = Vec::new();
            let mut i = 0;
            while i < n {
                let patient = self.episodes[order[i] as usize].patient;
                let mut end = i + 1;
                while end < n && self.episodes[order[end] as usize].patient == patient {
                    end += 1;
                }
                let seg = &order[i..end];
                res.clear();
                res.resize(seg.len() * w, 0);
                slide.patient(seg, &self.own_all, &self.own_current, &mut state, &mut res);
                for (k, &e) in seg.iter().enumerate() {
                    let e = e as usize;
                    self.own_all[e * w..(e + 1) * w].copy_from_slice(&res[k * w..(k + 1) * w]);
                }
                i = end;
            }
        } else {
            // In rounds of whole pieces (so that the results waiting to be
            // copied over the own sets take at most about a quarter of
            // them): the round's pieces are sorted and resolved on every
            // thread into `res`, in window order, noting each episode's
            // position in `pos`; then every thread copies the results of
            // the episodes of a range of its own over their own sets.
            let round_target = (n / 4).max(piece);
            let pos: Vec<AtomicU32> = (0..n).map(|_| AtomicU32::new(u32::MAX)).collect();
            let mut res: Vec<u64> = Vec::new();
            let mut c = 0usize;
            let mut rest: &mut [u32] = &mut order;
            while c + 1 < cuts.len() {
                let first = cuts[c];
                let mut last = c + 1;
                while last + 1 < cuts.len() && cuts[last + 1] - first <= round_target {
                    last += 1;
                }
                let upto = cuts[last];
                res.clear();
                res.resize((upto - first) * w, 0);
                // The round's pieces: their part of the order and of `res`.
                let mut items = Vec::with_capacity(last - c);
                let mut out: &mut [u64] = &mut res;
                for k in c..last {
                    let len = cuts[k + 1] - cuts[k];
                    let (seg, after) = std::mem::take(&mut rest).split_at_mut(len);
                    let (o, after_out) = std::mem::take(&mut out).split_at_mut(len * w);
                    rest = after;
                    out = after_out;
                    items.push((cuts[k], seg, o));
                }
                let (own_all, own_current, pos) = (&self.own_all, &self.own_current, &pos);
                on_threads(
                    threads,
                    items,
                    || slide.state(),
                    |state, (at, seg, out)| {
                        let mut i = 0;
                        while i < seg.len() {
                            let patient = slide.episodes[seg[i] as usize].patient;
                            let mut end = i + 1;
                            while end < seg.len()
                                && slide.episodes[seg[end] as usize].patient == patient
                            {
                                end += 1;
                            }
                            let one = &mut seg[i..end];
                            sort_by_date(one, slide.episodes);
                            slide.patient(
                                one,
                                own_all,
                                own_current,
                                state,
                                &mut out[i * w..end * w],
                            );
                            i = end;
                        }
                        for (k, &e) in seg.iter().enumerate() {
                            pos[e as usize].store((at + k) as u32, Ordering::Relaxed);
                        }
                    },
                );
                // Every thread's writes are seen here: the threads of
                // `on_threads` have been joined.
                let span = first..upto;
                let res = &res;
                let ranges: Vec<(usize, &mut [u64])> = self
                    .own_all
                    .chunks_mut(piece * w)
                    .enumerate()
                    .map(|(k, s)| (k * piece, s))
                    .collect();
                on_threads(
                    threads,
                    ranges,
                    || (),
                    |(), (from, sets)| {
                        for (k, set) in sets.chunks_mut(w).enumerate() {
                            let p = pos[from + k].load(Ordering::Relaxed) as usize;
                            if span.contains(&p) {
                                let r = (p - first) * w;
                                set.copy_from_slice(&res[r..r + w]);
                            }
                        }
                    },
                );
                c = last;
            }
        }
        self.own_current = Vec::new();
        self.resolved = true;
        order
    }

    /// Episode `e`'s final condition set (after [`History::resolve`] and the
    /// hierarchy), into `bits` (`scratch`: the hierarchy's work space).
    pub fn final_into(&self, engine: &Engine, e: usize, bits: &mut [u64], scratch: &mut [u64]) {
        debug_assert!(self.resolved);
        let w = self.words;
        bits.copy_from_slice(&self.own_all[e * w..(e + 1) * w]);
        engine.apply_hierarchy(bits, scratch);
    }

    /// Every episode's final condition set (see [`History::final_into`]).
    pub fn final_sets(&self, engine: &Engine) -> Vec<u64> {
        let w = self.words;
        let mut out = vec![0u64; self.episodes.len() * w];
        let mut scratch = vec![0u64; w];
        for e in 0..self.episodes.len() {
            self.final_into(engine, e, &mut out[e * w..(e + 1) * w], &mut scratch);
        }
        out
    }

    /// The episodes other than `e` whose codes count for `e` under a window
    /// of `days` (`None`: no window), most recent first. `sorted` is the
    /// window order and `pos[e]` its position there. For `explain`.
    pub fn window_members(
        &self,
        sorted: &[u32],
        pos: &[u32],
        e: usize,
        days: Option<u32>,
        scope: WindowScope,
    ) -> Vec<u32> {
        let (Some(days), Some(d)) = (days, self.episodes[e].date()) else {
            return Vec::new();
        };
        let d = d as i64;
        let patient = self.episodes[e].patient;
        let p = pos[e] as usize;
        let mut start = p;
        while start > 0 && self.episodes[sorted[start - 1] as usize].patient == patient {
            start -= 1;
        }
        let mut out = Vec::new();
        for &f in &sorted[start..] {
            let ep = &self.episodes[f as usize];
            if ep.patient != patient {
                break;
            }
            let Some(x) = ep.date() else { break };
            let x = x as i64;
            let counts = f as usize != e
                && x >= d - days as i64
                && match scope {
                    WindowScope::CurrentAndEarlier => x <= d,
                    WindowScope::EarlierOnly => x < d,
                };
            if counts {
                out.push(f);
            }
        }
        out.reverse();
        out
    }

    /// Long layout with `--episode`: episode `e`'s value.
    pub fn key(&self, e: usize) -> &[u8] {
        if e < self.keys.len() {
            self.keys.get(e as u32)
        } else {
            &[]
        }
    }

    pub fn words(&self) -> usize {
        self.words
    }

    /// Episode `e`'s value of kept column `j` (empty when none of its rows
    /// had one).
    pub fn kept(&self, e: usize, j: usize) -> &[u8] {
        let k = self.plan.keep.len();
        self.kept[e * k + j].as_deref().unwrap_or(&[])
    }

    /// Wide layout: the raw rows are put in front of the output lines
    /// elsewhere, each line holding the scores after their delimiters.
    pub(crate) fn set_rows_apart(&mut self, apart: bool) {
        self.rows_apart = apart;
    }

    /// No raw rows loaded (for [`Formatter::episode`] when there are none).
    pub(crate) fn rows_none(&self) -> Loaded<'_> {
        self.raw_blocks.none()
    }

    /// Whether the raw rows went partly to a temporary file.
    pub fn rows_spilled(&self) -> bool {
        self.raw_blocks.spilled()
    }

    /// The block of `raw_blocks` holding episode `e`'s raw row.
    fn raw_block(&self, e: usize) -> u32 {
        (self.raw_first.partition_point(|&f| f as usize <= e) - 1) as u32
    }

    /// Episode `e`'s raw row (wide layout), from `rows` (loaded blocks
    /// including its own).
    fn raw_row<'a>(&self, e: usize, rows: &'a Loaded<'_>) -> &'a [u8] {
        let b = self.raw_block(e);
        let s = if e > self.raw_first[b as usize] as usize {
            self.raw_ends[e - 1]
        } else {
            0
        };
        rows.slice(b, s, self.raw_ends[e])
    }
}

/// The output's header line.
pub(crate) fn header_line(
    engine: &Engine,
    cfg: &ScoreConfig,
    p: &Plan,
    header_raw: &[u8],
    scores_only: bool,
) -> Result<Vec<u8>, Error> {
    let d = cfg.delimiter;
    let mut out = Vec::new();
    let eol: &[u8] = if p.crlf { b"\r\n" } else { b"\n" };
    match cfg.layout {
        Layout::Wide => {
            let names: Vec<&str> = p.header.names.iter().map(String::as_str).collect();
            check_collisions(&names, engine)?;
            if !scores_only {
                out.extend_from_slice(header_raw);
            }
        }
        Layout::Long => {
            let mut keep = vec![p.header.names[p.id.unwrap_or(0)].as_str()];
            if let Some(c) = p.episode {
                keep.push(&p.header.names[c]);
            }
            for &c in &p.keep {
                let name = p.header.names[c].as_str();
                if keep.contains(&name) {
                    return Err(Error::Usage(format!(
                        "column '{name}' is already in the output; keep it once"
                    )));
                }
                keep.push(name);
            }
            check_collisions(&keep, engine)?;
            for (i, k) in keep.iter().enumerate() {
                if i > 0 {
                    out.push(d);
                }
                write_field(k.as_bytes(), d, &mut out);
            }
        }
    }
    for (i, c) in engine.columns().iter().enumerate() {
        if i > 0 || !scores_only {
            out.push(d);
        }
        write_field(c.name.as_bytes(), d, &mut out);
    }
    super::end_header(cfg.output_form, eol, &mut out, 0, p.keys);
    Ok(out)
}

/// Work space for formatting episodes.
pub(crate) struct Formatter {
    bits: Vec<u64>,
    scratch: Vec<u64>,
    values: Vec<Value>,
}

impl Formatter {
    pub fn new(words: usize) -> Formatter {
        Formatter {
            bits: vec![0; words],
            scratch: vec![0; words],
            values: Vec::new(),
        }
    }

    /// Appends episode `e`'s output line (after [`History::resolve`]):
    /// wide, its raw row (from `rows`) and values; long, its id, episode
    /// value, kept values and values.
    pub fn episode(
        &mut self,
        engine: &Engine,
        cfg: &ScoreConfig,
        hist: &History,
        e: usize,
        rows: &Loaded<'_>,
        out: &mut Vec<u8>,
    ) {
        let p = &hist.plan;
        let d = cfg.delimiter;
        let ep = &hist.episodes[e];
        hist.final_into(engine, e, &mut self.bits, &mut self.scratch);
        engine.values(&self.bits, ep.age(), &mut self.values);
        let scores_only =
            cfg.layout == Layout::Wide && hist.raw_ends.is_empty() && !hist.rows_apart;
        let start = out.len();
        match cfg.layout {
            // Rows kept apart (a spilled run): the merge puts each raw row
            // (with its length, as value records) in front of its line.
            Layout::Wide if hist.rows_apart => {
                if cfg.output_form == OutputForm::ValueRecords {
                    crate::io::value_records::put_values(out, &self.values);
                    return;
                }
            }
            Layout::Wide if scores_only => {}
            Layout::Wide => out.extend_from_slice(hist.raw_row(e, rows)),
            // A typed source's values handed to a typed sink as they are.
            Layout::Long
                if p.keys == Keys::Typed && cfg.output_form == OutputForm::ValueRecords =>
            {
                use crate::io::value_records::put_key;
                put_key(out, hist.patient_id(ep.patient));
                if p.episode.is_some() {
                    put_key(out, hist.key(e));
                }
                for j in 0..p.keep.len() {
                    put_key(out, hist.kept(e, j));
                }
            }
            // Text: a typed value as a delimited extract would hold it.
            Layout::Long => {
                let k = p.keys;
                write_field(&k.text(hist.patient_id(ep.patient)), d, out);
                if p.episode.is_some() {
                    out.push(d);
                    write_field(&k.text(hist.key(e)), d, out);
                }
                for j in 0..p.keep.len() {
                    out.push(d);
                    write_field(&k.text(hist.kept(e, j)), d, out);
                }
            }
        }
        let eol: &[u8] = if p.crlf { b"\r\n" } else { b"\n" };
        super::end_row(
            engine,
            cfg.output_form,
            (d, eol),
            &self.values,
            !scores_only,
            out,
            start,
        );
    }
}

impl History {
    /// Raw rows loaded for episodes `range` (wide layout; none in the long
    /// layout).
    pub(crate) fn load_rows(
        &self,
        cfg: &ScoreConfig,
        range: std::ops::Range<usize>,
    ) -> Result<Loaded<'_>, Error> {
        match cfg.layout {
            Layout::Wide if !range.is_empty() && !self.raw_ends.is_empty() => self
                .raw_blocks
                .load(self.raw_block(range.start), self.raw_block(range.end - 1)),
            _ => Ok(self.raw_blocks.none()),
        }
    }
}

/// Scores from the patient history and writes the output: wide, every row
/// in input order; long, one row per episode in order of first appearance.
/// A history over half of `--memory` is partitioned by patient into
/// temporary files and scored a partition at a time
/// ([`super::partition`]).
pub fn score_history<'a>(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Into<Input<'a>>,
    output: &mut dyn Write,
) -> Result<Summary, Error> {
    let windows = Windows::new(engine, cfg)?;
    let needs = Needs {
        codes: false,
        rows: true,
        output: Some(|engine, cfg, plan| header_line(engine, cfg, plan, &[], false).map(drop)),
    };
    let input = input.into();
    // Typed rows in the wide layout: there is no row text to copy; the
    // output holds the score columns only, and the caller puts the input's
    // own columns in front (a Parquet output copies them from the input).
    let scores_only = matches!(input, Input::Rows(_)) && cfg.layout == Layout::Wide;
    let spill_at = (cfg.memory / 2) as usize;
    let write_err = |e| Error::io("cannot write output", e);
    let (mut hist, mut summary) =
        match read_history(engine, cfg, input, needs, Some(spill_at), &[])? {
            (ReadHistory::Memory(h), s) => (h, s),
            (ReadHistory::Spilled(sp, plan, header_raw), mut summary) => {
                let head = header_line(engine, cfg, &plan, &header_raw, scores_only)?;
                sp.finish(
                    engine,
                    cfg,
                    &windows,
                    (plan, &head),
                    super::partition::Lines::Scores,
                    &mut summary,
                    output,
                )?;
                output.flush().map_err(write_err)?;
                return Ok(summary);
            }
        };
    hist.resolve(&windows, super::parallel::threads(cfg));
    let hist = hist;
    let head = header_line(engine, cfg, &hist.plan, &hist.header_raw, scores_only)?;
    output.write_all(&head).map_err(write_err)?;
    // Episodes are formatted on every core, a round of chunks at a time, and
    // written in order.
    let format_chunk = |range: std::ops::Range<usize>, rows: &Loaded<'_>| -> Vec<u8> {
        let mut out = Vec::with_capacity(range.len() * 128);
        let mut f = Formatter::new(hist.words());
        for e in range {
            f.episode(engine, cfg, &hist, e, rows, &mut out);
        }
        out
    };
    const CHUNK: usize = 16_384;
    let threads = super::parallel::threads(cfg);
    let n = hist.episodes.len();
    let mut start = 0;
    while start < n {
        let chunks: Vec<std::ops::Range<usize>> = (0..threads)
            .map(|t| (start + t * CHUNK).min(n)..(start + (t + 1) * CHUNK).min(n))
            .filter(|r| !r.is_empty())
            .collect();
        let end = (start + threads * CHUNK).min(n);
        // The raw rows of this round, read back if they wait on disk.
        let rows = hist.load_rows(cfg, start..end)?;
        start = end;
        let rows = &rows;
        let parts: Option<Vec<Vec<u8>>> = std::thread::scope(|s| {
            let handles: Vec<_> = chunks
                .into_iter()
                .map(|r| s.spawn(move || format_chunk(r, rows)))
                .collect();
            handles.into_iter().map(|h| h.join().ok()).collect()
        });
        let Some(parts) = parts else {
            return Err(Error::data(None, "internal error: an output thread failed"));
        };
        for part in parts {
            output.write_all(&part).map_err(write_err)?;
        }
    }
    summary.rows_written += n as u64;
    summary.units += n as u64;
    output.flush().map_err(write_err)?;
    Ok(summary)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::Catalogue;
    use crate::score::{IndexSpec, ScoreOptions};
    use proptest::prelude::*;

    /// Codes of conditions of the three built-in lists (common practice:
    /// acute myocardial infarction, heart failure, diabetes, cancer,
    /// dementia, renal failure, chronic pulmonary disease, stroke, liver
    /// disease, falls), and one that is none.
    const CODES: &[&str] = &[
        "I21", "I500", "E119", "E112", "C509", "C787", "F03", "N185", "J449", "G309", "I639",
        "K703", "R54", "F051", "W19", "I10", "E669", "F329", "Z751", "A09",
    ];

    fn engine() -> Engine {
        let specs = IndexSpec::parse_many("charlson,elixhauser,hfrs").unwrap();
        Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap()
    }

    /// One invented episode: patient, day (from 2024-01-01; `None`: no
    /// date), codes (indexes into `CODES`; the first is the primary).
    type Gen = (usize, Option<i32>, Vec<usize>);

    fn csv(eps: &[Gen]) -> String {
        let mut s = String::from("pid,date,dx1,dx2,dx3,dx4\n");
        for (p, d, codes) in eps {
            let date = d.map_or(String::new(), |d| {
                format!("2024-{:02}-{:02}", d / 28 + 1, d % 28 + 1)
            });
            s.push_str(&format!("p{p},{date}"));
            for j in 0..4 {
                s.push(',');
                s.push_str(codes.get(j).map_or("", |&c| CODES[c]));
            }
            s.push('\n');
        }
        s
    }

    fn config(
        windows: (Option<u32>, Option<u32>),
        earlier_only: bool,
        primary: bool,
    ) -> ScoreConfig {
        let mut lookback_lists = Vec::new();
        if let Some(d) = windows.1 {
            lookback_lists.push(("hfrs".to_string(), d));
        }
        ScoreConfig {
            dx: vec!["dx*".into()],
            id: Some("pid".into()),
            date: Some("date".into()),
            lookback: windows.0.or(if lookback_lists.is_empty() {
                Some(0)
            } else {
                None
            }),
            lookback_lists,
            window: if earlier_only {
                WindowScope::EarlierOnly
            } else {
                WindowScope::CurrentAndEarlier
            },
            exclude_primary: primary,
            ..ScoreConfig::default()
        }
    }

    /// The window order and every episode's resolved set, and the sets
    /// before resolution.
    fn resolved(
        engine: &Engine,
        cfg: &ScoreConfig,
        text: &str,
        threads: usize,
        piece: Option<usize>,
    ) -> (Vec<u32>, Vec<u64>, Vec<u64>) {
        let (mut h, _) = History::read(engine, cfg, text.as_bytes(), Needs::default()).unwrap();
        let before = h.own_all.clone();
        let windows = Windows::new(engine, cfg).unwrap();
        let order = match piece {
            Some(piece) => h.resolve_pieces(&windows, threads, piece),
            None => h.resolve(&windows, threads),
        };
        assert!(h.own_current.is_empty());
        (order, h.own_all.clone(), before)
    }

    fn episodes() -> impl Strategy<Value = (Vec<Gen>, bool)> {
        (
            prop_oneof![Just(1usize), 2usize..6, 6usize..60],
            prop::collection::vec(
                (
                    0usize..60,
                    prop::option::weighted(0.85, 0i32..40),
                    prop::collection::vec(0..CODES.len(), 0..5),
                ),
                1..250,
            ),
            prop::bool::weighted(0.15),
        )
            .prop_map(|(patients, eps, undated)| {
                let eps = eps
                    .into_iter()
                    .map(|(p, d, c)| (p % patients, d.filter(|_| !undated), c))
                    .collect();
                (eps, undated)
            })
    }

    fn days() -> impl Strategy<Value = Option<u32>> {
        prop::option::of(prop_oneof![0u32..15, Just(u32::MAX)])
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: 200, ..ProptestConfig::default() })]

        /// One patient or many, ties on dates, undated episodes (or none
        /// dated), per-list windows, earlier-only, the primary rule: pieces
        /// of whole patients resolved on 1 to 64 threads give the window
        /// order and the sets of one thread resolving patient after
        /// patient in place.
        #[test]
        fn any_number_of_threads_resolves_as_one(
            (eps, _undated) in episodes(),
            windows in (days(), days()),
            earlier_only in any::<bool>(),
            primary in any::<bool>(),
            threads in 1usize..=64,
            piece in 1usize..40,
        ) {
            let engine = engine();
            let cfg = config(windows, earlier_only, primary);
            let text = csv(&eps);
            let (order1, sets1, _) = resolved(&engine, &cfg, &text, 1, None);
            let (order, sets, _) = resolved(&engine, &cfg, &text, threads, Some(piece));
            prop_assert_eq!(order, order1);
            prop_assert_eq!(sets, sets1);
        }
    }

    #[test]
    fn a_large_history_resolves_on_threads_as_on_one() {
        // 30,000 episodes of 4,000 invented patients over 300 days (one of
        // them with a tenth of all episodes), by a fixed linear
        // congruential sequence: several pieces of the default size and
        // several rounds.
        let mut x: u64 = 99;
        let mut next = |m: usize| {
            x = x.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
            ((x >> 33) as usize) % m
        };
        let eps: Vec<Gen> = (0..30_000)
            .map(|i| {
                let p = if i % 10 == 0 { 0 } else { next(4_000) };
                let d = (next(20) > 0).then(|| next(300) as i32);
                (p, d, (0..next(5)).map(|_| next(CODES.len())).collect())
            })
            .collect();
        let text = csv(&eps);
        let engine = engine();
        for cfg in [
            config((Some(60), Some(200)), false, true),
            config((Some(u32::MAX), None), true, false),
        ] {
            let (order1, sets1, before) = resolved(&engine, &cfg, &text, 1, None);
            // The windows did add conditions of other episodes.
            assert_ne!(sets1, before);
            for threads in [2, 3, 8] {
                let (order, sets, _) = resolved(&engine, &cfg, &text, threads, None);
                assert!(order == order1 && sets == sets1, "{threads} threads");
            }
        }
    }
}
