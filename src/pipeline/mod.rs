//! Running an index over a delimited extract.
//!
//! - [`stream`]: no lookback: wide extracts stream in constant memory, every
//!   row out in input order with its bytes untouched; long extracts group
//!   code rows by unit.
//! - [`history`]: lookback over a patient's dated episodes (and `explain`):
//!   the extract is read into memory, each episode is scored from its own
//!   codes and those of the same patient's episodes inside the window.
//!
//! Both read records through the same column plan ([`Plan`]) and the same
//! code reading ([`Plan::read_codes`]), so exclusions and counting agree.

pub mod dates;
pub mod explain;
pub mod history;
mod ids;
pub(crate) mod parallel;
mod partition;
pub mod plain;
pub mod rows_store;
mod stream;

use std::collections::HashMap;
use std::io::Write;

use crate::code::{Code, Reading};
pub use crate::editions::{Edition, Existence};
use crate::io::{Block, Fields, RecordRef};
use crate::rows::{read_age_value, Age, AgeReading, Field, Row};
use crate::score::{Engine, Value};
use crate::Error;
pub use dates::DateFormat;
pub use explain::explain_stream;
#[cfg(feature = "parquet")]
pub(crate) use parallel::run_batches as run_typed_batches;
pub(crate) use parallel::threads;

/// How the extract is laid out.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Layout {
    /// One row per episode with several diagnosis columns.
    Wide,
    /// One code per row; rows grouped by an id column (and an episode
    /// column, when given).
    Long,
}

/// The token that stands for an empty present-on-admission field in
/// `--poa-values` (any case).
pub const POA_BLANK: &str = "BLANK";

/// Present-on-admission values that count by default: `Y` (present), `W`
/// (clinically undetermined), and exempt codes, reported blank or `1`.
/// Taken from memory from the ICD-10-CM Official Guidelines for Coding and
/// Reporting, Appendix I (present-on-admission reporting guidelines).
pub const DEFAULT_POA_VALUES: &[&str] = &["Y", "W", "1", POA_BLANK];

/// Every present-on-admission value of the ICD-10-CM Official Guidelines for
/// Coding and Reporting, Appendix I (from memory): `Y`, `N` (not present),
/// `U` (documentation insufficient), `W`, and exempt codes (`1` or blank).
/// A value outside these and `--poa-values` is unrecognised: counted, shown,
/// and a `--strict` stop.
pub const KNOWN_POA_VALUES: &[&str] = &["Y", "N", "U", "W", "1", POA_BLANK];

/// The share of non-empty episode dates, in percent, that may be
/// unreadable before a run stops (`--max-unreadable-dates`).
pub const DEFAULT_MAX_UNREADABLE_DATES: f64 = 1.0;

/// What a present-on-admission field says about its code.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PoaReading {
    /// One of the values that count.
    Present,
    /// A value of the guidelines that does not count.
    NotPresent,
    /// Neither: counted and shown; the code does not count.
    Unrecognised,
}

/// Reads a present-on-admission field against the values that count
/// (upper-cased, [`POA_BLANK`] for an empty field): the one place that
/// decides it.
///
/// ```
/// use morbus::pipeline::{read_poa, PoaReading, DEFAULT_POA_VALUES};
/// let counting: Vec<String> = DEFAULT_POA_VALUES.iter().map(|v| v.to_string()).collect();
/// assert_eq!(read_poa(&counting, b"y"), PoaReading::Present);
/// assert_eq!(read_poa(&counting, b" "), PoaReading::Present);
/// assert_eq!(read_poa(&counting, b"1"), PoaReading::Present);
/// assert_eq!(read_poa(&counting, b"N"), PoaReading::NotPresent);
/// assert_eq!(read_poa(&counting, b"U"), PoaReading::NotPresent);
/// assert_eq!(read_poa(&counting, b"E"), PoaReading::Unrecognised);
/// assert_eq!(read_poa(&counting, b"blank"), PoaReading::Unrecognised);
/// ```
pub fn read_poa(counting: &[String], raw: &[u8]) -> PoaReading {
    let v = raw.trim_ascii();
    poa_reading(counting, |p| {
        if p == POA_BLANK {
            v.is_empty()
        } else {
            p.as_bytes().eq_ignore_ascii_case(v)
        }
    })
}

/// What an indicator says, given which of the values (of `counting`, then
/// of the guidelines) it is: the one rule of [`read_poa`] and
/// [`read_poa_field`].
fn poa_reading(counting: &[String], is: impl Fn(&str) -> bool) -> PoaReading {
    if counting.iter().any(|p| is(p)) {
        PoaReading::Present
    } else if KNOWN_POA_VALUES.iter().any(|p| is(p)) {
        PoaReading::NotPresent
    } else {
        PoaReading::Unrecognised
    }
}

/// Reads a typed present-on-admission value (a frame's or Parquet file's
/// column) with the rules of [`read_poa`], without writing it out as text:
/// text as it is; a missing value (null, NaN) as an empty field;
/// true/false as the words `true` and `false` would read; a number
/// matches the values (of `counting` and the guidelines) that read as
/// that number (`1`); a date matches none.
///
/// ```
/// use morbus::pipeline::{read_poa, read_poa_field, PoaReading, DEFAULT_POA_VALUES};
/// use morbus::rows::Field;
/// let counting: Vec<String> = DEFAULT_POA_VALUES.iter().map(|v| v.to_string()).collect();
/// assert_eq!(read_poa_field(&counting, Field::Integer(1)), PoaReading::Present);
/// assert_eq!(read_poa_field(&counting, Field::Number(1.0)), PoaReading::Present);
/// assert_eq!(read_poa_field(&counting, Field::Integer(0)), PoaReading::Unrecognised);
/// assert_eq!(read_poa_field(&counting, Field::Null), PoaReading::Present);
/// assert_eq!(read_poa_field(&counting, Field::Text(b"N")), read_poa(&counting, b"N"));
/// assert_eq!(read_poa_field(&counting, Field::Logical(true)), PoaReading::Unrecognised);
/// ```
pub fn read_poa_field(counting: &[String], field: Field<'_>) -> PoaReading {
    match field {
        Field::Text(t) => read_poa(counting, t),
        Field::Null => read_poa(counting, b""),
        Field::Number(x) if x.is_nan() => read_poa(counting, b""),
        Field::Logical(b) => read_poa(counting, if b { b"true" } else { b"false" }),
        Field::Date(_) => PoaReading::Unrecognised,
        Field::Integer(i) => poa_reading(counting, |p| p.parse::<i64>() == Ok(i)),
        Field::Number(x) => poa_reading(counting, |p| p.parse::<f64>() == Ok(x)),
    }
}

/// A present-on-admission value as the summary counts and shows it: text
/// as it is, a typed value as a delimited extract would hold it (only a
/// number other than 0 to 9, or a date, is written out).
fn poa_shown(field: Field<'_>) -> std::borrow::Cow<'_, [u8]> {
    const DIGITS: &[u8; 10] = b"0123456789";
    match field {
        Field::Integer(i @ 0..=9) => {
            std::borrow::Cow::Borrowed(&DIGITS[i as usize..i as usize + 1])
        }
        f => f.text_or_empty(),
    }
}

/// Reads a percentage option (`1`, `0.5`, `2%`): from 0 to 100.
///
/// ```
/// use morbus::pipeline::percent_from;
/// assert_eq!(percent_from("0.5%"), Ok(0.5));
/// assert!(percent_from("101").is_err());
/// ```
pub fn percent_from(text: &str) -> Result<f64, String> {
    let t = text.trim();
    let t = t.strip_suffix('%').unwrap_or(t).trim();
    match t.parse::<f64>() {
        Ok(v) if (0.0..=100.0).contains(&v) => Ok(v),
        _ => Err(format!(
            "takes a percentage from 0 to 100 (e.g. 1 or 0.5), not '{text}'"
        )),
    }
}

/// The values of a `--poa-values` option: comma-separated, trimmed,
/// upper-cased (`blank` becomes [`POA_BLANK`]).
pub fn poa_values_from(items: &[String]) -> Vec<String> {
    items
        .iter()
        .flat_map(|v| v.split(','))
        .map(|v| v.trim().to_ascii_uppercase())
        .filter(|v| !v.is_empty())
        .collect()
}

/// The default `--memory`: 1 GiB, within a desktop's means.
pub const DEFAULT_MEMORY: u64 = 1 << 30;

/// Options of a scoring run over delimited text.
#[derive(Clone, Debug)]
pub struct ScoreConfig {
    /// Diagnosis columns: names and/or glob patterns.
    pub dx: Vec<String>,
    /// Splits a field holding several codes.
    pub dx_sep: Option<u8>,
    pub layout: Layout,
    /// Patient (or unit) id column.
    pub id: Option<String>,
    /// Episode column (long layout): groups code rows into episodes.
    pub episode: Option<String>,
    /// Episode date column.
    pub date: Option<String>,
    pub date_format: DateFormat,
    /// Lookback window in days (`u32::MAX`: the whole history) for every
    /// list not named in `lookback_lists`.
    pub lookback: Option<u32>,
    /// Per-list lookback windows (`LIST=DAYS`), which replace `lookback` for
    /// the lists named. Lists with no window are scored from the episode
    /// alone.
    pub lookback_lists: Vec<(String, u32)>,
    /// Which episodes of a window count for the episode being scored.
    pub window: WindowScope,
    /// Other columns carried into a unit's output row (long layout's
    /// `--keep`, `explain`'s `--label`): each unit's first non-empty value;
    /// a later row with another non-empty value is counted as a
    /// disagreement, as for date and age.
    pub keep: Vec<String>,
    /// Memory budget in bytes of a run that holds the extract (`--memory`):
    /// the wide layout's raw rows take at most half of it in memory, the
    /// rest waits in a temporary file; a `score` history over the other
    /// half is partitioned by patient into temporary files
    /// (`pipeline/partition.rs`).
    pub memory: u64,
    /// Directory of temporary files (`None`: the system's).
    pub temp_dir: Option<std::path::PathBuf>,
    /// Bytes the input will give, when known beforehand (an uncompressed
    /// file): a `score` history that will clearly not fit in `memory` then
    /// goes to partitions as soon as that is plain, instead of being built
    /// in memory first and carried over. Only a hint: the output is the
    /// same with or without it.
    pub input_size: Option<u64>,
    /// Leave the primary diagnosis of the episode being scored out.
    pub exclude_primary: bool,
    /// Long layout: column flagging the primary-diagnosis row.
    pub primary: Option<String>,
    /// Present-on-admission indicator column (long layout), or columns
    /// (wide layout: names and globs, paired in order with the diagnosis
    /// columns).
    pub poa: Option<String>,
    /// Indicator values that count (upper-cased; [`POA_BLANK`] for an empty
    /// field).
    pub poa_values: Vec<String>,
    /// Percent of non-empty episode dates that may be unreadable; more
    /// stops the run (exit 1).
    pub max_unreadable_dates: f64,
    /// Age column (whole years).
    pub age: Option<String>,
    /// Field delimiter (default `,`).
    pub delimiter: u8,
    /// Stop at the first warning: an invalid code, a missing or unreadable
    /// age or date, a row without an id (long layout, lookback), a quote
    /// left open.
    pub strict: bool,
    /// The ICD-10 editions codes are looked up in: a well-shaped code in
    /// none of them is *unknown*, one whose stem is in one is *extended*
    /// (both counted; unknown codes stop a `--strict` run).
    pub edition: Edition,
    /// Preferred block size in bytes.
    pub block_size: usize,
    /// Worker threads for the wide layout without lookback (0: one per core;
    /// at most 256).
    pub threads: usize,
    /// How `score` and `explain` hand their rows to the output: delimited
    /// text, or value records for a typed sink (a Parquet output).
    pub output_form: OutputForm,
}

/// How a `score` or `explain` run writes its rows (see
/// [`crate::io::value_records`]).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum OutputForm {
    /// Delimited text lines, the scores formatted.
    #[default]
    Text,
    /// Value records: each row's pass-through part as delimited text, its
    /// scores (`explain`: every cell) as binary values, for an output that
    /// types them (Parquet); no value is written as text to be parsed
    /// again.
    ValueRecords,
}

impl ScoreConfig {
    /// Whether any list is scored over a lookback window (the run then reads
    /// the patient history).
    pub fn uses_history(&self) -> bool {
        self.lookback.is_some() || !self.lookback_lists.is_empty()
    }
}

/// Which of a patient's episodes in a lookback window count for the episode
/// being scored.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum WindowScope {
    /// The episode itself (its codes after the primary and
    /// present-on-admission rules) and every episode of the patient dated
    /// within the window up to and including its own day.
    #[default]
    CurrentAndEarlier,
    /// Only episodes dated strictly before the episode's own day (and within
    /// the window): the episode's own codes and those of other episodes of
    /// the same day are left out.
    EarlierOnly,
}

impl WindowScope {
    /// The option value naming the scope.
    pub fn name(self) -> &'static str {
        match self {
            WindowScope::CurrentAndEarlier => "current-and-earlier",
            WindowScope::EarlierOnly => "earlier-only",
        }
    }

    /// Reads an option value.
    pub fn parse(text: &str) -> Option<WindowScope> {
        match text.trim() {
            "current-and-earlier" => Some(WindowScope::CurrentAndEarlier),
            "earlier-only" => Some(WindowScope::EarlierOnly),
            _ => None,
        }
    }
}

/// A run's lookback windows: the window of every list not named, and the
/// per-list ones.
pub type Lookbacks = (Option<u32>, Vec<(String, u32)>);

/// The lookback windows of a run as given on the command line or in Python:
/// `DAYS`, `all`, `LIST=DAYS` pairs, or both (`365,hfrs=730`: 365 days for
/// every list but `hfrs`). Returns the window for every list not named and
/// the per-list windows; `all` is `u32::MAX`. The message names the option
/// as `option`.
pub fn parse_lookback(text: &str, option: &str) -> Result<Lookbacks, Error> {
    let days = |t: &str| -> Result<u32, Error> {
        let t = t.trim();
        if t == "all" {
            return Ok(u32::MAX);
        }
        match t.parse::<u32>() {
            Ok(d) if d < u32::MAX => Ok(d),
            _ => Err(Error::Usage(format!(
                "{option} takes a whole number of days or 'all' (or LIST=DAYS pairs), not '{t}'"
            ))),
        }
    };
    let mut default = None;
    let mut lists: Vec<(String, u32)> = Vec::new();
    for part in text.split(',') {
        let part = part.trim();
        if part.is_empty() {
            continue;
        }
        match part.split_once('=') {
            None => {
                if default.is_some() {
                    return Err(Error::Usage(format!(
                        "{option} gives more than one window for every list ('{text}')"
                    )));
                }
                default = Some(days(part)?);
            }
            Some((name, d)) => {
                let name = name.trim();
                if name.is_empty() {
                    return Err(Error::Usage(format!(
                        "{option}: '{part}' names no list (LIST=DAYS)"
                    )));
                }
                if lists.iter().any(|(n, _)| n == name) {
                    return Err(Error::Usage(format!(
                        "{option} gives list '{name}' more than one window"
                    )));
                }
                lists.push((name.to_string(), days(d)?));
            }
        }
    }
    if default.is_none() && lists.is_empty() {
        return Err(Error::Usage(format!(
            "{option} takes a whole number of days or 'all' (or LIST=DAYS pairs), not '{text}'"
        )));
    }
    Ok((default, lists))
}

/// The lookback of a run as text, the way `--lookback` takes it (`365`,
/// `all`, `365,hfrs=730`); `None` without one.
pub fn lookback_text(cfg: &ScoreConfig) -> Option<String> {
    if !cfg.uses_history() {
        return None;
    }
    let days = |d: u32| {
        if d == u32::MAX {
            "all".to_string()
        } else {
            d.to_string()
        }
    };
    let mut parts: Vec<String> = cfg.lookback.map(days).into_iter().collect();
    parts.extend(
        cfg.lookback_lists
            .iter()
            .map(|(n, d)| format!("{n}={}", days(*d))),
    );
    Some(parts.join(","))
}

/// How far a run has got, for a progress display.
#[derive(Clone, Copy, Debug, Default)]
pub struct Progress {
    /// Bytes read from the (decompressed) input.
    pub bytes_read: u64,
    /// Data rows read.
    pub rows: u64,
}

impl Default for ScoreConfig {
    fn default() -> Self {
        ScoreConfig {
            dx: Vec::new(),
            dx_sep: None,
            layout: Layout::Wide,
            id: None,
            episode: None,
            date: None,
            date_format: DateFormat::Iso,
            lookback: None,
            lookback_lists: Vec::new(),
            window: WindowScope::default(),
            keep: Vec::new(),
            memory: DEFAULT_MEMORY,
            temp_dir: None,
            input_size: None,
            exclude_primary: false,
            primary: None,
            poa: None,
            poa_values: DEFAULT_POA_VALUES.iter().map(|s| s.to_string()).collect(),
            max_unreadable_dates: DEFAULT_MAX_UNREADABLE_DATES,
            age: None,
            delimiter: b',',
            strict: false,
            edition: Edition::Any,
            block_size: 1 << 20,
            threads: 0,
            output_form: OutputForm::Text,
        }
    }
}

/// Distinct invalid values remembered for the summary.
const INVALID_VALUES_KEPT: usize = 10_000;

/// Distinct present-on-admission values counted one by one (the rest are
/// counted together as `…`).
const POA_VALUES_KEPT: usize = 1_000;

/// Unreadable date values kept as examples.
pub const DATE_EXAMPLES: usize = 3;

/// A partition of a spilled history that did not fit in its share of
/// `--memory` ([`Summary::over_memory`]).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct OverMemory {
    /// Bytes its history took.
    pub bytes: u64,
    /// Its episodes.
    pub episodes: u64,
    /// The patient id with the most episodes in it, and their number.
    pub id: Vec<u8>,
    pub id_episodes: u64,
}

/// What a run read, wrote and could not read.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Summary {
    /// Data rows read (the header is not counted).
    pub rows_read: u64,
    /// Data rows written.
    pub rows_written: u64,
    /// Non-empty diagnosis values that were valid codes.
    pub codes_read: u64,
    /// Non-empty diagnosis values that were not ICD-10-shaped (malformed).
    pub invalid_codes: u64,
    /// Invalid values and their counts (at most 10,000 distinct kept, each
    /// cut to [`INVALID_VALUE_BYTES`]).
    pub invalid_values: HashMap<Vec<u8>, u64>,
    /// Valid (well-shaped) codes that no selected edition has, nor their
    /// three- or four-character stem (counted in `codes_read` too).
    pub unknown_codes: u64,
    /// Unknown codes (normalised) and their counts (at most 10,000 distinct).
    pub unknown_values: HashMap<Code, u64>,
    /// Valid codes that no selected edition has but whose three- or
    /// four-character stem one has: national variants (counted in
    /// `codes_read` too).
    pub extended_codes: u64,
    /// Extended codes (normalised) and their counts (at most 10,000 distinct).
    pub extended_values: HashMap<Code, u64>,
    /// The editions the codes were looked up in (set by the first code that
    /// is not known; for the summary's wording).
    pub edition: Edition,
    /// Age fields that were empty.
    pub missing_ages: u64,
    /// Age fields that held something other than an age.
    pub unreadable_ages: u64,
    /// Units scored (episodes, or ids in a long extract without episodes).
    pub units: u64,
    /// Episodes with an empty date (scored from their own codes alone).
    pub missing_dates: u64,
    /// Episodes whose date could not be read (scored from their own codes
    /// alone).
    pub unreadable_dates: u64,
    /// The first distinct unreadable date values, in input order (at most
    /// [`DATE_EXAMPLES`]).
    pub unreadable_date_examples: Vec<Vec<u8>>,
    /// Date fields read (non-empty and readable).
    pub dates_read: u64,
    /// Dates read whose day and month could be swapped into another valid
    /// date (patterns writing both as numbers).
    pub dates_either_order: u64,
    /// Dates read whose day is over 12, proving the pattern's order.
    pub dates_order_proven: u64,
    /// The date format of the run, when dates were read.
    pub date_format: Option<String>,
    /// Present-on-admission indicators read (one per non-empty diagnosis
    /// field), by value as written (trimmed; empty for a blank).
    pub poa_indicators: HashMap<Vec<u8>, u64>,
    /// Indicators that are neither a value of the guidelines nor one of
    /// `--poa-values`.
    pub unrecognised_poa: u64,
    /// Rows whose id field is empty or blank (long layout, or lookback): in
    /// the long layout they are grouped by the field as written, like any
    /// id (so all empty ones form one unit); with a lookback each is scored
    /// from its own codes alone.
    pub missing_ids: u64,
    /// Long-layout units (episodes, or ids without `--episode`) with a row
    /// whose date or age differs from the unit's first readable one (which
    /// is used).
    pub disagreeing_units: u64,
    /// Codes of episodes being scored left out as their primary diagnosis.
    pub excluded_primary: u64,
    /// Lookback over the memory limit: episodes (and rows read after the
    /// limit was reached) written to partition files, and the bytes of
    /// temporary files written for them (partitions and scored lines);
    /// 0 when the history fitted in memory.
    pub spilled_records: u64,
    pub spilled_bytes: u64,
    /// A spilled history whose largest partition still held more than
    /// half of `--memory` (the run went over the limit): that partition's
    /// bytes, and the patient id with the most episodes in it with their
    /// number (a placeholder id shared by many rows is one patient).
    pub over_memory: Option<OverMemory>,
    /// Codes of episodes being scored left out as not present on admission.
    pub excluded_not_on_admission: u64,
    /// The diagnosis columns read, as resolved from the names and patterns
    /// of [`ScoreConfig::dx`].
    pub dx_columns: Vec<String>,
}

/// Longest invalid value remembered as written: a longer one is kept cut
/// to this many bytes (at a character boundary) followed by `…`, so that a
/// gigantic field neither fills the memory nor the summary.
pub const INVALID_VALUE_BYTES: usize = 64;

/// An invalid value as remembered: trimmed, and cut when too long.
fn kept_value(value: &[u8]) -> std::borrow::Cow<'_, [u8]> {
    let v = trim_blanks(value);
    if v.len() <= INVALID_VALUE_BYTES {
        return std::borrow::Cow::Borrowed(v);
    }
    let mut cut = INVALID_VALUE_BYTES;
    // Do not split a UTF-8 sequence (continuation bytes are 10xxxxxx).
    while cut > INVALID_VALUE_BYTES - 3 && v[cut] & 0xC0 == 0x80 {
        cut -= 1;
    }
    let mut k = v[..cut].to_vec();
    k.extend_from_slice("…".as_bytes());
    std::borrow::Cow::Owned(k)
}

/// A value from the input as shown in a message: lossy UTF-8, control
/// characters escaped (`\0`, `\t`, `\u{1b}`), cut to
/// [`INVALID_VALUE_BYTES`] bytes with its length said when longer.
pub fn shown(value: &[u8]) -> String {
    let mut out = escaped(&kept_value(value));
    let n = trim_blanks(value).len();
    if n > INVALID_VALUE_BYTES {
        out.push_str(&format!(" ({n} bytes)"));
    }
    out
}

/// A value without the spaces and tabs around it: what the code reader
/// ignores (see [`crate::code`]). A carriage return or any other control
/// character is kept, and shown escaped (`'I21\r'`), since it makes the
/// value an invalid code.
fn trim_blanks(value: &[u8]) -> &[u8] {
    let start = value
        .iter()
        .position(|b| !matches!(b, b' ' | b'\t'))
        .unwrap_or(value.len());
    let end = value
        .iter()
        .rposition(|b| !matches!(b, b' ' | b'\t'))
        .map_or(start, |e| e + 1);
    &value[start..end]
}

/// Lossy UTF-8 with control characters escaped: how text from an input or
/// a list is shown on a terminal, everywhere (`\r`, `\u{1b}`).
pub fn escaped(value: &[u8]) -> String {
    let mut out = String::new();
    for c in String::from_utf8_lossy(value).chars() {
        if c.is_control() {
            out.extend(c.escape_debug());
        } else {
            out.push(c);
        }
    }
    out
}

impl Summary {
    /// Adds the counts of a run over later rows (e.g. another part of a
    /// frame scored on another thread). The distinct invalid values kept are
    /// those of `self`, then the new ones of `later`, up to the same limit.
    /// The diagnosis columns are `self`'s (or `later`'s when `self` has none).
    pub fn merge(&mut self, later: Summary) {
        self.rows_read += later.rows_read;
        self.spilled_records += later.spilled_records;
        self.spilled_bytes += later.spilled_bytes;
        if later.over_memory.as_ref().map(|o| o.bytes) > self.over_memory.as_ref().map(|o| o.bytes)
        {
            self.over_memory = later.over_memory;
        }
        self.rows_written += later.rows_written;
        self.codes_read += later.codes_read;
        self.invalid_codes += later.invalid_codes;
        self.unknown_codes += later.unknown_codes;
        self.extended_codes += later.extended_codes;
        if self.unknown_codes + self.extended_codes == later.unknown_codes + later.extended_codes {
            self.edition = later.edition;
        }
        for (c, n) in later.unknown_values {
            add_kept(&mut self.unknown_values, c, n);
        }
        for (c, n) in later.extended_values {
            add_kept(&mut self.extended_values, c, n);
        }
        self.missing_ages += later.missing_ages;
        self.unreadable_ages += later.unreadable_ages;
        self.units += later.units;
        self.missing_dates += later.missing_dates;
        self.unreadable_dates += later.unreadable_dates;
        self.excluded_primary += later.excluded_primary;
        self.excluded_not_on_admission += later.excluded_not_on_admission;
        self.missing_ids += later.missing_ids;
        self.disagreeing_units += later.disagreeing_units;
        self.dates_read += later.dates_read;
        self.dates_either_order += later.dates_either_order;
        self.dates_order_proven += later.dates_order_proven;
        self.unrecognised_poa += later.unrecognised_poa;
        for v in later.unreadable_date_examples {
            self.unreadable_date_example(&v);
        }
        for (v, n) in later.poa_indicators {
            self.add_poa(&v, n);
        }
        if self.dx_columns.is_empty() {
            self.dx_columns = later.dx_columns;
        }
        if self.date_format.is_none() {
            self.date_format = later.date_format;
        }
        for (v, n) in later.invalid_values {
            self.add_invalid(v, n);
        }
    }

    /// Counts a valid code and looks it up in `edition`; returns whether
    /// it is known, extended or unknown (the latter two counted).
    #[inline]
    pub fn valid_code(&mut self, code: &Code, edition: Edition) -> Existence {
        self.codes_read += 1;
        let e = crate::editions::existence(code, edition);
        match e {
            Existence::Known => {}
            Existence::Unknown => {
                self.unknown_codes += 1;
                self.edition = edition;
                add_kept(&mut self.unknown_values, *code, 1);
            }
            Existence::Extended => {
                self.extended_codes += 1;
                self.edition = edition;
                add_kept(&mut self.extended_values, *code, 1);
            }
        }
        e
    }

    /// The most frequent unknown codes (normalised), most frequent first.
    pub fn top_unknown(&self, n: usize) -> Vec<(String, u64)> {
        top_codes(&self.unknown_values, n)
    }

    /// The most frequent extended codes (normalised), most frequent first.
    pub fn top_extended(&self, n: usize) -> Vec<(String, u64)> {
        top_codes(&self.extended_values, n)
    }

    pub(crate) fn invalid(&mut self, value: &[u8]) {
        self.invalid_codes += 1;
        let v = kept_value(value);
        if let Some(n) = self.invalid_values.get_mut(&v[..]) {
            *n += 1;
        } else if self.invalid_values.len() < INVALID_VALUES_KEPT {
            self.invalid_values.insert(v.into_owned(), 1);
        }
    }

    /// Remembers an unreadable date value, when fewer than
    /// [`DATE_EXAMPLES`] distinct ones are kept.
    pub(crate) fn unreadable_date_example(&mut self, value: &[u8]) {
        if self.unreadable_date_examples.len() < DATE_EXAMPLES
            && !self.unreadable_date_examples.iter().any(|v| v == value)
        {
            self.unreadable_date_examples
                .push(kept_value(value).into_owned());
        }
    }

    /// Counts `n` present-on-admission indicators of one value.
    pub(crate) fn add_poa(&mut self, value: &[u8], n: u64) {
        let v = value.trim_ascii();
        if let Some(c) = self.poa_indicators.get_mut(v) {
            *c += n;
        } else if self.poa_indicators.len() < POA_VALUES_KEPT {
            self.poa_indicators.insert(kept_value(v).into_owned(), n);
        } else {
            *self
                .poa_indicators
                .entry("…".as_bytes().to_vec())
                .or_default() += n;
        }
    }

    /// Present-on-admission indicators by value, most frequent first (ties
    /// by value); a blank is an empty string.
    pub fn poa_by_value(&self) -> Vec<(String, u64)> {
        let mut v: Vec<(String, u64)> = self
            .poa_indicators
            .iter()
            .map(|(k, c)| (escaped(k), *c))
            .collect();
        v.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
        v
    }

    /// Whether the dates read leave the day/month order of the pattern
    /// open: at least half of them read either way round and none proves
    /// the order.
    pub fn day_month_unproven(&self) -> bool {
        self.dates_read > 0
            && self.dates_order_proven == 0
            && self.dates_either_order * 2 >= self.dates_read
    }

    /// The unreadable date examples as shown: `'05/01/2021', 'x'`.
    pub fn date_examples(&self) -> String {
        self.unreadable_date_examples
            .iter()
            .map(|v| format!("'{}'", escaped(v)))
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// Adds `n` occurrences of an invalid value to the remembered ones
    /// (not to the count, which the caller keeps).
    fn add_invalid(&mut self, value: Vec<u8>, n: u64) {
        if let Some(c) = self.invalid_values.get_mut(&value) {
            *c += n;
        } else if self.invalid_values.len() < INVALID_VALUES_KEPT {
            self.invalid_values.insert(value, n);
        }
    }

    /// The most frequent invalid values, most frequent first (ties by value).
    pub fn top_invalid(&self, n: usize) -> Vec<(String, u64)> {
        let mut v: Vec<(String, u64)> = self
            .invalid_values
            .iter()
            .map(|(k, c)| (String::from_utf8_lossy(k).into_owned(), *c))
            .collect();
        v.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
        v.truncate(n);
        v
    }

    /// The summary as printed on standard error.
    pub fn report(&self) -> String {
        let mut s = format!(
            "morbus: {} rows read, {} rows written, {} units scored, {} codes read, {} invalid codes (not ICD-10-shaped)",
            self.rows_read, self.rows_written, self.units, self.codes_read, self.invalid_codes
        );
        if self.invalid_codes > 0 {
            let mut top: Vec<(&Vec<u8>, u64)> =
                self.invalid_values.iter().map(|(k, c)| (k, *c)).collect();
            top.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(b.0)));
            let top: Vec<String> = top
                .into_iter()
                .take(5)
                .map(|(v, c)| format!("'{}' ({c})", escaped(v)))
                .collect();
            s.push_str(&format!(
                "; most frequent invalid values: {}",
                top.join(", ")
            ));
        }
        if self.unknown_codes > 0 {
            s.push_str(&format!(
                "; {} unknown codes (well-shaped, but neither they nor their category are in {}; scored by prefix all the same): {}",
                self.unknown_codes,
                self.edition.describe(),
                shown_top(&self.top_unknown(5))
            ));
        }
        if self.extended_codes > 0 {
            s.push_str(&format!(
                "; {} extended codes (not in {}, though their category is: national variants; scored by prefix): {}",
                self.extended_codes,
                self.edition.describe(),
                shown_top(&self.top_extended(5))
            ));
        }
        if self.missing_ages + self.unreadable_ages > 0 {
            s.push_str(&format!(
                "; ages missing: {}, unreadable: {}",
                self.missing_ages, self.unreadable_ages
            ));
        }
        if self.missing_dates + self.unreadable_dates > 0 {
            let examples = if self.unreadable_date_examples.is_empty() {
                String::new()
            } else {
                format!(
                    " (e.g. {}; expected {})",
                    self.date_examples(),
                    self.date_format.as_deref().unwrap_or("%Y-%m-%d")
                )
            };
            s.push_str(&format!(
                "; dates missing: {}, unreadable: {}{examples} (those episodes scored from their own codes alone)",
                self.missing_dates, self.unreadable_dates
            ));
        }
        if self.day_month_unproven() {
            s.push_str(&format!(
                "; warning: {} of {} dates read would also be valid dates with day and month swapped, and none proves the order of {} (a day over 12): check --date-format",
                self.dates_either_order,
                self.dates_read,
                self.date_format.as_deref().unwrap_or("the date format")
            ));
        }
        if !self.poa_indicators.is_empty() {
            let shown: Vec<String> = self
                .poa_by_value()
                .into_iter()
                .take(10)
                .map(|(v, c)| {
                    if v.is_empty() {
                        format!("blank {c}")
                    } else {
                        format!("'{v}' {c}")
                    }
                })
                .collect();
            let more = self.poa_indicators.len().saturating_sub(10);
            let more = if more > 0 {
                format!(" and {more} more values")
            } else {
                String::new()
            };
            s.push_str(&format!(
                "; present-on-admission indicators: {}{more}",
                shown.join(", ")
            ));
            if self.unrecognised_poa > 0 {
                s.push_str(&format!(
                    "; unrecognised present-on-admission indicators: {} (their codes count as not present on admission)",
                    self.unrecognised_poa
                ));
            }
        }
        if self.disagreeing_units > 0 {
            s.push_str(&format!(
                "; units whose rows disagree on date, age or a kept column: {} (the first value is used)",
                self.disagreeing_units
            ));
        }
        if self.missing_ids > 0 {
            s.push_str(&format!("; rows without an id: {}", self.missing_ids));
        }
        if self.spilled_records > 0 {
            s.push_str(&format!(
                "; the history was over half of --memory and went to temporary files, partitioned by patient: {} episodes and rows (provenance: bytes written)",
                self.spilled_records
            ));
        }
        if let Some(o) = &self.over_memory {
            s.push_str(&format!(
                "; WARNING: the memory limit was passed: one partition of the history took {} MB, over half of --memory; patient id '{}' alone has {} of its {} episodes (a placeholder id shared by many rows is one patient to the lookback: leave such rows out or give them distinct ids, or raise --memory)",
                o.bytes.div_ceil(1_000_000),
                String::from_utf8_lossy(&o.id),
                o.id_episodes,
                o.episodes
            ));
        }
        if self.excluded_primary > 0 {
            s.push_str(&format!(
                "; primary diagnoses left out: {}",
                self.excluded_primary
            ));
        }
        if self.excluded_not_on_admission > 0 {
            s.push_str(&format!(
                "; codes not present on admission left out: {}",
                self.excluded_not_on_admission
            ));
        }
        s
    }
}

/// Adds `n` to a code's count, keeping at most [`INVALID_VALUES_KEPT`]
/// distinct codes.
fn add_kept(map: &mut HashMap<Code, u64>, code: Code, n: u64) {
    if let Some(c) = map.get_mut(&code) {
        *c += n;
    } else if map.len() < INVALID_VALUES_KEPT {
        map.insert(code, n);
    }
}

fn top_codes(map: &HashMap<Code, u64>, n: usize) -> Vec<(String, u64)> {
    let mut v: Vec<(String, u64)> = map.iter().map(|(k, c)| (k.to_string(), *c)).collect();
    v.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
    v.truncate(n);
    v
}

fn shown_top(top: &[(String, u64)]) -> String {
    top.iter()
        .map(|(v, c)| format!("'{v}' ({c})"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The header of an extract.
#[derive(Clone)]
pub struct Header {
    pub names: Vec<String>,
}

impl Header {
    pub fn from_fields(fields: &Fields<'_>) -> Header {
        let mut names: Vec<String> = (0..fields.len())
            .map(|i| String::from_utf8_lossy(fields.get(i)).trim().to_string())
            .collect();
        if let Some(first) = names.first_mut() {
            if let Some(rest) = first.strip_prefix('\u{feff}') {
                *first = rest.to_string();
            }
        }
        Header { names }
    }

    /// The columns, for a message saying a column is not there; with a
    /// hint when the header looks split by another delimiter.
    fn available(&self) -> String {
        const SHOWN: usize = 40;
        let mut s = self.names[..self.names.len().min(SHOWN)]
            .iter()
            .map(|n| escaped(n.as_bytes()))
            .collect::<Vec<_>>()
            .join(", ");
        if self.names.len() > SHOWN {
            s.push_str(&format!(", and {} more", self.names.len() - SHOWN));
        }
        if self.names.len() == 1 {
            for (c, name) in [('\t', "tab"), (';', ";"), ('|', "|"), (',', ",")] {
                if self.names[0].contains(c) {
                    s.push_str(&format!(
                        " (a single column holding '{}': is the delimiter --delimiter '{name}'?)",
                        c.escape_debug()
                    ));
                    break;
                }
            }
        }
        s
    }

    /// One column by exact name.
    pub fn column(&self, name: &str, role: &str) -> Result<usize, Error> {
        let found: Vec<usize> = self
            .names
            .iter()
            .enumerate()
            .filter(|(_, n)| *n == name)
            .map(|(i, _)| i)
            .collect();
        match found.as_slice() {
            [i] => Ok(*i),
            [] => Err(Error::Usage(format!(
                "{role} column '{name}' not found; columns in the input: {}",
                self.available()
            ))),
            many => Err(Error::Usage(format!(
                "{role} column '{name}' appears {} times in the header; rename the duplicates",
                many.len()
            ))),
        }
    }

    /// Columns named by a list of names and globs, in the order given
    /// (header order within a glob), each once.
    pub fn columns(&self, items: &[String], role: &str) -> Result<Vec<usize>, Error> {
        let mut out = Vec::new();
        let mut taken = vec![false; self.names.len()];
        for item in items.iter().flat_map(|s| s.split(',')) {
            let item = item.trim();
            if item.is_empty() {
                continue;
            }
            if item.contains(['*', '?', '[']) {
                let pat = glob::Pattern::new(item)
                    .map_err(|e| Error::Usage(format!("bad column pattern '{item}': {e}")))?;
                let hits: Vec<usize> = self
                    .names
                    .iter()
                    .enumerate()
                    .filter(|(_, n)| pat.matches(n))
                    .map(|(i, _)| i)
                    .collect();
                if hits.is_empty() {
                    return Err(Error::Usage(format!(
                        "{role} pattern '{item}' matches no column; columns in the input: {}",
                        self.available()
                    )));
                }
                for h in hits {
                    if !std::mem::replace(&mut taken[h], true) {
                        out.push(h);
                    }
                }
            } else {
                let c = self.column(item, role)?;
                if !std::mem::replace(&mut taken[c], true) {
                    out.push(c);
                }
            }
        }
        if out.is_empty() {
            return Err(Error::Usage(format!("no {role} columns given")));
        }
        Ok(out)
    }
}

/// Lines of the records of a block, counted as the records come (in
/// order), so that asking for every record's line stays linear.
pub(crate) struct LineCursor {
    offset: usize,
    line: u64,
}

impl LineCursor {
    pub fn new(block: &Block) -> LineCursor {
        LineCursor {
            offset: 0,
            line: block.first_line,
        }
    }

    /// The line of a record at `offset` (not before the previous one asked).
    pub fn line_at(&mut self, block: &Block, offset: usize) -> u64 {
        if offset < self.offset {
            return line_of(block, offset);
        }
        let rest = &block.data[self.offset..];
        self.line += crate::io::line_ends(rest, offset - self.offset);
        self.offset = offset;
        self.line
    }
}

/// 1-based line of a record at `offset` in a block (linear in `offset`:
/// for messages; [`LineCursor`] for every record).
pub(crate) fn line_of(block: &Block, offset: usize) -> u64 {
    block.first_line + crate::io::line_ends(&block.data, offset)
}

/// Why a code of the episode being scored does not count.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Exclusion {
    Primary,
    NotPresentOnAdmission,
}

/// The columns a run uses, resolved against the header.
#[derive(Clone)]
pub(crate) struct Plan {
    pub header: Header,
    pub dx: Vec<usize>,
    pub age: Option<usize>,
    pub id: Option<usize>,
    pub episode: Option<usize>,
    pub date: Option<usize>,
    pub primary: Option<usize>,
    /// Present-on-admission columns: one (long layout) or one per
    /// diagnosis column (wide layout); empty without `--poa`.
    pub poa: Vec<usize>,
    /// Columns carried into each unit's output row.
    pub keep: Vec<usize>,
    /// Checked columns each unit carries (`history::ValueColumn`:
    /// `compare`'s outcome and adjustment columns); set by the history
    /// reader.
    pub values: Vec<usize>,
    pub ncols: usize,
    pub crlf: bool,
    /// How ids, episode values and kept values are held: the bytes of a
    /// delimited record's fields, or keys of typed values (a frame or an
    /// Arrow source; set by the history reader).
    pub keys: crate::rows::Keys,
}

/// A record-level failure, turned into an [`Error`] with the line number by
/// the caller.
pub(crate) enum RowIssue {
    InvalidCode {
        column: usize,
        value: Vec<u8>,
    },
    UnknownCode {
        column: usize,
        value: Vec<u8>,
        edition: Edition,
    },
    UnreadableAge(Vec<u8>),
    MissingAge,
    UnreadableDate(Vec<u8>),
    UnrecognisedPoa {
        column: usize,
        value: Vec<u8>,
    },
}

/// Resolves the present-on-admission columns (`poa`: names and globs)
/// against the diagnosis columns: one column in the long layout; in the wide
/// layout as many as the diagnosis columns, paired in order. `options`
/// names the two options in messages (`("--poa", "--dx")`).
pub fn poa_columns(
    header: &Header,
    dx: &[usize],
    poa: &str,
    layout: Layout,
    options: (&str, &str),
) -> Result<Vec<usize>, Error> {
    let cols = header.columns(&[poa.to_string()], "present-on-admission")?;
    let names = |cs: &[usize]| {
        cs.iter()
            .map(|&c| header.names[c].as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    if let Some(&c) = cols.iter().find(|c| dx.contains(c)) {
        return Err(Error::Usage(format!(
            "column '{}' is named by both {} and {}",
            header.names[c], options.0, options.1
        )));
    }
    match layout {
        Layout::Long if cols.len() != 1 => Err(Error::Usage(format!(
            "{} '{poa}' names {} columns ({}); in the long layout it is one column",
            options.0,
            cols.len(),
            names(&cols)
        ))),
        Layout::Wide if cols.len() != dx.len() => Err(Error::Usage(format!(
            "{} '{poa}' names {} present-on-admission columns ({}) but {} names {} diagnosis columns ({}); in the wide layout they pair in order, one each",
            options.0,
            cols.len(),
            names(&cols),
            options.1,
            dx.len(),
            names(dx)
        ))),
        _ => Ok(cols),
    }
}

fn unclosed_quote(line: u64) -> Error {
    Error::data(
        Some(line),
        "a quoted field opened in this record is never closed: the input ends inside it",
    )
}

impl Plan {
    /// The plan for a header record (the first record of the input).
    pub fn from_header(
        cfg: &ScoreConfig,
        block: &Block,
        rec: &RecordRef<'_>,
    ) -> Result<Plan, Error> {
        if rec.unclosed_quote {
            return Err(unclosed_quote(line_of(block, rec.offset)));
        }
        Plan::new(cfg, Header::from_fields(&rec.fields), rec.crlf)
    }

    pub fn new(cfg: &ScoreConfig, header: Header, crlf: bool) -> Result<Plan, Error> {
        let dx = header.columns(&cfg.dx, "diagnosis")?;
        let one = |name: &Option<String>, role: &str| -> Result<Option<usize>, Error> {
            name.as_deref().map(|n| header.column(n, role)).transpose()
        };
        let age = one(&cfg.age, "age")?;
        let id = one(&cfg.id, "id")?;
        let episode = one(&cfg.episode, "episode")?;
        let date = one(&cfg.date, "date")?;
        let primary = one(&cfg.primary, "primary-diagnosis")?;
        let poa = match &cfg.poa {
            Some(p) => poa_columns(&header, &dx, p, cfg.layout, ("--poa", "--dx"))?,
            None => Vec::new(),
        };
        let keep = cfg
            .keep
            .iter()
            .map(|n| header.column(n, "kept"))
            .collect::<Result<Vec<usize>, Error>>()?;
        if cfg.layout == Layout::Long && id.is_none() {
            return Err(Error::Usage("--layout long needs --id COL".into()));
        }
        if cfg.uses_history() && (id.is_none() || date.is_none()) {
            return Err(Error::Usage(
                "--lookback needs --id (the patient column) and --date".into(),
            ));
        }
        if cfg.layout == Layout::Long && cfg.exclude_primary && primary.is_none() {
            return Err(Error::Usage(
                "--exclude-primary in the long layout needs --primary COL (the column flagging the primary-diagnosis row)".into(),
            ));
        }
        if cfg.layout == Layout::Wide && primary.is_some() {
            return Err(Error::Usage(
                "--primary is for the long layout (one code per row); in the wide layout --exclude-primary leaves out the first diagnosis column".into(),
            ));
        }
        if cfg.layout == Layout::Wide && episode.is_some() {
            return Err(Error::Usage(
                "--episode is for the long layout; in the wide layout every row is an episode"
                    .into(),
            ));
        }
        Ok(Plan {
            ncols: header.names.len(),
            header,
            dx,
            age,
            id,
            episode,
            date,
            primary,
            poa,
            keep,
            values: Vec::new(),
            crlf,
            keys: crate::rows::Keys::Text,
        })
    }

    /// Names of the diagnosis columns read, in reading order.
    pub fn dx_names(&self) -> Vec<String> {
        self.dx
            .iter()
            .map(|&c| self.header.names[c].clone())
            .collect()
    }

    pub fn dx_name(&self, k: usize) -> &str {
        &self.header.names[self.dx[k]]
    }

    /// Checks a data record: a quote left open at the end of the input,
    /// and the field count.
    ///
    /// The record's line is counted only when there is something to report:
    /// counting it for every record would cost a pass over the block each.
    #[inline]
    pub fn check_width(&self, block: &Block, rec: &RecordRef<'_>) -> Result<(), Error> {
        if rec.unclosed_quote {
            return Err(unclosed_quote(line_of(block, rec.offset)));
        }
        if rec.fields.len() != self.ncols {
            // Only here: counting lines is linear in the block.
            let line = line_of(block, rec.offset);
            let lines = crate::io::line_ends(rec.raw, rec.raw.len());
            let hint = if lines > 0 {
                format!(
                    " (the record runs over lines {line}-{}: is a quote left open?)",
                    line + lines
                )
            } else {
                String::new()
            };
            return Err(Error::data(
                Some(line),
                format!(
                    "record has {} fields but the header has {}{hint}",
                    rec.fields.len(),
                    self.ncols
                ),
            ));
        }
        Ok(())
    }

    /// Whether a long-layout row is flagged as the primary diagnosis (and
    /// `--exclude-primary` is on).
    fn primary_row(&self, cfg: &ScoreConfig, row: &impl Row) -> bool {
        cfg.exclude_primary
            && self
                .primary
                .is_some_and(|c| is_field_flag_set(row.field(c)))
    }

    /// The present-on-admission exclusion of the codes of diagnosis column
    /// `k` (its indicator is counted).
    #[inline]
    fn poa_exclusion(
        &self,
        cfg: &ScoreConfig,
        row: &impl Row,
        k: usize,
        summary: &mut Summary,
    ) -> Result<Option<Exclusion>, RowIssue> {
        let c = match cfg.layout {
            Layout::Wide => self.poa.get(k),
            Layout::Long => self.poa.first(),
        };
        let Some(&c) = c else {
            return Ok(None);
        };
        let field = row.field(c);
        match read_poa_field(&cfg.poa_values, field) {
            PoaReading::Present => {
                summary.add_poa(&poa_shown(field), 1);
                Ok(None)
            }
            PoaReading::NotPresent => {
                summary.add_poa(&poa_shown(field), 1);
                Ok(Some(Exclusion::NotPresentOnAdmission))
            }
            PoaReading::Unrecognised => {
                let raw = poa_shown(field);
                if cfg.strict {
                    return Err(RowIssue::UnrecognisedPoa {
                        column: c,
                        value: raw.to_vec(),
                    });
                }
                summary.add_poa(&raw, 1);
                summary.unrecognised_poa += 1;
                Ok(Some(Exclusion::NotPresentOnAdmission))
            }
        }
    }

    /// Reads every diagnosis value of a record, calling `sink` with the
    /// value as written, its code and the exclusion that applies when the
    /// record's episode is the one being scored. Invalid values are counted
    /// (or, with `--strict`, returned as an issue), and so are the
    /// present-on-admission indicators of non-empty diagnosis fields.
    #[inline]
    pub fn read_codes(
        &self,
        cfg: &ScoreConfig,
        row: &impl Row,
        summary: &mut Summary,
        mut sink: impl FnMut(&[u8], Code, Option<Exclusion>),
    ) -> Result<(), RowIssue> {
        let primary_row = cfg.layout == Layout::Long && self.primary_row(cfg, row);
        let mut first = true;
        for (k, &c) in self.dx.iter().enumerate() {
            // A code is text. A missing value is an empty field; any other
            // typed value (a column of numbers or dates) holds no code: it
            // is an invalid value, written out only to be shown.
            let field = row.field(c);
            let (v, typed) = match field {
                Field::Text(t) => (t, false),
                Field::Null => (&b""[..], false),
                Field::Number(x) if x.is_nan() => (&b""[..], false),
                _ => (&b"?"[..], true),
            };
            if v.is_empty() {
                if k == 0 {
                    first = false;
                }
                continue;
            }
            let field_exclusion = if primary_row {
                // The primary row is left out whatever its indicator; the
                // indicator is still counted.
                self.poa_exclusion(cfg, row, k, summary)?;
                Some(Exclusion::Primary)
            } else {
                self.poa_exclusion(cfg, row, k, summary)?
            };
            if typed {
                let shown = field.text_or_empty();
                if cfg.strict {
                    return Err(RowIssue::InvalidCode {
                        column: k,
                        value: shown.into_owned(),
                    });
                }
                summary.invalid(&shown);
                first = false;
                continue;
            }
            let mut one = |part: &[u8], first: &mut bool| -> Result<(), RowIssue> {
                let is_first = std::mem::replace(first, false) && k == 0;
                match crate::code::read_code(part) {
                    Reading::Valid(code) => {
                        if summary.valid_code(&code, cfg.edition) == Existence::Unknown
                            && cfg.strict
                        {
                            return Err(RowIssue::UnknownCode {
                                column: k,
                                value: part.to_vec(),
                                edition: cfg.edition,
                            });
                        }
                        let excl = if cfg.layout == Layout::Wide && cfg.exclude_primary && is_first
                        {
                            Some(Exclusion::Primary)
                        } else {
                            field_exclusion
                        };
                        sink(part, code, excl);
                    }
                    Reading::Empty => {}
                    Reading::Invalid => {
                        if cfg.strict {
                            return Err(RowIssue::InvalidCode {
                                column: k,
                                value: part.to_vec(),
                            });
                        }
                        summary.invalid(part);
                    }
                }
                Ok(())
            };
            match cfg.dx_sep {
                Some(sep) => {
                    for part in v.split(|&b| b == sep) {
                        one(part, &mut first)?;
                    }
                }
                None => one(v, &mut first)?,
            }
            first = false;
        }
        Ok(())
    }

    /// The age of a record (`None`: missing or unreadable, counted): text
    /// and numbers by [`read_age_value`]; any other value (a date, true or
    /// false) is unreadable.
    pub fn read_age(
        &self,
        cfg: &ScoreConfig,
        row: &impl Row,
        summary: &mut Summary,
    ) -> Result<Option<u32>, RowIssue> {
        let Some(c) = self.age else {
            return Ok(None);
        };
        let field = row.field(c);
        let age = match field {
            Field::Null => Age::Missing,
            Field::Text(t) => Age::Text(t),
            Field::Integer(i) => Age::Number(i as f64),
            Field::Number(x) => Age::Number(x),
            Field::Logical(_) | Field::Date(_) => Age::Text(b"?"),
        };
        match read_age_value(age) {
            AgeReading::Years(a) => Ok(Some(a)),
            AgeReading::Missing => {
                if cfg.strict {
                    return Err(RowIssue::MissingAge);
                }
                summary.missing_ages += 1;
                Ok(None)
            }
            AgeReading::Unreadable => {
                if cfg.strict {
                    return Err(RowIssue::UnreadableAge(match age {
                        Age::Number(x) => x.to_string().into_bytes(),
                        _ => field.text_or_empty().into_owned(),
                    }));
                }
                summary.unreadable_ages += 1;
                Ok(None)
            }
        }
    }

    /// The date of a record as days since 1970-01-01 (`None`: missing or
    /// unreadable; counting missing and unreadable dates is left to the
    /// caller, once per episode). Dates read, what they say about the
    /// day/month order, and the first unreadable values are counted here:
    /// the one place that reads a date field.
    ///
    /// A typed date (a frame's or Parquet file's date column) is its day,
    /// counted as a date read, when its year is one a text date can have
    /// (1000 to 9999); a whole number is read by its digits with a packed
    /// date format ([`DateFormat::read_number`]: 20240301 with `%Y%m%d`);
    /// other typed values are unreadable. Only an unreadable value is
    /// written out, as the summary and messages show it.
    pub fn read_date(
        &self,
        cfg: &ScoreConfig,
        row: &impl Row,
        summary: &mut Summary,
    ) -> Result<Option<i32>, Option<Vec<u8>>> {
        let Some(c) = self.date else {
            return Ok(None);
        };
        let field = row.field(c);
        let reading = match field {
            Field::Null => return Err(None),
            Field::Number(x) if x.is_nan() => return Err(None),
            Field::Text(t) => {
                let raw = t.trim_ascii();
                if raw.is_empty() {
                    return Err(None);
                }
                cfg.date_format.read(raw)
            }
            Field::Date(d) => match crate::rows::typed_day(d) {
                Some(day) => {
                    summary.dates_read += 1;
                    return Ok(Some(day));
                }
                None => None,
            },
            Field::Integer(i) => cfg.date_format.read_number(i),
            Field::Number(x) if x.fract() == 0.0 && x.abs() < 1e15 => {
                cfg.date_format.read_number(x as i64)
            }
            Field::Number(_) | Field::Logical(_) => None,
        };
        match reading {
            Some((day, order)) => {
                summary.dates_read += 1;
                match order {
                    dates::DayMonth::Proven => summary.dates_order_proven += 1,
                    dates::DayMonth::Either => summary.dates_either_order += 1,
                    dates::DayMonth::Same => {}
                }
                Ok(Some(day))
            }
            None => {
                // The value as shown in the summary and messages.
                let shown = field.text_or_empty();
                let raw = shown.trim_ascii();
                summary.unreadable_date_example(raw);
                Err(Some(raw.to_vec()))
            }
        }
    }

    /// The `--strict` failure for a row whose id field is empty.
    pub fn missing_id(&self, line: u64) -> Error {
        let name = self.id.map_or("", |c| self.header.names[c].as_str());
        Error::Strict {
            line: Some(line),
            message: format!("missing id (column '{name}' is empty)"),
        }
    }

    /// Turns a record issue into an error with the record's line.
    pub fn issue(&self, issue: RowIssue, block: &Block, rec: &RecordRef<'_>) -> Error {
        self.issue_at(issue, line_of(block, rec.offset))
    }

    /// Turns a row issue into an error at `line` (the line of a text
    /// record, the 1-based row of a typed source).
    pub fn issue_at(&self, issue: RowIssue, line: u64) -> Error {
        let line = Some(line);
        let message = match issue {
            RowIssue::InvalidCode { column, value } => format!(
                "invalid code '{}' in column '{}'",
                shown(&value),
                self.dx_name(column)
            ),
            RowIssue::UnknownCode {
                column,
                value,
                edition,
            } => unknown_code_message(&shown(&value), self.dx_name(column), edition),
            RowIssue::UnreadableAge(v) => {
                format!("unreadable age '{}'", shown(&v))
            }
            RowIssue::MissingAge => {
                let name = self.age.map_or("", |c| self.header.names[c].as_str());
                format!("missing age (column '{name}' is empty)")
            }
            RowIssue::UnreadableDate(v) => format!(
                "unreadable date '{}' (expected {})",
                shown(&v),
                cfg_date_hint()
            ),
            RowIssue::UnrecognisedPoa { column, value } => {
                let v = value.trim_ascii();
                format!(
                    "unrecognised present-on-admission value '{}' (not Y, N, U, W, 1, blank or one of --poa-values) in column '{}'",
                    shown(v),
                    self.header.names[column]
                )
            }
        };
        Error::Strict { line, message }
    }
}

/// The `--strict` message for an unknown code.
pub fn unknown_code_message(value: &str, column: &str, edition: Edition) -> String {
    format!(
        "unknown code '{value}' in column '{column}' (well-shaped, but neither it nor its category is in {}; --edition chooses the editions)",
        edition.describe()
    )
}

fn cfg_date_hint() -> &'static str {
    "the --date-format, by default YYYY-MM-DD"
}

/// Whether a primary-diagnosis flag field says "this is the primary".
/// Accepted (case-insensitive): `1`, `y`, `yes`, `true`, `p`, `primary`.
pub fn is_flag_set(raw: &[u8]) -> bool {
    let v = raw.trim_ascii();
    ["1", "y", "yes", "true", "p", "primary"]
        .iter()
        .any(|f| f.as_bytes().eq_ignore_ascii_case(v))
}

/// [`is_flag_set`] for a value of any row: text as it is; a typed value
/// as `is_flag_set` reads its text (`1`, `true`), without making it.
pub(crate) fn is_field_flag_set(f: Field<'_>) -> bool {
    match f {
        Field::Text(t) => is_flag_set(t),
        Field::Integer(i) => i == 1,
        Field::Number(x) => x == 1.0,
        Field::Logical(b) => b,
        Field::Null | Field::Date(_) => false,
    }
}

/// Keeps the first readable value of a long-layout unit (its date or age)
/// in `slot`; returns `(first, new)` when `new` is readable and differs
/// from it (the row disagrees with the unit).
pub(crate) fn keep_first<T: Copy + PartialEq>(
    slot: &mut Option<T>,
    new: Option<T>,
) -> Option<(T, T)> {
    match (*slot, new) {
        (None, v) => {
            *slot = v;
            None
        }
        (Some(first), Some(v)) if v != first => Some((first, v)),
        _ => None,
    }
}

/// The warning for a row of a unit that gives another `what` (date, age)
/// than the unit's first.
pub(crate) fn disagreement(
    what: &str,
    new: impl std::fmt::Display,
    first: impl std::fmt::Display,
) -> String {
    format!("a row of a unit gives another {what} {new} (the unit's first {what} is {first})")
}

impl Summary {
    /// Counts a unit whose rows disagree, once (`counted` is the unit's flag).
    pub(crate) fn count_disagreeing(&mut self, counted: &mut bool) {
        if !std::mem::replace(counted, true) {
            self.disagreeing_units += 1;
        }
    }
}

/// Ends an output row whose pass-through part (the input's own fields, or
/// none when `passthrough` is false) is `out[start..]`: as text, its values
/// after it and the line end; as value records, the part's length in front
/// of it and the values in binary after it.
#[inline]
pub(crate) fn end_row(
    engine: &Engine,
    form: OutputForm,
    (delimiter, eol): (u8, &[u8]),
    values: &[Value],
    passthrough: bool,
    out: &mut Vec<u8>,
    start: usize,
) {
    match form {
        OutputForm::Text => {
            let at = out.len();
            engine.write_values(values, delimiter, out);
            if !passthrough && out.len() > at {
                // No column before the first score.
                out.remove(at);
            }
            out.extend_from_slice(eol);
        }
        OutputForm::ValueRecords => {
            let mut len = Vec::with_capacity(4);
            crate::io::value_records::put_varint(&mut len, (out.len() - start) as u64);
            out.splice(start..start, len);
            crate::io::value_records::put_values(out, values);
        }
    }
}

/// Ends the output's header line, `out[start..]` (its names, delimited): as
/// text, the line end; as value records, the stream's opening and the
/// names' length in front of them (the opening saying whether the rows'
/// pass-through parts are text or, `keys` typed, keys).
pub(crate) fn end_header(
    form: OutputForm,
    eol: &[u8],
    out: &mut Vec<u8>,
    start: usize,
    keys: crate::rows::Keys,
) {
    match form {
        OutputForm::Text => out.extend_from_slice(eol),
        OutputForm::ValueRecords => {
            let mut head = Vec::with_capacity(crate::io::value_records::MAGIC.len() + 4);
            match keys {
                crate::rows::Keys::Text => crate::io::value_records::start(&mut head),
                crate::rows::Keys::Typed => crate::io::value_records::start_keys(&mut head),
            }
            crate::io::value_records::put_varint(&mut head, (out.len() - start) as u64);
            out.splice(start..start, head);
        }
    }
}

pub(crate) fn check_collisions(names: &[&str], engine: &Engine) -> Result<(), Error> {
    for c in engine.columns() {
        if names.contains(&c.name.as_str()) {
            return Err(Error::Usage(format!(
                "output column '{}' already exists in the input; rename that input column",
                c.name
            )));
        }
    }
    Ok(())
}

/// Scores an extract read from `input`, writing the enriched extract to
/// `output`: streaming when no lookback is asked for, from the patient
/// history otherwise.
pub fn score_stream<'a>(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Into<history::Input<'a>>,
    output: &mut dyn Write,
) -> Result<Summary, Error> {
    score_stream_observed(engine, cfg, input, output, &mut |_| {})
}

/// [`score_stream`], calling `progress` as blocks are written.
///
/// Typed rows ([`history::Input::Rows`]) are read by runs with a history
/// ([`reads_history`]); in the wide layout their output holds the score
/// columns only (there is no row text to copy: the caller puts the input's
/// columns in front, as a Parquet output of a Parquet input does).
pub fn score_stream_observed<'a>(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Into<history::Input<'a>>,
    output: &mut dyn Write,
    progress: &mut dyn FnMut(Progress),
) -> Result<Summary, Error> {
    if reads_history(cfg) {
        return history::score_history(engine, cfg, input, output);
    }
    match input.into() {
        history::Input::Text(input) => stream::score_plain(engine, cfg, input, output, progress),
        history::Input::Rows(_) => Err(Error::Usage(
            "typed rows are read by runs with a history only (--lookback, --episode, --keep)"
                .into(),
        )),
    }
}

/// Whether `score` reads the extract into a history (lookback, episodes,
/// kept columns) rather than streaming it.
pub fn reads_history(cfg: &ScoreConfig) -> bool {
    cfg.uses_history() || cfg.episode.is_some() || !cfg.keep.is_empty()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::RecordScanner;

    #[test]
    fn a_typed_flag_reads_as_its_text_would() {
        let fields = [
            Field::Null,
            Field::Integer(1),
            Field::Integer(0),
            Field::Integer(-1),
            Field::Integer(11),
            Field::Number(1.0),
            Field::Number(1.5),
            Field::Number(0.0),
            Field::Number(f64::NAN),
            Field::Number(1.0 + f64::EPSILON),
            Field::Logical(true),
            Field::Logical(false),
            Field::Date(1),
            Field::Date(0),
        ];
        for f in fields {
            assert_eq!(
                is_field_flag_set(f),
                is_flag_set(&f.text_or_empty()),
                "{f:?}"
            );
        }
    }

    #[test]
    fn the_line_cursor_agrees_with_counting_from_the_start() {
        let data = b"h,x\n1,a\r\n\n2,\"b\nc\"\r3,d\r\r\n4,e\n\r5,f".to_vec();
        let block = Block {
            data,
            first_line: 7,
            last: true,
            index: 0,
        };
        let mut cursor = LineCursor::new(&block);
        let mut scanner = RecordScanner::new(b',');
        let mut lines = Vec::new();
        scanner
            .scan::<()>(&block.data, true, |rec| {
                let l = cursor.line_at(&block, rec.offset);
                assert_eq!(l, line_of(&block, rec.offset));
                lines.push(l);
                Ok(())
            })
            .unwrap();
        // h (7), 1 (8), blank (9), 2 spans 10-11, 3 (12), CR CRLF (13), 4
        // (14), a CR alone after LF (15), 5 (16).
        assert_eq!(lines, [7, 8, 10, 12, 14, 16]);
    }
}

#[cfg(test)]
mod summary_tests {
    use super::{Edition, Summary};
    use crate::code::{read_code, Code, Reading};

    fn code(s: &str) -> Code {
        match read_code(s.as_bytes()) {
            Reading::Valid(c) => c,
            r => panic!("{s}: {r:?}"),
        }
    }

    #[test]
    fn merge_adds_every_count() {
        let one = Summary {
            rows_read: 1,
            rows_written: 2,
            codes_read: 3,
            invalid_codes: 4,
            missing_ages: 5,
            unreadable_ages: 6,
            units: 7,
            missing_dates: 8,
            unreadable_dates: 9,
            excluded_primary: 10,
            excluded_not_on_admission: 11,
            missing_ids: 12,
            disagreeing_units: 13,
            spilled_records: 19,
            spilled_bytes: 20,
            over_memory: Some(super::OverMemory {
                bytes: 21,
                episodes: 22,
                id: b"UNKNOWN".to_vec(),
                id_episodes: 20,
            }),
            invalid_values: [(b"N/A".to_vec(), 4)].into_iter().collect(),
            unknown_codes: 14,
            unknown_values: [(code("I5O9"), 14)].into_iter().collect(),
            extended_codes: 15,
            extended_values: [(code("I2140"), 15)].into_iter().collect(),
            edition: Edition::Who,
            dx_columns: vec!["dx1".into()],
            unreadable_date_examples: vec![b"05/01/2021".to_vec()],
            dates_read: 14,
            dates_either_order: 15,
            dates_order_proven: 16,
            date_format: Some("%d/%m/%Y".into()),
            poa_indicators: [(b"Y".to_vec(), 17), (Vec::new(), 18)]
                .into_iter()
                .collect(),
            unrecognised_poa: 19,
        };
        let mut total = one.clone();
        total.merge(one.clone());
        let mut doubled = one.clone();
        doubled.rows_read *= 2;
        doubled.rows_written *= 2;
        doubled.codes_read *= 2;
        doubled.invalid_codes *= 2;
        doubled.missing_ages *= 2;
        doubled.unreadable_ages *= 2;
        doubled.units *= 2;
        doubled.missing_dates *= 2;
        doubled.unreadable_dates *= 2;
        doubled.excluded_primary *= 2;
        doubled.excluded_not_on_admission *= 2;
        doubled.missing_ids *= 2;
        doubled.disagreeing_units *= 2;
        doubled.spilled_records *= 2;
        doubled.spilled_bytes *= 2;
        doubled.invalid_values.insert(b"N/A".to_vec(), 8);
        doubled.unknown_codes *= 2;
        doubled.extended_codes *= 2;
        doubled.unknown_values.insert(code("I5O9"), 28);
        doubled.extended_values.insert(code("I2140"), 30);
        doubled.dates_read *= 2;
        doubled.dates_either_order *= 2;
        doubled.dates_order_proven *= 2;
        doubled.unrecognised_poa *= 2;
        doubled.poa_indicators.insert(b"Y".to_vec(), 34);
        doubled.poa_indicators.insert(Vec::new(), 36);
        assert_eq!(total, doubled);
        // The edition comes from the part that first met a code not known.
        let mut from_later = Summary::default();
        from_later.merge(one.clone());
        assert_eq!(from_later.edition, Edition::Who);
    }
}
