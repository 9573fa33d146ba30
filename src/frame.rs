//! `score`, `explain` and `compare` over the typed columns of a data
//! frame, for the language bindings (the R package, the Python package).
//!
//! A binding describes its frame through [`Columns`]: for every column its
//! [`Kind`] and, row by row, its [`Field`]s (text read in place, numbers,
//! dates as days). [`score`] and [`explain`] resolve the run's columns
//! against the frame's names with the command line's checks and messages,
//! then:
//!
//! - without a history (`--lookback`, `--episode`, `--keep`), score the
//!   rows with the plain scorer over typed rows
//!   ([`crate::pipeline::plain`], the one behind a Parquet input's plain
//!   run), on several threads for a large wide frame;
//! - with one, hand the frame's rows to the library's own history reader
//!   ([`History`], the one behind `morbus score --lookback` and `morbus
//!   explain`).
//!
//! Either way the frame's rows go, typed as they are, through the row
//! model of [`crate::rows`] ([`FramePart`] batches): no text is made of the
//! frame. Codes, present-on-admission indicators, primary flags, dates and
//! ages are read by the same functions as a text record's fields; messages
//! name the frame's rows and columns. `explain`'s records come back typed
//! from the history's codes; [`compare`] hands the rows to
//! [`crate::compare::compare`], which reads the outcome and adjustment
//! columns typed in the same pass.
//!
//! Results come back typed, one vector per output column ([`Scored`],
//! [`Explained`]). Rows in messages are numbered from `first_row` (0 for
//! Python, 1 for R).
//!
//! ```
//! use morbus::frame::{self, Columns, Field, Kind, ScoreColumn};
//! use morbus::lists::Catalogue;
//! use morbus::pipeline::{Header, ScoreConfig};
//! use morbus::score::{Engine, IndexSpec, ScoreOptions};
//!
//! struct Codes(Vec<&'static str>);
//! impl Columns for Codes {
//!     fn rows(&self) -> usize { self.0.len() }
//!     fn kind(&self, _col: usize) -> Kind { Kind::Text }
//!     fn field(&self, _col: usize, row: usize) -> Field<'_> { Field::Text(self.0[row].as_bytes()) }
//! }
//!
//! let specs = IndexSpec::parse_many("charlson:charlson1987").unwrap();
//! let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
//! let cfg = ScoreConfig { dx: vec!["dx1".into()], ..ScoreConfig::default() };
//! let header = Header { names: vec!["dx1".into()] };
//! let scored = frame::score(&engine, &cfg, &header, &Codes(vec!["C78.0", "I21.9"]), 1).unwrap();
//! assert_eq!(scored.columns[0], ScoreColumn::Int(vec![Some(6), Some(1)]));
//! ```

use crate::compare::{CompareOptions, Comparison};
use crate::lists::{SCALE, SCALE_DECIMALS};
use crate::pipeline::explain::explain_history;
use crate::pipeline::history::{History, Input, Needs, Windows};
use crate::pipeline::plain;
use crate::pipeline::{DateFormat, Header, Layout, ScoreConfig, Summary};
use crate::rows::{Batch, RowNaming, RowSource};
use crate::score::{ColumnKind, Engine, Value};
use crate::Error;

pub use crate::rows::{Field, Kind};

/// A data frame as the scorer reads it. Columns are numbered as in the
/// [`Header`] given with it; rows from 0.
pub trait Columns: Sync {
    /// Number of rows.
    fn rows(&self) -> usize;
    /// What column `col` holds.
    fn kind(&self, col: usize) -> Kind;
    /// The value of column `col` at `row`. Only the columns a run uses are
    /// read.
    fn field(&self, col: usize, row: usize) -> Field<'_>;
    /// The column's type as the binding's users know it, for messages.
    fn type_name(&self, col: usize) -> String {
        format!("{:?}", self.kind(col)).to_lowercase()
    }
}

/// One output column, with a value (or `None`: missing) per output row.
#[derive(Clone, Debug, PartialEq)]
pub enum ScoreColumn {
    /// A score without decimals.
    Int(Vec<Option<i64>>),
    /// A score with decimals (the frailty score).
    Float(Vec<Option<f64>>),
    /// A band: an index into `names`.
    Band {
        names: Vec<String>,
        values: Vec<Option<u16>>,
    },
    /// A condition flag, 0 or 1.
    Flag(Vec<Option<i8>>),
}

/// The result of [`score`].
#[derive(Debug)]
pub struct Scored {
    /// One column per [`Engine::columns`], named as there.
    pub columns: Vec<ScoreColumn>,
    /// Long layout: for each output row, the 0-based frame row where its
    /// unit first appears (to take the id and episode values from).
    pub first_rows: Option<Vec<u64>>,
    /// Long layout with `keep`: per kept column, for each output row, the
    /// 0-based frame row whose value the unit carries (its first row with a
    /// non-empty value; `None`: no row has one), to take the value, typed,
    /// from the frame. Units whose rows disagree are counted in the
    /// summary, as on the command line.
    pub kept_rows: Vec<Vec<Option<u64>>>,
    pub summary: Summary,
}

/// The rows of `morbus explain`, typed, after the id and episode columns
/// (take those from the frame at `row`).
#[derive(Debug, Default)]
pub struct Explained {
    /// 1-based data row of the episode (its first record in the long
    /// layout), as the command line numbers it.
    pub row: Vec<i64>,
    pub index: Vec<String>,
    pub source_row: Vec<Option<i64>>,
    /// Days since 1970-01-01.
    pub source_date: Vec<Option<i64>>,
    pub code_as_written: Vec<Option<String>>,
    pub code: Vec<Option<String>>,
    pub condition: Vec<Option<String>>,
    pub weight: Vec<f64>,
    /// The age points of a `total_with_age` row (empty elsewhere).
    pub age_points: Vec<Option<f64>>,
    /// Whether every weight is a whole number (no index with decimals).
    pub whole_weights: bool,
    pub status: Vec<String>,
    /// With `label`: for each record, the 0-based frame row of the label
    /// value of its episode (the episode's row; long layout: its first row
    /// with a non-empty value; `None`: none has one).
    pub label_rows: Vec<Option<u64>>,
}

/// The options of a `score` or `explain` call as a binding receives them
/// (the command line's options, as text and switches), resolved into an
/// [`Engine`] and a [`ScoreConfig`] by [`Request::resolve`] with the command
/// line's checks and messages.
#[derive(Clone, Debug, Default)]
pub struct Request {
    /// Diagnosis columns: names and/or globs (each may hold several,
    /// comma-separated).
    pub dx: Vec<String>,
    pub dx_sep: Option<String>,
    /// `wide` (default when empty) or `long`.
    pub layout: String,
    pub id: Option<String>,
    pub episode: Option<String>,
    pub date: Option<String>,
    pub date_format: Option<String>,
    /// Days, or `all`, or `LIST=DAYS` pairs (`charlson=365,hfrs=730`; a bare
    /// number beside them is the window of the lists not named), as
    /// `--lookback` takes them.
    pub lookback: Option<String>,
    /// `current-and-earlier` (default when `None`) or `earlier-only`, as
    /// `--window`.
    pub window: Option<String>,
    pub exclude_primary: bool,
    pub primary: Option<String>,
    pub poa: Option<String>,
    /// Present-on-admission values that count (each may hold several,
    /// comma-separated; `blank` for an empty field); empty: the default,
    /// [`crate::pipeline::DEFAULT_POA_VALUES`].
    pub poa_values: Vec<String>,
    /// Percent of non-empty dates that may be unreadable (default 1).
    pub max_unreadable_dates: Option<String>,
    /// Index specifications (each may hold several, comma-separated);
    /// empty: the default indices.
    pub index: Vec<String>,
    pub age: Option<String>,
    pub flags: bool,
    pub no_hierarchy: bool,
    pub strict: bool,
    pub threads: usize,
    /// `who`, `cm` or `any` (default when `None`), as `--edition`.
    pub edition: Option<String>,
    /// Long layout of `score`: columns carried into each output row (the
    /// unit's first non-empty value), as `--keep`; see [`Scored::kept_rows`].
    pub keep: Vec<String>,
    /// `explain`: the column naming each episode, as `explain --label`; see
    /// [`Explained::label_rows`].
    pub label: Option<String>,
}

impl Request {
    /// The engine and options of the run, over `catalogue`.
    pub fn resolve(
        &self,
        catalogue: &crate::lists::Catalogue,
    ) -> Result<(Engine, ScoreConfig), Error> {
        use crate::score::{IndexSpec, DEFAULT_INDICES};
        let specs = if self.index.iter().all(|s| s.trim().is_empty()) {
            IndexSpec::parse_many(DEFAULT_INDICES)?
        } else {
            IndexSpec::parse_many(&self.index.join(","))?
        };
        let engine = self.engine(catalogue, &specs)?;
        Ok((engine, self.config()?))
    }

    /// The engine of the run for index specifications chosen by the caller
    /// (`compare` takes every list when none is given).
    pub fn engine(
        &self,
        catalogue: &crate::lists::Catalogue,
        specs: &[crate::score::IndexSpec],
    ) -> Result<Engine, Error> {
        let options = crate::score::ScoreOptions {
            hierarchy: !self.no_hierarchy,
            flags: self.flags,
            age: self.age.is_some(),
        };
        Ok(Engine::new(catalogue, specs, options)?)
    }

    /// The run's options, with the command line's checks and messages.
    pub fn config(&self) -> Result<ScoreConfig, Error> {
        let layout = match self.layout.as_str() {
            "" | "wide" => Layout::Wide,
            "long" => Layout::Long,
            other => {
                return Err(Error::Usage(format!(
                    "--layout is 'wide' or 'long', not '{other}'"
                )))
            }
        };
        if layout == Layout::Long && self.id.is_none() {
            return Err(Error::Usage("--layout long needs --id COL".into()));
        }
        let (lookback, lookback_lists) = match self.lookback.as_deref() {
            None => (None, Vec::new()),
            Some(t) => crate::pipeline::parse_lookback(t, "--lookback")?,
        };
        let window = match self.window.as_deref() {
            None => crate::pipeline::WindowScope::default(),
            Some(w) => crate::pipeline::WindowScope::parse(w).ok_or_else(|| {
                Error::Usage(format!(
                    "--window takes 'current-and-earlier' or 'earlier-only', not '{w}'"
                ))
            })?,
        };
        if self.window.is_some() && self.lookback.is_none() {
            return Err(Error::Usage(
                "--window is used with --lookback DAYS (or 'all')".into(),
            ));
        }
        let edition = match self.edition.as_deref() {
            None => crate::pipeline::Edition::default(),
            Some(t) => crate::pipeline::Edition::parse(t).ok_or_else(|| {
                Error::Usage(format!("--edition is 'who', 'cm' or 'any', not '{t}'"))
            })?,
        };
        if !self.keep.is_empty() && layout == Layout::Wide {
            return Err(Error::Usage(
                "--keep is for the long layout; a wide output keeps every input column already"
                    .into(),
            ));
        }
        if !self.keep.is_empty() && self.label.is_some() {
            return Err(Error::Usage(
                "--keep is for score and --label for explain; give one of them".into(),
            ));
        }
        let keep: Vec<String> = match &self.label {
            Some(l) => vec![l.clone()],
            None => self
                .keep
                .iter()
                .flat_map(|k| k.split(','))
                .map(str::trim)
                .filter(|k| !k.is_empty())
                .map(String::from)
                .collect(),
        };
        let date_format = match self.date_format.as_deref() {
            None => DateFormat::Iso,
            Some(p) => DateFormat::from_pattern_checked(p)
                .map_err(|why| Error::Usage(format!("--date-format '{p}' {why}")))?,
        };
        if self.date.is_some() && self.lookback.is_none() && self.episode.is_none() {
            return Err(Error::Usage(
                "--date is used with --lookback DAYS (or 'all')".into(),
            ));
        }
        let dx_sep = match self.dx_sep.as_deref() {
            None => None,
            Some("tab") | Some("\\t") => Some(b'\t'),
            Some(t) => {
                let b = t.as_bytes();
                if b.len() == 1 && b[0].is_ascii() && !b"\"\n\r".contains(&b[0]) {
                    Some(b[0])
                } else {
                    return Err(Error::Usage(format!(
                        "--dx-sep must be one ASCII character (or 'tab'), not '{t}'"
                    )));
                }
            }
        };
        let mut poa_values = crate::pipeline::poa_values_from(&self.poa_values);
        if poa_values.is_empty() {
            poa_values = crate::pipeline::DEFAULT_POA_VALUES
                .iter()
                .map(|v| v.to_string())
                .collect();
        }
        let cfg = ScoreConfig {
            dx: self.dx.clone(),
            dx_sep,
            layout,
            id: self.id.clone(),
            episode: self.episode.clone(),
            date: self.date.clone(),
            date_format,
            lookback,
            lookback_lists,
            window,
            exclude_primary: self.exclude_primary,
            primary: self.primary.clone(),
            poa: self.poa.clone(),
            poa_values,
            max_unreadable_dates: match self.max_unreadable_dates.as_deref() {
                None => crate::pipeline::DEFAULT_MAX_UNREADABLE_DATES,
                Some(t) => crate::pipeline::percent_from(t)
                    .map_err(|why| Error::Usage(format!("--max-unreadable-dates {why}")))?,
            },
            age: self.age.clone(),
            strict: self.strict,
            threads: self.threads,
            edition,
            keep,
            ..ScoreConfig::default()
        };
        Ok(cfg)
    }
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum Role {
    Dx,
    Age,
    Id,
    Date,
    Flag,
    /// Carried into the output (`keep`, `label`): any kind.
    Keep,
}

/// A used column: frame position, role, name for messages, text name.
struct Used {
    col: usize,
    role: Role,
    what: &'static str,
    name: String,
}

/// Whether column `col` holds no value at all (nulls, and NaN: a missing
/// number, as pandas writes an empty column of numbers).
fn all_null(cols: &impl Columns, col: usize) -> bool {
    (0..cols.rows()).all(|r| match cols.field(col, r) {
        Field::Null => true,
        Field::Number(x) => x.is_nan(),
        _ => false,
    })
}

/// Refuses a column whose kind does not fit its role.
fn check_kind(cols: &impl Columns, u: &Used, format: &DateFormat) -> Result<(), Error> {
    let kind = cols.kind(u.col);
    let ok = match u.role {
        Role::Dx => kind == Kind::Text,
        Role::Age => matches!(kind, Kind::Text | Kind::Integer | Kind::Number),
        Role::Id => matches!(kind, Kind::Text | Kind::Integer | Kind::Number),
        // Whole numbers with a packed pattern (20240301 with %Y%m%d).
        Role::Date => {
            matches!(kind, Kind::Text | Kind::Date)
                || (matches!(kind, Kind::Integer | Kind::Number) && format.reads_numbers())
        }
        Role::Flag => matches!(
            kind,
            Kind::Text | Kind::Integer | Kind::Number | Kind::Logical
        ),
        Role::Keep => kind != Kind::Other,
    };
    if ok {
        if u.role == Role::Date && kind == Kind::Date && *format != DateFormat::Iso {
            return Err(Error::Usage(format!(
                "--date-format is for dates written as text; column '{}' holds dates \
                 (leave the date format out)",
                u.name
            )));
        }
        return Ok(());
    }
    // A column with no value at all reads as empty whatever its type.
    if all_null(cols, u.col) {
        return Ok(());
    }
    let t = cols.type_name(u.col);
    Err(Error::Usage(match u.role {
        Role::Dx => format!(
            "diagnosis column '{}' holds {t} values, not text; ICD-10 codes are text \
             (convert the column to text first if its values really are codes)",
            u.name
        ),
        Role::Age => format!(
            "age column '{}' holds {t} values; ages must be numbers or text",
            u.name
        ),
        Role::Id => format!(
            "{} column '{}' holds {t} values; it must hold text or whole numbers",
            u.what, u.name
        ),
        Role::Date => format!(
            "date column '{}' holds {t} values; dates must be text, dates or date-times \
             (or whole numbers such as 20240301 with a --date-format of %Y, %m and %d \
             alone, such as %Y%m%d)",
            u.name
        ),
        Role::Flag => format!(
            "{} column '{}' holds {t} values; it must hold text, numbers or true/false",
            u.what, u.name
        ),
        Role::Keep => format!(
            "{} column '{}' holds {t} values; it must hold text, numbers, true/false or dates",
            u.what, u.name
        ),
    }))
}

/// Resolves the used columns against the frame, with the command line's
/// checks and messages.
fn resolve(cfg: &ScoreConfig, header: &Header) -> Result<Vec<Used>, Error> {
    let dx = header.columns(&cfg.dx, "diagnosis")?;
    let mut used: Vec<Used> = dx
        .iter()
        .map(|&c| Used {
            col: c,
            role: Role::Dx,
            what: "diagnosis",
            name: header.names[c].clone(),
        })
        .collect();
    for (name, role, what) in [
        (&cfg.age, Role::Age, "age"),
        (&cfg.id, Role::Id, "id"),
        (&cfg.episode, Role::Id, "episode"),
        (&cfg.date, Role::Date, "date"),
        (&cfg.primary, Role::Flag, "primary-diagnosis"),
    ] {
        if let Some(n) = name {
            let c = header.column(n, what)?;
            used.push(Used {
                col: c,
                role,
                what,
                name: n.clone(),
            });
        }
    }
    // Present on admission: one column (long layout) or one per diagnosis
    // column, paired in order (wide).
    if let Some(p) = &cfg.poa {
        let cols = crate::pipeline::poa_columns(header, &dx, p, cfg.layout, ("--poa", "--dx"))?;
        for c in cols {
            used.push(Used {
                col: c,
                role: Role::Flag,
                what: "present-on-admission",
                name: header.names[c].clone(),
            });
        }
    }
    for n in &cfg.keep {
        let c = header.column(n, "kept")?;
        used.push(Used {
            col: c,
            role: Role::Keep,
            what: "kept",
            name: n.clone(),
        });
    }
    Ok(used)
}

/// The frame columns a run reads (each once, in frame order), resolved
/// with the command line's checks and messages: a binding fetches these
/// and no others.
pub fn used_columns(cfg: &ScoreConfig, header: &Header) -> Result<Vec<usize>, Error> {
    let mut cols: Vec<usize> = resolve(cfg, header)?.iter().map(|u| u.col).collect();
    cols.sort_unstable();
    cols.dedup();
    Ok(cols)
}

/// The columns `compare` reads besides the run's (outcome, adjustments,
/// splines, `--by`, `--cluster`), resolved with the command line's
/// messages.
fn compare_used(opts: &CompareOptions, header: &Header) -> Result<Vec<Used>, Error> {
    let mut names: Vec<(&str, &'static str)> = vec![(&opts.outcome, "outcome")];
    for n in opts
        .adjust
        .iter()
        .chain(&opts.adjust_categorical)
        .chain(opts.splines.iter().map(|(c, _)| c))
        .chain(&opts.by)
        .chain(&opts.cluster)
    {
        names.push((n, "adjustment"));
    }
    names
        .into_iter()
        .map(|(n, what)| {
            Ok(Used {
                col: header.column(n, what)?,
                role: Role::Keep,
                what,
                name: n.to_string(),
            })
        })
        .collect()
}

/// The frame columns `compare` reads (each once, in frame order): those of
/// [`used_columns`] and the outcome, adjustment, `--by` and `--cluster`
/// columns. A binding fetches these and no others.
pub fn compare_columns(
    cfg: &ScoreConfig,
    opts: &CompareOptions,
    header: &Header,
) -> Result<Vec<usize>, Error> {
    let mut cols = used_columns(cfg, header)?;
    cols.extend(compare_used(opts, header)?.iter().map(|u| u.col));
    cols.sort_unstable();
    cols.dedup();
    Ok(cols)
}

/// `morbus compare` over a frame: the frame's rows go, typed, to the same
/// [`crate::compare::compare`] as the command line's input (no text is
/// made of them); the outcome and adjustment values are read typed with
/// the text's rules, and messages name the frame's rows from `first_row`.
///
/// ```
/// use morbus::compare::CompareOptions;
/// use morbus::frame::{self, Columns, Field, Kind};
/// use morbus::lists::Catalogue;
/// use morbus::pipeline::{Header, ScoreConfig};
/// use morbus::score::{Engine, IndexSpec, ScoreOptions};
///
/// // A diagnosis column (text) and a true/false outcome.
/// struct Frame(Vec<(&'static str, bool)>);
/// impl Columns for Frame {
///     fn rows(&self) -> usize { self.0.len() }
///     fn kind(&self, col: usize) -> Kind { [Kind::Text, Kind::Logical][col] }
///     fn field(&self, col: usize, row: usize) -> Field<'_> {
///         let (dx, died) = self.0[row];
///         if col == 0 { Field::Text(dx.as_bytes()) } else { Field::Logical(died) }
///     }
/// }
///
/// let specs = IndexSpec::parse_many("charlson:count").unwrap();
/// let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
/// let cfg = ScoreConfig { dx: vec!["dx1".into()], ..ScoreConfig::default() };
/// let opts = CompareOptions { outcome: "died".into(), ..CompareOptions::default() };
/// let header = Header { names: vec!["dx1".into(), "died".into()] };
/// let rows = Frame(vec![("I21.9", true), ("", false), ("C78.0", true), ("J18.9", false)]);
/// let (c, _) = frame::compare(&engine, &cfg, &opts, &header, &rows, 0).unwrap();
/// assert_eq!((c.units.analysed, c.units.events), (4, 2));
/// // Both units with the outcome score 1, neither without it: c = 1.
/// assert_eq!(c.indices[0].c_statistic.as_ref().unwrap().estimate, 1.0);
/// ```
pub fn compare(
    engine: &Engine,
    cfg: &ScoreConfig,
    opts: &CompareOptions,
    header: &Header,
    cols: &impl Columns,
    first_row: u64,
) -> Result<(Comparison, Summary), Error> {
    let mut used = resolve(cfg, header)?;
    used.extend(compare_used(opts, header)?);
    for u in &used {
        check_kind(cols, u, &cfg.date_format)?;
    }
    let rows = FrameRows {
        cols,
        names: &header.names,
        next: 0,
        first_row,
    };
    crate::compare::compare(engine, cfg, opts, Input::Rows(Box::new(rows)))
}

/// Scores a frame: every row (wide) or every unit (long) of it.
pub fn score(
    engine: &Engine,
    cfg: &ScoreConfig,
    header: &Header,
    cols: &impl Columns,
    first_row: u64,
) -> Result<Scored, Error> {
    let used = resolve(cfg, header)?;
    for u in &used {
        check_kind(cols, u, &cfg.date_format)?;
    }
    if crate::pipeline::reads_history(cfg) {
        return score_history(engine, cfg, header, cols, &used, first_row);
    }
    let plan = &plain::plan(
        engine,
        cfg,
        Header {
            names: header.names.clone(),
        },
    )?;
    let naming = RowNaming {
        first: first_row,
        of: None,
    };
    let n = cols.rows();
    let part = |start: usize, len: usize| FramePart { cols, start, len };
    match cfg.layout {
        Layout::Wide => {
            let threads = thread_count(cfg.threads);
            let parts = if threads > 1 && n >= PARALLEL_ROWS {
                threads
            } else {
                1
            };
            let per = n.div_ceil(parts).max(1);
            let results: Vec<(Output, Summary, Option<Error>)> = std::thread::scope(|s| {
                let handles: Vec<_> = (0..n.div_ceil(per).max(1))
                    .map(|p| {
                        let start = p * per;
                        let len = per.min(n - start.min(n));
                        s.spawn(move || {
                            let mut values = Vec::new();
                            let (summary, err) = plain::score_wide(
                                engine,
                                cfg,
                                plan,
                                &part(start, len),
                                start as u64 + 1,
                                &mut values,
                            );
                            let mut out = Output::new(engine, len);
                            let width = engine.columns().len().max(1);
                            for v in values.chunks(width) {
                                out.push(v);
                            }
                            (out, summary, err)
                        })
                    })
                    .collect();
                handles
                    .into_iter()
                    .map(|h| h.join().expect("a scoring thread panicked"))
                    .collect()
            });
            let mut out = Output::new(engine, n);
            let mut summary = plan.summary();
            for (o, s, err) in results {
                if let Some(e) = err {
                    return Err(naming.name(e));
                }
                out.append(o);
                summary.merge(s);
            }
            Ok(Scored {
                columns: out.finish(engine),
                first_rows: None,
                kept_rows: Vec::new(),
                summary,
            })
        }
        Layout::Long => {
            let mut scorer = plain::LongScorer::new(engine, plan);
            scorer
                .add(cfg, plan, &part(0, n), 1)
                .map_err(|e| naming.name(e))?;
            let mut out = Output::new(engine, 0);
            let mut firsts = Vec::new();
            let summary = scorer.finish(|row, v| {
                firsts.push(row - 1);
                out.push(v);
                Ok(())
            })?;
            Ok(Scored {
                columns: out.finish(engine),
                first_rows: Some(firsts),
                kept_rows: Vec::new(),
                summary,
            })
        }
    }
}

/// Frames of at least this many rows are scored on several threads.
const PARALLEL_ROWS: usize = 50_000;

fn thread_count(asked: usize) -> usize {
    match asked {
        0 => std::thread::available_parallelism().map_or(1, |n| n.get()),
        n => n.min(256),
    }
}

/// Output columns being filled.
struct Output {
    cols: Vec<ScoreColumn>,
    bands: Vec<Option<usize>>,
}

impl Output {
    fn new(engine: &Engine, rows: usize) -> Output {
        let mut bands = Vec::new();
        let cols = engine
            .columns()
            .iter()
            .map(|c| {
                bands.push(None);
                match c.kind {
                    ColumnKind::Score { spec } | ColumnKind::ScoreWithAge { spec } => {
                        if engine.decimals(spec) == 0 {
                            ScoreColumn::Int(Vec::with_capacity(rows))
                        } else {
                            ScoreColumn::Float(Vec::with_capacity(rows))
                        }
                    }
                    ColumnKind::Band { spec } => {
                        *bands.last_mut().expect("pushed") = Some(spec);
                        ScoreColumn::Band {
                            names: Vec::new(),
                            values: Vec::with_capacity(rows),
                        }
                    }
                    ColumnKind::Flag { .. } => ScoreColumn::Flag(Vec::with_capacity(rows)),
                }
            })
            .collect();
        Output { cols, bands }
    }

    #[inline]
    fn push(&mut self, values: &[Value]) {
        for (c, v) in self.cols.iter_mut().zip(values) {
            match (c, *v) {
                (ScoreColumn::Int(b), Value::Score { scaled, .. }) => b.push(Some(scaled / SCALE)),
                (ScoreColumn::Float(b), Value::Score { scaled, .. }) => {
                    b.push(Some(scaled as f64 / SCALE as f64))
                }
                (ScoreColumn::Int(b), _) => b.push(None),
                (ScoreColumn::Float(b), _) => b.push(None),
                (ScoreColumn::Band { values, .. }, Value::Band { band, .. }) => {
                    values.push(Some(band))
                }
                (ScoreColumn::Band { values, .. }, _) => values.push(None),
                (ScoreColumn::Flag(b), Value::Flag(f)) => b.push(Some(f as i8)),
                (ScoreColumn::Flag(b), _) => b.push(None),
            }
        }
    }

    fn append(&mut self, later: Output) {
        for (a, b) in self.cols.iter_mut().zip(later.cols) {
            match (a, b) {
                (ScoreColumn::Int(a), ScoreColumn::Int(b)) => a.extend(b),
                (ScoreColumn::Float(a), ScoreColumn::Float(b)) => a.extend(b),
                (ScoreColumn::Band { values: a, .. }, ScoreColumn::Band { values: b, .. }) => {
                    a.extend(b)
                }
                (ScoreColumn::Flag(a), ScoreColumn::Flag(b)) => a.extend(b),
                _ => unreachable!("outputs of one engine have the same columns"),
            }
        }
    }

    fn finish(mut self, engine: &Engine) -> Vec<ScoreColumn> {
        for (c, spec) in self.cols.iter_mut().zip(&self.bands) {
            if let (ScoreColumn::Band { names, .. }, Some(spec)) = (c, spec) {
                let s = &engine.specs()[*spec];
                let list = &engine.lists()[s.list].list;
                *names = list.weightings[s.weighting]
                    .bands
                    .iter()
                    .map(|b| b.name.clone())
                    .collect();
            }
        }
        self.cols
    }
}

/// The rows of a frame for the history reader, in batches.
struct FrameRows<'a, C: Columns> {
    cols: &'a C,
    names: &'a [String],
    next: usize,
    first_row: u64,
}

/// Rows of a frame per batch handed to the history reader.
const FRAME_BATCH: usize = 8192;

impl<'a, C: Columns> RowSource<'a> for FrameRows<'a, C> {
    fn header(&self) -> Header {
        Header {
            names: self.names.to_vec(),
        }
    }
    fn next_batch(&mut self) -> Result<Option<Box<dyn Batch + 'a>>, Error> {
        let n = self.cols.rows();
        if self.next >= n {
            return Ok(None);
        }
        let start = self.next;
        let len = FRAME_BATCH.min(n - start);
        self.next += len;
        Ok(Some(Box::new(FramePart {
            cols: self.cols,
            start,
            len,
        })))
    }
    fn naming(&self) -> RowNaming {
        RowNaming {
            first: self.first_row,
            of: None,
        }
    }
}

/// Rows `start..start + len` of a frame as a [`Batch`].
struct FramePart<'a, C: Columns> {
    cols: &'a C,
    start: usize,
    len: usize,
}

impl<C: Columns> Batch for FramePart<'_, C> {
    fn len(&self) -> usize {
        self.len
    }
    #[inline]
    fn field(&self, col: usize, row: usize) -> Field<'_> {
        self.cols.field(col, self.start + row)
    }
}

/// Refuses kept columns named twice or already in the output.
fn check_kept(used: &[Used], engine: &Engine, label: bool) -> Result<(), Error> {
    let mut out: Vec<&str> = used
        .iter()
        .filter(|u| u.role == Role::Id)
        .map(|u| u.name.as_str())
        .collect();
    for u in used.iter().filter(|u| u.role == Role::Keep) {
        if out.contains(&u.name.as_str()) {
            return Err(Error::Usage(if label {
                format!(
                    "--label column '{}' is already a column of explain's output",
                    u.name
                )
            } else {
                format!("column '{}' is already in the output; keep it once", u.name)
            }));
        }
        out.push(&u.name);
    }
    if label {
        Ok(())
    } else {
        crate::pipeline::check_collisions(&out, engine)
    }
}

/// Reads a frame's history: its rows go to the history reader as typed
/// rows, named in messages from `first_row`.
fn read_history(
    engine: &Engine,
    cfg: &ScoreConfig,
    header: &Header,
    cols: &impl Columns,
    first_row: u64,
    needs: Needs,
) -> Result<(History, Summary), Error> {
    let rows = FrameRows {
        cols,
        names: &header.names,
        next: 0,
        first_row,
    };
    History::read(engine, cfg, Input::Rows(Box::new(rows)), needs)
}

fn score_history(
    engine: &Engine,
    cfg: &ScoreConfig,
    header: &Header,
    cols: &impl Columns,
    used: &[Used],
    first_row: u64,
) -> Result<Scored, Error> {
    // The command line's checks of the options, and of output columns that
    // would collide with the columns kept.
    crate::pipeline::Plan::new(
        cfg,
        Header {
            names: header.names.clone(),
        },
        false,
    )?;
    match cfg.layout {
        Layout::Wide => {
            let names: Vec<&str> = header.names.iter().map(String::as_str).collect();
            crate::pipeline::check_collisions(&names, engine)?;
        }
        Layout::Long => check_kept(used, engine, false)?,
    }
    let run = || -> Result<Scored, Error> {
        let windows = Windows::new(engine, cfg)?;
        let (mut hist, mut summary) =
            read_history(engine, cfg, header, cols, first_row, Needs::default())?;
        hist.resolve(&windows, thread_count(cfg.threads));
        let hist = hist;
        let n = hist.episodes.len();
        let mut out = Output::new(engine, n);
        let mut first = Vec::with_capacity(n);
        let mut bits = vec![0u64; hist.words()];
        let mut scratch = bits.clone();
        let mut values: Vec<Value> = Vec::new();
        for (e, ep) in hist.episodes.iter().enumerate() {
            hist.final_into(engine, e, &mut bits, &mut scratch);
            engine.values(&bits, ep.age(), &mut values);
            out.push(&values);
            first.push(hist.row(e) - 1);
        }
        // Each unit's kept values: the frame rows the history took them
        // from (1-based data rows there), for the binding to take typed.
        let kept_rows = (0..cfg.keep.len())
            .map(|j| (0..n).map(|e| hist.kept_row(e, j).map(|r| r - 1)).collect())
            .collect();
        summary.rows_written += n as u64;
        summary.units += n as u64;
        if cfg.layout == Layout::Wide && n != cols.rows() {
            return Err(Error::data(
                None,
                format!("internal error: {n} rows scored for {} rows", cols.rows()),
            ));
        }
        Ok(Scored {
            columns: out.finish(engine),
            first_rows: (cfg.layout == Layout::Long).then_some(first),
            kept_rows,
            summary,
        })
    };
    run()
}

/// `morbus explain` over a frame: one row per (episode, matched code,
/// index, condition) and the totals, as the command line writes them.
pub fn explain(
    engine: &Engine,
    cfg: &ScoreConfig,
    header: &Header,
    cols: &impl Columns,
    first_row: u64,
) -> Result<(Explained, Summary), Error> {
    let used = resolve(cfg, header)?;
    for u in &used {
        check_kind(cols, u, &cfg.date_format)?;
    }
    crate::pipeline::Plan::new(
        cfg,
        Header {
            names: header.names.clone(),
        },
        false,
    )?;
    check_kept(&used, engine, true)?;
    let whole = (0..engine.specs().len()).all(|s| engine.decimals(s) == 0);
    let windows = Windows::new(engine, cfg)?;
    let needs = Needs {
        codes: true,
        rows: false,
        ..Needs::default()
    };
    let (mut hist, mut summary) = read_history(engine, cfg, header, cols, first_row, needs)?;
    let label = !cfg.keep.is_empty();
    let sorted = hist.resolve(&windows, thread_count(cfg.threads));
    let hist = hist;
    let mut ex = Explained {
        whole_weights: whole,
        ..Explained::default()
    };
    let number = |scaled: i64, decimals: u32| {
        // The value the command line writes: `decimals` places, the rest
        // cut (weights and totals have no more).
        let unit = 10i64.pow(SCALE_DECIMALS - decimals.min(SCALE_DECIMALS));
        (scaled / unit * unit) as f64 / SCALE as f64
    };
    explain_history(engine, &windows, &hist, &sorted, |r| {
        let spec = &engine.specs()[r.spec];
        let list = &engine.lists()[spec.list].list;
        ex.row.push(hist.row(r.episode) as i64);
        ex.index.push(format!(
            "{}:{}",
            list.name, list.weightings[spec.weighting].name
        ));
        ex.source_date.push(r.date(&hist).map(i64::from));
        match (r.source, r.condition) {
            (Some((src, rec)), Some(c)) => {
                ex.source_row.push(Some(hist.row(src) as i64));
                ex.code_as_written.push(Some(
                    String::from_utf8_lossy(&rec.written).trim().to_string(),
                ));
                ex.code.push(Some(rec.code.to_string()));
                ex.condition.push(Some(list.conditions[c].key.clone()));
            }
            _ => {
                ex.source_row.push(None);
                ex.code_as_written.push(None);
                ex.code.push(None);
                ex.condition.push(None);
            }
        }
        ex.weight.push(number(r.weight, r.decimals));
        ex.status.push(r.status);
        ex.age_points
            .push(r.age_points.map(|a| number(a, r.decimals)));
        if label {
            // The frame row the history took the episode's label from.
            ex.label_rows
                .push(hist.kept_row(r.episode, 0).map(|row| row - 1));
        }
        Ok(())
    })?;
    summary.units += hist.episodes.len() as u64;
    summary.rows_written = summary.units;
    Ok((ex, summary))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::Catalogue;
    use crate::score::{IndexSpec, ScoreOptions};

    /// A frame of text and typed columns.
    struct Frame {
        kinds: Vec<Kind>,
        rows: Vec<Vec<Field<'static>>>,
    }

    impl Columns for Frame {
        fn rows(&self) -> usize {
            self.rows.len()
        }
        fn kind(&self, col: usize) -> Kind {
            self.kinds[col]
        }
        fn field(&self, col: usize, row: usize) -> Field<'_> {
            self.rows[row][col]
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

    fn t(s: &'static str) -> Field<'static> {
        Field::Text(s.as_bytes())
    }

    /// The same frame as text through the command line's stream, and typed
    /// through [`score`], give the same numbers.
    fn stream(engine: &Engine, cfg: &ScoreConfig, csv: &str) -> String {
        let mut out = Vec::new();
        crate::pipeline::score_stream(engine, cfg, csv.as_bytes(), &mut out).unwrap();
        String::from_utf8(out).unwrap()
    }

    #[test]
    fn lookback_over_typed_dates_matches_the_text_stream() {
        // Patient 7: I21 (myocardial infarction, 1 point in Charlson 1987)
        // on day 0, I50 (heart failure, 1) on day 300; patient 8: one
        // episode. Hand-worked: with a 365-day window the second episode of
        // patient 7 counts both (2), the first one (1).
        let e = engine("charlson:charlson1987", false);
        let h = header(&["pid", "when", "dx1"]);
        let cfg = ScoreConfig {
            dx: vec!["dx1".into()],
            id: Some("pid".into()),
            date: Some("when".into()),
            lookback: Some(365),
            ..ScoreConfig::default()
        };
        let f = Frame {
            kinds: vec![Kind::Integer, Kind::Date, Kind::Text],
            rows: vec![
                vec![Field::Integer(7), Field::Date(19_000), t("I21.9")],
                vec![Field::Integer(8), Field::Date(19_100), t("")],
                vec![Field::Integer(7), Field::Date(19_300), t("I50")],
            ],
        };
        let s = score(&e, &cfg, &h, &f, 1).unwrap();
        assert_eq!(
            s.columns[0],
            ScoreColumn::Int(vec![Some(1), Some(0), Some(2)])
        );
        let text = "pid,when,dx1\n7,2022-01-08,I21.9\n8,2022-04-18,\n7,2022-11-04,I50\n";
        let csv = stream(&e, &cfg, text);
        let scores: Vec<&str> = csv
            .lines()
            .skip(1)
            .map(|l| l.rsplit(',').next().unwrap())
            .collect();
        assert_eq!(scores, vec!["1", "0", "2"]);
    }

    #[test]
    fn whole_number_dates_read_with_a_packed_pattern_only() {
        // The same history as above, dates as %Y%m%d numbers (2022-01-08,
        // 2022-04-18, 2022-11-04), whole and floating-point.
        let e = engine("charlson:count", false);
        let h = header(&["pid", "when", "dx1"]);
        let mut cfg = ScoreConfig {
            dx: vec!["dx1".into()],
            id: Some("pid".into()),
            date: Some("when".into()),
            lookback: Some(365),
            date_format: DateFormat::from_pattern("%Y%m%d").unwrap(),
            ..ScoreConfig::default()
        };
        let days = [20_220_108, 20_220_418, 20_221_104];
        let frame = |kind: Kind, f: fn(i64) -> Field<'static>| Frame {
            kinds: vec![Kind::Integer, kind, Kind::Text],
            rows: vec![
                vec![Field::Integer(7), f(days[0]), t("I21.9")],
                vec![Field::Integer(8), f(days[1]), t("")],
                vec![Field::Integer(7), f(days[2]), t("I50")],
            ],
        };
        for f in [
            frame(Kind::Integer, Field::Integer),
            frame(Kind::Number, |d| Field::Number(d as f64)),
        ] {
            let s = score(&e, &cfg, &h, &f, 1).unwrap();
            assert_eq!(
                s.columns[0],
                ScoreColumn::Int(vec![Some(1), Some(0), Some(2)])
            );
            assert_eq!(s.summary.dates_read, 3);
        }
        // ISO (or any pattern with separators) reads no number: refused.
        cfg.date_format = DateFormat::Iso;
        let err = score(&e, &cfg, &h, &frame(Kind::Integer, Field::Integer), 1).unwrap_err();
        assert!(err.to_string().contains("such as %Y%m%d"), "{err}");
    }

    #[test]
    fn wide_rows_on_threads_match_one_thread() {
        let e = engine("charlson,hfrs", true);
        let h = header(&["dx1", "dx2", "age"]);
        let codes = ["I21.9", "F00", "C78.0", "", "R41.0", "zz", "E11.2", "I50"];
        let rows: Vec<Vec<Field<'static>>> = (0..PARALLEL_ROWS + 7)
            .map(|i| {
                vec![
                    t(codes[i % codes.len()]),
                    t(codes[(i / 3) % codes.len()]),
                    if i % 5 == 0 {
                        Field::Null
                    } else {
                        Field::Number((i % 90) as f64)
                    },
                ]
            })
            .collect();
        let f = Frame {
            kinds: vec![Kind::Text, Kind::Text, Kind::Number],
            rows,
        };
        let mut cfg = ScoreConfig {
            dx: vec!["dx*".into()],
            age: Some("age".into()),
            threads: 1,
            ..ScoreConfig::default()
        };
        let one = score(&e, &cfg, &h, &f, 0).unwrap();
        cfg.threads = 3;
        let three = score(&e, &cfg, &h, &f, 0).unwrap();
        assert_eq!(one.columns, three.columns);
        assert_eq!(one.summary, three.summary);
        assert_eq!(one.summary.rows_read, (PARALLEL_ROWS + 7) as u64);
    }

    #[test]
    fn kinds_that_do_not_fit_are_refused_unless_empty() {
        let e = engine("charlson:count", false);
        let h = header(&["dx1", "dx2"]);
        let cfg = ScoreConfig {
            dx: vec!["dx*".into()],
            ..ScoreConfig::default()
        };
        let empty = Frame {
            kinds: vec![Kind::Text, Kind::Logical],
            rows: vec![vec![t("I21"), Field::Null]],
        };
        assert_eq!(
            score(&e, &cfg, &h, &empty, 1).unwrap().columns[0],
            ScoreColumn::Int(vec![Some(1)])
        );
        let numbers = Frame {
            kinds: vec![Kind::Text, Kind::Integer],
            rows: vec![vec![t("I21"), Field::Integer(410)]],
        };
        let err = score(&e, &cfg, &h, &numbers, 1).unwrap_err();
        assert_eq!(err.exit_code(), 2);
        assert!(
            err.to_string().contains("'dx2' holds integer values"),
            "{err}"
        );
    }

    #[test]
    fn history_errors_name_frame_rows_and_columns() {
        let e = engine("charlson", false);
        let h = header(&["pid", "when", "code"]);
        let cfg = ScoreConfig {
            dx: vec!["code".into()],
            id: Some("pid".into()),
            date: Some("when".into()),
            lookback: Some(30),
            strict: true,
            ..ScoreConfig::default()
        };
        let f = Frame {
            kinds: vec![Kind::Text, Kind::Text, Kind::Text],
            rows: vec![
                vec![t("a"), t("2024-01-01"), t("I21")],
                vec![t("a"), t("2024-01-02"), t("??")],
            ],
        };
        let err = score(&e, &cfg, &h, &f, 1).unwrap_err();
        assert_eq!(err.exit_code(), 3);
        assert_eq!(
            err.to_string(),
            "row 2: invalid code '??' in column 'code' (--strict)"
        );
    }

    #[test]
    fn kept_rows_name_each_units_first_non_empty_value() {
        // Long layout, units by (pid, ep): unit (a, 1) has rows 0 and 2,
        // its first row's ward empty: it carries row 2's; unit (b, 1) has
        // no ward at all; unit (a, 2) carries row 3's.
        let e = engine("charlson:count", false);
        let h = header(&["pid", "ep", "ward", "code"]);
        let req = Request {
            dx: vec!["code".into()],
            layout: "long".into(),
            id: Some("pid".into()),
            episode: Some("ep".into()),
            keep: vec!["ward".into()],
            ..Request::default()
        };
        let cfg = req.config().unwrap();
        let f = Frame {
            kinds: vec![Kind::Text, Kind::Integer, Kind::Integer, Kind::Text],
            rows: vec![
                vec![t("a"), Field::Integer(1), Field::Null, t("I21")],
                vec![t("b"), Field::Integer(1), Field::Null, t("I50")],
                vec![t("a"), Field::Integer(1), Field::Integer(40), t("I50")],
                vec![t("a"), Field::Integer(2), Field::Integer(41), t("")],
            ],
        };
        let s = score(&e, &cfg, &h, &f, 0).unwrap();
        assert_eq!(s.first_rows, Some(vec![0, 1, 3]));
        assert_eq!(s.kept_rows, vec![vec![Some(2), None, Some(3)]]);
        assert_eq!(
            s.columns[0],
            ScoreColumn::Int(vec![Some(2), Some(1), Some(0)])
        );
        assert_eq!(used_columns(&cfg, &h).unwrap(), vec![0, 1, 2, 3]);
        // A wide frame keeps every column already.
        let wide = Request {
            layout: "wide".into(),
            ..req.clone()
        };
        assert!(wide
            .config()
            .unwrap_err()
            .to_string()
            .starts_with("--keep is for the long layout"));
    }

    #[test]
    fn per_list_windows_and_earlier_only_from_a_request() {
        // Patient 7: I21 (myocardial infarction; Charlson 1987: 1) on day
        // 0, R41 and nothing else on day 400 (no Charlson condition).
        // Hand-worked: Charlson over 365 days sees nothing from day 0 at
        // day 400 (0); over 'all' it does (1); earlier-only leaves day 0's
        // own code out (0 on day 0).
        let e = engine("charlson:charlson1987", false);
        let h = header(&["pid", "when", "dx1"]);
        let f = Frame {
            kinds: vec![Kind::Integer, Kind::Date, Kind::Text],
            rows: vec![
                vec![Field::Integer(7), Field::Date(19_000), t("I21.9")],
                vec![Field::Integer(7), Field::Date(19_400), t("R41.0")],
            ],
        };
        let run = |lookback: &str, window: Option<&str>| {
            let req = Request {
                dx: vec!["dx1".into()],
                id: Some("pid".into()),
                date: Some("when".into()),
                lookback: Some(lookback.into()),
                window: window.map(String::from),
                ..Request::default()
            };
            let cfg = req.config().unwrap();
            score(&e, &cfg, &h, &f, 0).unwrap().columns[0].clone()
        };
        let int = |v: Vec<i64>| ScoreColumn::Int(v.into_iter().map(Some).collect());
        assert_eq!(run("charlson=365", None), int(vec![1, 0]));
        assert_eq!(run("charlson=all", None), int(vec![1, 1]));
        assert_eq!(run("all", Some("earlier-only")), int(vec![0, 1]));
        let bad = Request {
            lookback: Some("hfrs=30".into()),
            dx: vec!["dx1".into()],
            id: Some("pid".into()),
            date: Some("when".into()),
            ..Request::default()
        };
        let err = score(&e, &bad.config().unwrap(), &h, &f, 0).unwrap_err();
        assert!(
            err.to_string().contains("--lookback names list 'hfrs'"),
            "{err}"
        );
    }
}
