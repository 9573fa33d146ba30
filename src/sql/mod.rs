//! `morbus sql`: a SQL script that scores a table inside a database with
//! the engine's own lists and rules, for DuckDB, PostgreSQL and SQLite.
//!
//! The script has three parts:
//!
//! 1. a header comment: the morbus version, every list used (name, version,
//!    checksum, origin), the index specifications and every option;
//! 2. the lists as data: tables of code prefixes (every code entry expanded
//!    exactly as [`crate::matcher`] expands it, see
//!    [`crate::lists::prefix_rows`]), hierarchy pairs, weights, age points
//!    and bands, filled from the engine's catalogue (temporary tables, or
//!    tables named after the view that needs them);
//! 3. one query of named common table expressions, one step per rule of
//!    the engine, each with a comment: number the rows, one value per
//!    diagnosis field (split at `--dx-sep`), the marks of a code
//!    (`src/code.rs`), its shape, its prefixes, the conditions it claims,
//!    the primary and present-on-admission exclusions, the lookback
//!    window, the hierarchy, the weighted sums, age points, bands and flags.
//!
//! The output is the query itself, a view or a table ([`SqlOutput`]). The
//! output columns are [`Engine::columns`], with the same names and values
//! as `morbus score`; `python/tests/test_sql.py` proves the equality on the
//! three engines.

mod dialect;

use std::fmt::Write as _;

pub use dialect::{literal, quote_ident, quote_name, Dialect, ShapeChar};

use crate::lists::prefixes::points_text;
use crate::lists::{prefix_rows, Bound, CodeList, Weighting};
use crate::pipeline::{Header, Layout, Plan, ScoreConfig, WindowScope, POA_BLANK};
use crate::score::MAX_AGE;
use crate::score::{ColumnKind, Engine};
use crate::Error;

/// What the script leaves behind.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum SqlOutput {
    /// The query's rows (the script's last statement).
    Query,
    /// `CREATE VIEW NAME`: the list tables are permanent, named after the
    /// view (`NAME_code_prefixes`, ...), so that the view keeps working.
    View(String),
    /// `CREATE TABLE NAME AS`: the list tables are temporary and dropped
    /// at the end.
    Table(String),
}

/// Options of `morbus sql`.
#[derive(Clone, Debug)]
pub struct SqlOptions {
    pub dialect: Dialect,
    /// The table or view to score (`schema.name` allowed).
    pub table: String,
    /// The same selection options as `score` (the date format is ISO:
    /// the date column is a date, a timestamp or `YYYY-MM-DD` text).
    pub config: ScoreConfig,
    /// The table's columns, in order: needed for globs in `--dx`; with it
    /// every named column is checked and the wide output lists the
    /// columns by name.
    pub columns: Option<Vec<String>>,
    pub output: SqlOutput,
    /// Drop an existing output (and its list tables) first.
    pub replace: bool,
    /// Columns that put the rows in the extract's order (`--order-by`):
    /// the rows are numbered, and the output ordered, by them. Empty: the
    /// order the table gives (SQLite's rowid, PostgreSQL's ctid, DuckDB's
    /// scan order).
    pub order_by: Vec<String>,
}

/// The columns a script reads, resolved.
struct Columns {
    dx: Vec<String>,
    id: Option<String>,
    episode: Option<String>,
    date: Option<String>,
    age: Option<String>,
    primary: Option<String>,
    /// Present-on-admission columns: one (long layout) or one per diagnosis
    /// column, paired in order (wide layout).
    poa: Vec<String>,
    /// The table's columns when known.
    all: Option<Vec<String>>,
}

fn resolve_columns(opts: &SqlOptions) -> Result<Columns, Error> {
    let cfg = &opts.config;
    let names = match &opts.columns {
        Some(c) => c.clone(),
        None => {
            let mut names: Vec<String> = Vec::new();
            for item in cfg.dx.iter().flat_map(|s| s.split(',')) {
                let item = item.trim();
                if item.contains(['*', '?', '[']) {
                    return Err(Error::Usage(format!(
                        "--dx pattern '{item}' needs the table's columns: give --columns COLS \
(the table's column names, comma-separated) or name the diagnosis columns"
                    )));
                }
                if !item.is_empty() && !names.iter().any(|n| n == item) {
                    names.push(item.to_string());
                }
            }
            for c in [&cfg.id, &cfg.episode, &cfg.date, &cfg.age, &cfg.primary]
                .into_iter()
                .flatten()
            {
                if !names.contains(c) {
                    names.push(c.clone());
                }
            }
            for item in cfg.poa.iter().flat_map(|s| s.split(',')) {
                let item = item.trim();
                if item.contains(['*', '?', '[']) {
                    return Err(Error::Usage(format!(
                        "--poa pattern '{item}' needs the table's columns: give --columns COLS \
or name the present-on-admission columns"
                    )));
                }
                if !item.is_empty() && !names.iter().any(|n| n == item) {
                    names.push(item.to_string());
                }
            }
            names
        }
    };
    let plan = Plan::new(cfg, Header { names }, false)?;
    let name = |c: Option<usize>| c.map(|i| plan.header.names[i].clone());
    Ok(Columns {
        dx: plan.dx_names(),
        id: name(plan.id),
        episode: name(plan.episode),
        date: name(plan.date),
        age: name(plan.age),
        primary: name(plan.primary),
        poa: plan
            .poa
            .iter()
            .map(|&i| plan.header.names[i].clone())
            .collect(),
        all: opts.columns.clone(),
    })
}

/// The names of the list tables.
struct Tables {
    prefixes: String,
    hierarchy: String,
    weights: String,
    age_points: String,
    bands: String,
    /// The function that stops a query with a message (PostgreSQL).
    stop: String,
    temporary: bool,
}

impl Tables {
    fn new(output: &SqlOutput) -> Tables {
        let (base, temporary) = match output {
            SqlOutput::View(name) => (format!("{name}_"), false),
            _ => ("morbus_".to_string(), true),
        };
        let t = |s: &str| {
            if temporary {
                quote_ident(&format!("{base}{s}"))
            } else {
                quote_name(&format!("{base}{s}"))
            }
        };
        Tables {
            prefixes: t("code_prefixes"),
            hierarchy: t("hierarchy"),
            weights: t("weights"),
            age_points: t("age_points"),
            bands: t("bands"),
            stop: if temporary {
                format!("pg_temp.{}", quote_ident(&format!("{base}stop")))
            } else {
                quote_name(&format!("{base}stop"))
            },
            temporary,
        }
    }
}

/// One step of the query.
struct Step {
    name: &'static str,
    comment: String,
    body: String,
    materialized: bool,
}

/// Writes the script.
///
/// ```
/// use morbus::lists::Catalogue;
/// use morbus::pipeline::ScoreConfig;
/// use morbus::score::{Engine, IndexSpec, ScoreOptions};
/// use morbus::sql::{generate, Dialect, SqlOptions, SqlOutput};
///
/// let specs = IndexSpec::parse_many("charlson").unwrap();
/// let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
/// let config = ScoreConfig { dx: vec!["dx1,dx2".into()], ..ScoreConfig::default() };
/// let opts = SqlOptions {
///     dialect: Dialect::Sqlite,
///     table: "episodes".into(),
///     config,
///     columns: None,
///     output: SqlOutput::Query,
///     replace: false,
///     order_by: Vec::new(),
/// };
/// let script = generate(&engine, &opts).unwrap();
/// assert!(script.contains("AS \"charlson_quan2011\""));
/// ```
pub fn generate(engine: &Engine, opts: &SqlOptions) -> Result<String, Error> {
    let cfg = &opts.config;
    // The lists' windows, checked as `score` checks them.
    let windows = crate::pipeline::history::Windows::new(engine, cfg)?;
    let cols = resolve_columns(opts)?;
    if let Some(all) = &cols.all {
        if let Some(c) = opts.order_by.iter().find(|c| !all.contains(c)) {
            return Err(Error::Usage(format!(
                "--order-by column '{c}' not found; columns in the input: {}",
                all.join(", ")
            )));
        }
    }
    if let Some(all) = &cols.all {
        let names: Vec<&str> = match cfg.layout {
            Layout::Wide => all.iter().map(String::as_str).collect(),
            Layout::Long => [&cols.id, &cols.episode]
                .into_iter()
                .flatten()
                .map(String::as_str)
                .collect(),
        };
        crate::pipeline::check_collisions(&names, engine)?;
    }
    let d = opts.dialect;
    let tables = Tables::new(&opts.output);
    let mut out = String::new();
    header(&mut out, engine, opts, &cols);
    let hierarchy =
        engine.options().hierarchy && engine.lists().iter().any(|l| !l.list.hierarchy.is_empty());
    let age_points = cols.age.is_some()
        && engine
            .columns()
            .iter()
            .any(|c| matches!(c.kind, ColumnKind::ScoreWithAge { .. }));
    let bands = engine
        .columns()
        .iter()
        .any(|c| matches!(c.kind, ColumnKind::Band { .. }));

    if opts.replace {
        match &opts.output {
            SqlOutput::View(n) => {
                let _ = writeln!(out, "DROP VIEW IF EXISTS {};", quote_name(n));
            }
            SqlOutput::Table(n) => {
                let _ = writeln!(out, "DROP TABLE IF EXISTS {};", quote_name(n));
            }
            SqlOutput::Query => {}
        }
    }
    list_tables(
        &mut out,
        engine,
        d,
        &tables,
        opts.replace,
        (hierarchy, age_points, bands),
    );

    let guard = cols.date.is_some();
    let stop_function = d
        .stop_function(&tables.stop, opts.replace || tables.temporary)
        .filter(|_| guard);
    if let Some(f) = &stop_function {
        out.push_str("\n-- Stops the query with a message (too many unreadable dates).\n");
        out.push_str(f);
        out.push('\n');
    }

    let steps = steps(engine, opts, &cols, &tables, hierarchy, &windows.per_list);
    let recursive = steps.iter().any(|s| s.name == "diagnosis_parts");
    let mut query = String::new();
    let _ = writeln!(query, "WITH{}", if recursive { " RECURSIVE" } else { "" });
    for (i, s) in steps.iter().enumerate() {
        for (k, line) in s.comment.lines().enumerate() {
            if k == 0 {
                let _ = writeln!(query, "-- Step {}. {}", i + 1, strip_step(line));
            } else {
                let _ = writeln!(query, "-- {line}");
            }
        }
        let _ = writeln!(
            query,
            "{} AS {}(",
            s.name,
            if s.materialized { "MATERIALIZED " } else { "" }
        );
        for line in s.body.trim_end().lines() {
            let _ = writeln!(query, "    {line}");
        }
        let _ = writeln!(query, "){}", if i + 1 < steps.len() { "," } else { "" });
    }
    query.push_str(&final_select(engine, opts, &cols, steps.len() + 1));

    out.push_str("\n-- The scores.\n");
    match &opts.output {
        SqlOutput::Query => {
            out.push_str(&query);
            out.push_str(";\n");
        }
        SqlOutput::View(n) => {
            let _ = writeln!(out, "CREATE VIEW {} AS", quote_name(n));
            out.push_str(&query);
            out.push_str(";\n");
        }
        SqlOutput::Table(n) => {
            let _ = writeln!(out, "CREATE TABLE {} AS", quote_name(n));
            out.push_str(&query);
            out.push_str(";\n");
            out.push_str("\n-- The list tables are no longer needed.\n");
            for t in table_names(&tables, (hierarchy, age_points, bands)) {
                let _ = writeln!(out, "DROP TABLE {};", d.temp_qualified(t));
            }
            if stop_function.is_some() {
                let _ = writeln!(out, "DROP FUNCTION {}(TEXT);", tables.stop);
            }
        }
    }
    Ok(out)
}

/// A step's comment without a "Step N." its author wrote (the steps are
/// numbered as written out).
fn strip_step(line: &str) -> &str {
    match line.strip_prefix("Step ") {
        Some(rest) => match rest.split_once(". ") {
            Some((n, tail)) if n.chars().all(|c| c.is_ascii_alphanumeric()) => tail,
            _ => line,
        },
        None => line,
    }
}

fn table_names(t: &Tables, (hierarchy, age, bands): (bool, bool, bool)) -> Vec<&str> {
    let mut v = vec![t.prefixes.as_str(), t.weights.as_str()];
    if hierarchy {
        v.push(&t.hierarchy);
    }
    if age {
        v.push(&t.age_points);
    }
    if bands {
        v.push(&t.bands);
    }
    v
}

fn header(out: &mut String, engine: &Engine, opts: &SqlOptions, cols: &Columns) {
    let cfg = &opts.config;
    let _ = writeln!(
        out,
        "-- Written by morbus {} (`morbus sql`) for {}.",
        crate::VERSION,
        opts.dialect
    );
    out.push_str(
        "-- Scores the table as `morbus score` scores the same rows exported to a file:\n\
-- the same code lists, code reading, exclusions, lookback, hierarchies and weights.\n\
-- Regenerate it rather than edit it; edit the lists instead (morbus lists export).\n--\n\
-- Code lists (name, version, SHA-256 checksum of the content, origin):\n",
    );
    for l in engine.lists() {
        let _ = writeln!(
            out,
            "--   {} {} {} {}",
            l.list.name, l.list.version, l.list.checksum, l.list.origin
        );
    }
    let specs: Vec<String> = engine
        .specs()
        .iter()
        .map(|s| {
            let l = &engine.lists()[s.list].list;
            format!("{}:{}", l.name, l.weightings[s.weighting].name)
        })
        .collect();
    let _ = writeln!(out, "-- Indices: {}", specs.join(", "));
    out.push_str("-- Options:\n");
    let mut opt = |k: &str, v: String| {
        let _ = writeln!(out, "--   {k}: {v}");
    };
    opt("dialect", format!("{:?}", opts.dialect).to_lowercase());
    opt("table", opts.table.clone());
    opt(
        "layout",
        match cfg.layout {
            Layout::Wide => "wide".into(),
            Layout::Long => "long".into(),
        },
    );
    opt("diagnosis columns", cols.dx.join(", "));
    if let Some(s) = cfg.dx_sep {
        opt(
            "diagnosis separator",
            format!("'{}'", (s as char).escape_debug()),
        );
    }
    for (k, v) in [
        ("id", &cols.id),
        ("episode", &cols.episode),
        ("date", &cols.date),
        ("age", &cols.age),
        ("primary", &cols.primary),
    ] {
        if let Some(v) = v {
            opt(k, v.clone());
        }
    }
    if !cols.poa.is_empty() {
        opt("present on admission", cols.poa.join(", "));
        opt("present-on-admission values", cfg.poa_values.join(","));
    }
    if let Some(l) = crate::pipeline::lookback_text(cfg) {
        opt("lookback (days)", l);
        opt("window", cfg.window.name().into());
    }
    if cols.date.is_some() {
        opt("date format", cfg.date_format.to_string());
        opt(
            "max unreadable dates",
            format!("{}%", cfg.max_unreadable_dates),
        );
    }
    if cfg.exclude_primary {
        opt("exclude primary", "yes".into());
    }
    opt(
        "hierarchy",
        if engine.options().hierarchy {
            "yes"
        } else {
            "no"
        }
        .into(),
    );
    opt(
        "flags",
        if engine.options().flags { "yes" } else { "no" }.into(),
    );
    opt(
        "output",
        match &opts.output {
            SqlOutput::Query => "query".into(),
            SqlOutput::View(n) => format!("view {n}"),
            SqlOutput::Table(n) => format!("table {n}"),
        },
    );
}

/// Creates and fills the list tables.
fn list_tables(
    out: &mut String,
    engine: &Engine,
    d: Dialect,
    t: &Tables,
    replace: bool,
    (hierarchy, age, bands): (bool, bool, bool),
) {
    let create = |out: &mut String, name: &str, columns: &str| {
        if t.temporary {
            let _ = writeln!(out, "DROP TABLE IF EXISTS {};", d.temp_qualified(name));
            let _ = writeln!(out, "CREATE TEMPORARY TABLE {name} ({columns});");
        } else {
            if replace {
                let _ = writeln!(out, "DROP TABLE IF EXISTS {name};");
            }
            let _ = writeln!(out, "CREATE TABLE {name} ({columns});");
        }
    };
    let insert = |out: &mut String, name: &str, columns: &str, rows: &[String]| {
        if rows.is_empty() {
            return;
        }
        let _ = writeln!(out, "INSERT INTO {name} ({columns}) VALUES");
        for (i, r) in rows.iter().enumerate() {
            let _ = writeln!(
                out,
                "    ({r}){}",
                if i + 1 < rows.len() { "," } else { ";" }
            );
        }
    };
    let pts = d.points_type();

    out.push_str(
        "\n-- Code prefixes: a code claims a condition when it starts with one of the\n\
-- condition's prefixes. Every code entry of a list is expanded (a range into\n\
-- its codes) as morbus's matcher expands it; `code_entry` is the entry as\n\
-- written in the list.\n",
    );
    create(
        out,
        &t.prefixes,
        "list_name TEXT NOT NULL, condition_key TEXT NOT NULL, prefix TEXT NOT NULL, code_entry TEXT NOT NULL",
    );
    for l in engine.lists() {
        let list = &l.list;
        let rows = prefix_rows(list);
        for (ci, c) in list.conditions.iter().enumerate() {
            let mine: Vec<String> = rows
                .iter()
                .filter(|r| r.condition == ci)
                .map(|r| {
                    format!(
                        "{}, {}, {}, {}",
                        literal(&list.name),
                        literal(&c.key),
                        literal(r.prefix.as_str()),
                        literal(&r.entry.text)
                    )
                })
                .collect();
            if mine.is_empty() {
                continue;
            }
            let _ = writeln!(out, "-- {}: {} ({})", list.name, c.key, c.label);
            insert(
                out,
                &t.prefixes,
                "list_name, condition_key, prefix, code_entry",
                &mine,
            );
        }
    }

    if hierarchy {
        out.push_str(
            "\n-- Hierarchy: when a unit has the superior condition, the inferior one does not count.\n",
        );
        create(
            out,
            &t.hierarchy,
            "list_name TEXT NOT NULL, superior TEXT NOT NULL, inferior TEXT NOT NULL",
        );
        let mut rows = Vec::new();
        for l in engine.lists() {
            for h in &l.list.hierarchy {
                rows.push(format!(
                    "{}, {}, {}",
                    literal(&l.list.name),
                    literal(&l.list.conditions[h.superior].key),
                    literal(&l.list.conditions[h.inferior].key)
                ));
            }
        }
        insert(out, &t.hierarchy, "list_name, superior, inferior", &rows);
    }

    out.push_str("\n-- Weights: the points of each condition in each weighting used.\n");
    create(
        out,
        &t.weights,
        &format!("list_name TEXT NOT NULL, weighting TEXT NOT NULL, condition_key TEXT NOT NULL, points {pts} NOT NULL"),
    );
    for (list, w) in weightings_used(engine) {
        let rows: Vec<String> = list
            .conditions
            .iter()
            .zip(&w.weights)
            .map(|(c, &p)| {
                format!(
                    "{}, {}, {}, {}",
                    literal(&list.name),
                    literal(&w.name),
                    literal(&c.key),
                    points_text(p)
                )
            })
            .collect();
        let _ = writeln!(out, "-- {} {}: {}", list.name, w.name, w.label);
        insert(
            out,
            &t.weights,
            "list_name, weighting, condition_key, points",
            &rows,
        );
    }

    if age {
        out.push_str(
            "\n-- Age points: added to the score for the unit's age in whole years (from_age to to_age, inclusive).\n",
        );
        create(
            out,
            &t.age_points,
            &format!("list_name TEXT NOT NULL, from_age INTEGER NOT NULL, to_age INTEGER, points {pts} NOT NULL"),
        );
        let mut rows = Vec::new();
        for l in engine.lists() {
            for a in &l.list.age_points {
                rows.push(format!(
                    "{}, {}, {}, {}",
                    literal(&l.list.name),
                    a.from,
                    a.to.map_or("NULL".into(), |t| t.to_string()),
                    points_text(a.points)
                ));
            }
        }
        insert(
            out,
            &t.age_points,
            "list_name, from_age, to_age, points",
            &rows,
        );
    }

    if bands {
        out.push_str(
            "\n-- Bands: the band a score falls in (a NULL bound is open; *_inclusive = 1 includes the bound).\n",
        );
        create(
            out,
            &t.bands,
            &format!(
                "list_name TEXT NOT NULL, weighting TEXT NOT NULL, band TEXT NOT NULL, \
lower_bound {pts}, lower_inclusive INTEGER NOT NULL, upper_bound {pts}, upper_inclusive INTEGER NOT NULL"
            ),
        );
        let mut rows = Vec::new();
        for (list, w) in weightings_used(engine) {
            for b in &w.bands {
                let bound = |x: Bound| match x {
                    Bound::Open => ("NULL".to_string(), 0),
                    Bound::Inclusive(v) => (points_text(v), 1),
                    Bound::Exclusive(v) => (points_text(v), 0),
                };
                let (lo, loi) = bound(b.lower);
                let (hi, hii) = bound(b.upper);
                rows.push(format!(
                    "{}, {}, {}, {lo}, {loi}, {hi}, {hii}",
                    literal(&list.name),
                    literal(&w.name),
                    literal(&b.name)
                ));
            }
        }
        insert(
            out,
            &t.bands,
            "list_name, weighting, band, lower_bound, lower_inclusive, upper_bound, upper_inclusive",
            &rows,
        );
    }
}

/// How the wide output gets back the table's own columns.
enum RowSource {
    /// `r.* EXCLUDE (morbus_row)` (DuckDB).
    Exclude,
    /// `(r.morbus_source).*`: the row kept as a composite value (PostgreSQL).
    Composite,
    /// The table itself joined on its `rowid` (SQLite).
    Rowid,
    /// The columns named by `--columns`.
    Named(Vec<String>),
}

/// Each list and weighting the run scores, once, in the order the indices
/// name them.
fn weightings_used(engine: &Engine) -> Vec<(&CodeList, &Weighting)> {
    let mut done: Vec<(usize, usize)> = Vec::new();
    for s in engine.specs() {
        if !done.contains(&(s.list, s.weighting)) {
            done.push((s.list, s.weighting));
        }
    }
    done.into_iter()
        .map(|(l, w)| {
            let list = &engine.lists()[l].list;
            (list, &list.weightings[w])
        })
        .collect()
}

fn row_source(opts: &SqlOptions, cols: &Columns) -> RowSource {
    if let Some(all) = &cols.all {
        return RowSource::Named(all.clone());
    }
    match opts.dialect {
        Dialect::DuckDb => RowSource::Exclude,
        Dialect::Postgres => RowSource::Composite,
        Dialect::Sqlite => RowSource::Rowid,
    }
}

fn steps(
    engine: &Engine,
    opts: &SqlOptions,
    cols: &Columns,
    t: &Tables,
    hierarchy: bool,
    windows: &[Option<u32>],
) -> Vec<Step> {
    let cfg = &opts.config;
    let d = opts.dialect;
    let q = |c: &str| format!("r.{}", quote_ident(c));
    let table = quote_name(&opts.table);
    let wide = cfg.layout == Layout::Wide;
    let mut steps = Vec::new();
    let mut step = |name: &'static str, comment: &str, body: String, materialized: bool| {
        steps.push(Step {
            name,
            comment: comment.to_string(),
            body,
            materialized,
        })
    };

    // 1. Rows, numbered in the table's order.
    let (over, order_rule) = if !opts.order_by.is_empty() {
        let by: Vec<String> = opts
            .order_by
            .iter()
            .map(|c| format!("t.{}", quote_ident(c)))
            .collect();
        (
            format!("ORDER BY {}", by.join(", ")),
            format!("in the order of {} (--order-by)", opts.order_by.join(", ")),
        )
    } else if d == Dialect::Postgres {
        (
            "ORDER BY t.ctid".to_string(),
            "in the order they are stored (ctid: the load order of a table\nloaded and not updated since)".to_string(),
        )
    } else {
        (
            String::new(),
            "in the order the table gives them".to_string(),
        )
    };
    let numbering = match (wide, row_source(opts, cols)) {
        (true, RowSource::Rowid) if opts.order_by.is_empty() => {
            "t.rowid AS morbus_row, t.*".to_string()
        }
        (true, RowSource::Rowid) => {
            format!("ROW_NUMBER() OVER ({over}) AS morbus_row, t.rowid AS morbus_rowid, t.*")
        }
        (true, RowSource::Composite) => {
            format!("ROW_NUMBER() OVER ({over}) AS morbus_row, t AS morbus_source, t.*")
        }
        _ => format!("ROW_NUMBER() OVER ({over}) AS morbus_row, t.*"),
    };
    step(
        "source_rows",
        &format!(
            "Step 1. The rows of {}, numbered {order_rule}\n\
(computed once, so that every later step sees the same numbers).",
            opts.table
        ),
        format!("SELECT {numbering}\nFROM {table} AS t"),
        true,
    );
    let rows = if wide {
        "source_rows".to_string()
    } else {
        let mut by = vec![q(cols.id.as_deref().unwrap_or(""))];
        if let Some(e) = &cols.episode {
            by.push(q(e));
        }
        step(
            "unit_rows",
            &format!(
                "Step 1b. Long layout: the rows of one {} form a unit, numbered by its first row.",
                if cols.episode.is_some() {
                    "id and episode"
                } else {
                    "id"
                }
            ),
            format!(
                "SELECT r.*, MIN(r.morbus_row) OVER (PARTITION BY {}) AS morbus_unit\nFROM source_rows AS r",
                by.join(", ")
            ),
            true,
        );
        "unit_rows".to_string()
    };
    let unit = if wide { "morbus_row" } else { "morbus_unit" };

    // 2. One value per diagnosis field.
    let mut excluded_row = Vec::new();
    if !wide && cfg.exclude_primary {
        if let Some(p) = &cols.primary {
            excluded_row.push(format!(
                "upper({}) IN ('1', 'Y', 'YES', 'TRUE', 'P', 'PRIMARY')",
                d.trim_ascii(&format!("CAST({} AS TEXT)", q(p)))
            ));
        }
    }
    // Present on admission (src/pipeline/mod.rs, `read_poa`): a field's codes
    // count now when its indicator is one of --poa-values (`BLANK`: empty);
    // any other value, known or not, leaves them out.
    let poa_counts = |col: &str| -> String {
        let t = d.trim_ascii(&format!("CAST({} AS TEXT)", q(col)));
        let values: Vec<String> = cfg
            .poa_values
            .iter()
            .filter(|v| v.as_str() != POA_BLANK)
            .map(|v| literal(v))
            .collect();
        let mut terms = Vec::new();
        if !values.is_empty() {
            terms.push(format!(
                "upper(COALESCE({t}, '')) IN ({})",
                values.join(", ")
            ));
        }
        if cfg.poa_values.iter().any(|v| v == POA_BLANK) {
            terms.push(format!("COALESCE({t}, '') = ''"));
        }
        if terms.is_empty() {
            "1 = 0".to_string()
        } else {
            terms.join(" OR ")
        }
    };
    let counts_now = |k: usize| -> String {
        let mut excluded = excluded_row.clone();
        let poa = match cfg.layout {
            Layout::Wide => cols.poa.get(k),
            Layout::Long => cols.poa.first(),
        };
        if let Some(p) = poa {
            excluded.push(format!("NOT ({})", poa_counts(p)));
        }
        if excluded.is_empty() {
            "1".to_string()
        } else {
            format!("CASE WHEN {} THEN 0 ELSE 1 END", excluded.join(" OR "))
        }
    };
    let mut fields_comment =
        "Step 3. One diagnosis field per row and column. `counts_now` is 0 for a code\n\
that does not count when its own episode is scored (it still counts in later\n\
episodes' lookback)."
            .to_string();
    if !wide && cfg.exclude_primary {
        fields_comment.push_str("\nRule: --exclude-primary leaves out rows flagged 1, y, yes, true, p or primary (any case).");
    }
    if !cols.poa.is_empty() {
        fields_comment.push_str(&format!(
            "\nRule: present on admission: a field's codes count now only when its indicator\n({}) is one of {} (BLANK: empty).",
            cols.poa.join(", "),
            cfg.poa_values.join(", ")
        ));
    }
    let branches: Vec<String> = cols
        .dx
        .iter()
        .enumerate()
        .map(|(i, c)| {
            format!(
                "SELECT r.{unit} AS unit, {} AS position, CAST({} AS TEXT) AS field, {} AS counts_now\nFROM {rows} AS r WHERE CAST({} AS TEXT) <> ''",
                i + 1,
                q(c),
                counts_now(i),
                q(c)
            )
        })
        .collect();
    let list: Vec<String> = cols
        .dx
        .iter()
        .enumerate()
        .map(|(i, c)| format!("{} {c}", i + 1))
        .collect();
    fields_comment.push_str(&format!(
        "\nPositions (reading order; position 1 is the primary diagnosis in the wide\nlayout): {}.",
        list.join(", ")
    ));
    step(
        "diagnosis_fields",
        &fields_comment,
        branches.join("\nUNION ALL\n"),
        false,
    );

    // 3. Values, split at --dx-sep.
    let primary_rule = if wide && cfg.exclude_primary {
        "CASE WHEN position = 1 AND part_number = 1 THEN 0 ELSE counts_now END"
    } else {
        "counts_now"
    };
    let primary_note = if wide && cfg.exclude_primary {
        "\nRule: --exclude-primary leaves out the first value of the first diagnosis column."
    } else {
        ""
    };
    match cfg.dx_sep {
        None => step(
            "diagnosis_values",
            &format!("Step 4. The non-empty values.{primary_note}"),
            format!(
                "SELECT unit, field AS value,\n  {} AS counts_now\nFROM diagnosis_fields",
                primary_rule.replace("part_number", "1")
            ),
            true,
        ),
        Some(sep) => {
            let sep = literal(&(sep as char).to_string());
            if d == Dialect::Sqlite {
                step(
                    "diagnosis_parts",
                    &format!("Step 4a. Each field split at {sep}, part by part (a recursive step)."),
                    format!(
                        "SELECT unit, position, 1 AS part_number,\n  substr(field, 1, instr(field || {sep}, {sep}) - 1) AS value,\n  \
CASE WHEN instr(field, {sep}) > 0 THEN substr(field, instr(field, {sep}) + 1) END AS rest,\n  counts_now\n\
FROM diagnosis_fields\nWHERE field IS NOT NULL AND field <> ''\n\
UNION ALL\n\
SELECT unit, position, part_number + 1,\n  substr(rest, 1, instr(rest || {sep}, {sep}) - 1),\n  \
CASE WHEN instr(rest, {sep}) > 0 THEN substr(rest, instr(rest, {sep}) + 1) END,\n  counts_now\n\
FROM diagnosis_parts\nWHERE rest IS NOT NULL"
                    ),
                    false,
                );
                step(
                    "diagnosis_values",
                    &format!("Step 4b. The parts.{primary_note}"),
                    format!(
                        "SELECT unit, value,\n  {primary_rule} AS counts_now\nFROM diagnosis_parts"
                    ),
                    true,
                );
            } else {
                step(
                    "diagnosis_values",
                    &format!("Step 4. Each field split at {sep} into its parts.{primary_note}"),
                    format!(
                        "SELECT f.unit, p.part AS value,\n  {} AS counts_now\nFROM diagnosis_fields AS f\n{}\nWHERE f.field IS NOT NULL AND f.field <> ''",
                        primary_rule
                            .replace("position", "f.position")
                            .replace("part_number", "p.part_number")
                            .replace("counts_now", "f.counts_now")
                            .replace("f.counts_now AS", "counts_now AS"),
                        d.split_lateral("f.field", &sep, "p")
                    ),
                    true,
                );
            }
        }
    }

    // 4. Code reading (src/code.rs).
    let strip = ["'.'", "' '", &d.chr(9), "'*'", "'+'", &d.chr(8224), "'-'"]
        .iter()
        .fold("value".to_string(), |acc, m| {
            format!("replace({acc}, {m}, '')")
        });
    step(
        "distinct_values",
        "Step 5. Each distinct value once: codes are read and matched per value, not\n\
per field (an extract repeats the same few thousand values).",
        "SELECT DISTINCT value\nFROM diagnosis_values".into(),
        false,
    );
    step(
        "value_marks",
        "Step 5. Code reading, marks (as src/code.rs): dots, spaces, tabs, the dagger\n\
and asterisk marks (U+2020, +, *) are dropped anywhere; a '-' only at the end\n\
(followed by nothing but '-', spaces and tabs); a value longer than 64 bytes\n\
is not a code.",
        format!(
            "SELECT value,\n  {strip} AS letters,\n  CASE WHEN {} <= 64\n        AND ({} = 0 OR rtrim(substr(value, {}), '-' || ' ' || {}) = '')\n       THEN 1 ELSE 0 END AS marks_ok\nFROM distinct_values",
            d.byte_length("value"),
            d.position("value", "'-'"),
            d.position("value", "'-'"),
            d.chr(9)
        ),
        true,
    );
    step(
        "value_codes",
        "Step 6. What remains must be 1 to 7 ASCII letters and digits (anything else is\n\
an invalid code and scores nothing; nothing at all is an empty field),\n\
read in upper case.",
        format!(
            "SELECT value, upper(letters) AS code_text\nFROM value_marks\nWHERE marks_ok = 1\n  AND length(letters) BETWEEN 1 AND 7\n  AND {}",
            d.only_chars("letters", "A-Za-z0-9")
        ),
        true,
    );
    step(
        "valid_codes",
        "Step 7. An X filler after the three-character category is dropped (I10X is\n\
I10); the code must then be ICD-10-shaped: at least 3 characters, a letter,\n\
a digit, then a digit or a letter.",
        "SELECT value, code\nFROM (\n  SELECT value,\n    CASE WHEN length(code_text) > 3 AND rtrim(substr(code_text, 4), 'X') = ''\n         THEN substr(code_text, 1, 3) ELSE code_text END AS code\n  FROM value_codes\n) AS c\nWHERE length(code) >= 3\n  AND substr(code, 1, 1) BETWEEN 'A' AND 'Z'\n  AND substr(code, 2, 1) BETWEEN '0' AND '9'\n  AND (substr(code, 3, 1) BETWEEN '0' AND '9' OR substr(code, 3, 1) BETWEEN 'A' AND 'Z')"
            .to_string(),
        true,
    );

    // 5. Matching.
    step(
        "prefix_lengths",
        "Step 8. The prefix lengths the lists use.",
        format!(
            "SELECT DISTINCT length(prefix) AS prefix_length\nFROM {}",
            t.prefixes
        ),
        false,
    );
    step(
        "value_conditions",
        "Step 9. The conditions each value's code claims: a prefix of the code equals a\n\
listed prefix (I50 claims I509 and I5091).",
        format!(
            "SELECT c.value, p.list_name, p.condition_key\nFROM valid_codes AS c\nJOIN prefix_lengths AS l ON l.prefix_length <= length(c.code)\nJOIN {} AS p ON p.prefix = substr(c.code, 1, l.prefix_length)",
            t.prefixes
        ),
        true,
    );
    step(
        "code_conditions",
        "Step 9b. The conditions of each unit's fields, through their values.",
        "SELECT v.unit, c.list_name, c.condition_key, v.counts_now\nFROM diagnosis_values AS v\nJOIN value_conditions AS c ON c.value = v.value"
            .into(),
        cfg.uses_history(),
    );

    // 6. Dates, ages, patients.
    let history = cfg.uses_history();
    let need_facts = history || cols.age.is_some() || cols.date.is_some();
    if need_facts {
        let mut sel = vec![format!("r.morbus_row, r.{unit} AS unit")];
        match &cols.id {
            Some(id) if history => sel.push(format!(
                "CASE WHEN {} = '' THEN NULL ELSE CAST({} AS TEXT) END AS patient",
                d.trim_ascii(&format!("CAST({} AS TEXT)", q(id))),
                q(id)
            )),
            _ => sel.push("CAST(NULL AS TEXT) AS patient".into()),
        }
        match &cols.date {
            Some(c) => sel.push(format!(
                "{} AS date_text",
                d.trim_ascii(&format!("CAST({} AS TEXT)", q(c)))
            )),
            _ => sel.push("CAST(NULL AS TEXT) AS date_text".into()),
        }
        match &cols.age {
            Some(c) => sel.push(format!(
                "{} AS age_text",
                d.trim_ascii(&format!("CAST({} AS TEXT)", q(c)))
            )),
            None => sel.push("CAST(NULL AS TEXT) AS age_text".into()),
        }
        step(
            "row_texts",
            "Step 10. Each row's patient (an empty id is nobody's history: the row's\n\
unit stands alone), date and age as trimmed text.",
            format!("SELECT {}\nFROM {rows} AS r", sel.join(",\n  ")),
            false,
        );
        let (date_source, date_rule) = match &cfg.date_format {
            crate::pipeline::DateFormat::Iso => (
                "row_texts".to_string(),
                "YYYY-MM-DD from year 1000 to 9999, a time\nafter it ignored".to_string(),
            ),
            crate::pipeline::DateFormat::Pattern(p) => {
                step(
                    "row_dates",
                    &format!(
                        "Step 10b. --date-format {p}: each date rewritten as YYYY-MM-DD (%m and %d\n\
take one or two digits between separators, exactly two next to another\n\
number; %b is an English month abbreviation in any case; after the date\n\
only a time, after 'T' or a space, may follow); anything else is no date."
                    ),
                    format!(
                        "SELECT morbus_row, unit, patient, age_text, date_text AS given_text,\n  {} AS date_text\nFROM row_texts",
                        pattern_iso(d, p, "date_text")
                    ),
                    false,
                );
                (
                    "row_dates".to_string(),
                    format!("{p}, read as YYYY-MM-DD from year 1000 to 9999"),
                )
            }
        };
        let iso = "substr(date_text, 1, 10)";
        let day = format!(
            "CASE WHEN length(date_text) >= 10\n        AND (length(date_text) = 10 OR substr(date_text, 11, 1) IN ('T', ' '))\n        AND substr(date_text, 5, 1) = '-' AND substr(date_text, 8, 1) = '-'\n        AND substr(date_text, 1, 4) >= '1000'\n        AND {}\n       THEN {} END",
            d.only_chars(
                "substr(date_text, 1, 4) || substr(date_text, 6, 2) || substr(date_text, 9, 2)",
                "0-9"
            ),
            d.day_number(iso)
        );
        let int_part =
            "substr(age_text, 1, ".to_string() + &d.position("age_text || '.'", "'.'") + " - 1)";
        let age = format!(
            "CASE WHEN age_text <> '' AND length(age_text) <= 12 AND {}\n       THEN CASE WHEN {} <= {MAX_AGE} THEN CAST({} AS INTEGER) END END",
            d.is_decimal_number("age_text"),
            d.to_bigint(&int_part),
            d.to_bigint(&int_part)
        );
        // The date as written (before a --date-format rewrote it).
        let given = match cfg.date_format {
            crate::pipeline::DateFormat::Iso => "date_text",
            crate::pipeline::DateFormat::Pattern(_) => "given_text",
        };
        step(
            "row_facts",
            &format!(
                "Step 11. Dates as day numbers ({date_rule}; anything else, or no\n\
calendar date, is no date; `date_given` is 1 when the field is not empty) and ages in whole\n\
years (a whole or decimal number from 0 to the engine's maximum age, decimals\n\
truncated; anything else is no age)."
            ),
            format!(
                "SELECT morbus_row, unit, patient,\n  {day} AS day,\n  {given} AS date_written,\n  CASE WHEN COALESCE({given}, '') = '' THEN 0 ELSE 1 END AS date_given,\n  {age} AS age_years\nFROM {date_source}"
            ),
            false,
        );
        if wide {
            step(
                "unit_facts",
                "Step 12. Wide layout: each row is an episode.",
                "SELECT unit, patient, day, date_given, age_years\nFROM row_facts".into(),
                true,
            );
        } else {
            step(
                "ranked_facts",
                "Step 12a. Long layout: the rows of a unit with a date (an age) in row order.",
                "SELECT unit, patient, day, date_given, age_years,\n  \
ROW_NUMBER() OVER (PARTITION BY unit, CASE WHEN day IS NULL THEN 0 ELSE 1 END ORDER BY morbus_row) AS day_rank,\n  \
ROW_NUMBER() OVER (PARTITION BY unit, CASE WHEN age_years IS NULL THEN 0 ELSE 1 END ORDER BY morbus_row) AS age_rank\n\
FROM row_facts"
                    .into(),
                false,
            );
            step(
                "unit_facts",
                "Step 12b. A unit takes the first readable date and age among its rows.",
                "SELECT unit, MIN(patient) AS patient,\n  \
MIN(CASE WHEN day IS NOT NULL AND day_rank = 1 THEN day END) AS day,\n  \
MAX(date_given) AS date_given,\n  \
MIN(CASE WHEN age_years IS NOT NULL AND age_rank = 1 THEN age_years END) AS age_years\n\
FROM ranked_facts\nGROUP BY unit"
                    .into(),
                true,
            );
        }
        if cols.date.is_some() {
            date_guard(&mut step, d, cfg, &t.stop);
        }
    }

    // 7. The unit's conditions: its own, and with a lookback its history's.
    // With a hierarchy the next steps group by condition anyway, so the
    // duplicates are left for them to remove.
    let (distinct, union) = if hierarchy {
        ("", "UNION ALL")
    } else {
        ("DISTINCT ", "UNION")
    };
    if !cfg.uses_history() {
        step(
            "unit_conditions",
            "Step 13. The conditions of each unit: those of its codes that count now.",
            format!("SELECT {distinct}unit, list_name, condition_key\nFROM code_conditions\nWHERE counts_now = 1"),
            hierarchy,
        );
    } else {
        let earlier_only = cfg.window == WindowScope::EarlierOnly;
        let names = |pick: &dyn Fn(Option<u32>) -> bool| -> Vec<String> {
            engine
                .lists()
                .iter()
                .zip(windows)
                .filter(|(_, w)| pick(**w))
                .map(|(l, _)| literal(&l.list.name))
                .collect()
        };
        let unwindowed = names(&|w| w.is_none());
        let mut groups: Vec<u32> = Vec::new();
        for w in windows.iter().flatten() {
            if !groups.contains(w) {
                groups.push(*w);
            }
        }
        let mut branches = Vec::new();
        let mut rules = Vec::new();
        // The unit's own codes.
        if !earlier_only {
            branches.push(
                "SELECT unit, list_name, condition_key\nFROM code_conditions\nWHERE counts_now = 1"
                    .to_string(),
            );
            rules.push("an episode's own codes that count now".to_string());
        } else if !unwindowed.is_empty() {
            branches.push(format!(
                "SELECT unit, list_name, condition_key\nFROM code_conditions\nWHERE counts_now = 1 AND list_name IN ({})",
                unwindowed.join(", ")
            ));
            rules.push(format!(
                "an episode's own codes that count now, for the lists without a window ({})",
                unwindowed.join(", ")
            ));
        }
        for days in &groups {
            let lists = names(&|w| w == Some(*days));
            let only = if lists.len() == engine.lists().len() {
                String::new()
            } else {
                format!(" AND c.list_name IN ({})", lists.join(", "))
            };
            let (bound, span) = if *days == u32::MAX {
                (String::new(), "the whole history".to_string())
            } else if earlier_only {
                (
                    format!("\n AND f.day >= e.day - {days}"),
                    format!("dated in [date - {days}, date - 1]"),
                )
            } else {
                (
                    format!("\n AND f.day >= e.day - {days}"),
                    format!("dated in [date - {days}, date]"),
                )
            };
            let (day, scope) = if earlier_only {
                ("f.day < e.day", "earlier days only")
            } else {
                ("f.day <= e.day", "the same day included, later never")
            };
            rules.push(format!(
                "every code of the same patient's other episodes {span} ({scope}) for {}",
                lists.join(", ")
            ));
            branches.push(format!(
                "SELECT e.unit, c.list_name, c.condition_key\nFROM unit_facts AS e\n\
JOIN unit_facts AS f\n  ON f.patient = e.patient\n AND f.unit <> e.unit\n AND {day}{bound}\n\
JOIN code_conditions AS c ON c.unit = f.unit{only}"
            ));
        }
        step(
            "unit_conditions",
            &format!(
                "Step 13. Lookback (--window {}): an episode's conditions are {}.\n\
An episode without a date, or without a patient, has no other episodes.",
                cfg.window.name(),
                rules.join(";\n")
            ),
            branches.join(&format!("\n{union}\n")),
            hierarchy,
        );
    }

    // 8. Hierarchy.
    let kept = if hierarchy {
        step(
            "superseded",
            "Step 14. Hierarchy: conditions a superior condition of the same unit removes\n\
(judged on the conditions before any removal).",
            format!(
                "SELECT DISTINCT s.unit, h.list_name, h.inferior AS condition_key\nFROM unit_conditions AS s\nJOIN {} AS h\n  ON h.list_name = s.list_name AND h.superior = s.condition_key",
                t.hierarchy
            ),
            false,
        );
        step(
            "kept_conditions",
            "Step 15. The conditions that count after the hierarchy: those of the unit\n\
that no superior condition removes.",
            "SELECT unit, list_name, condition_key\nFROM (\n\
  SELECT unit, list_name, condition_key, 0 AS removed FROM unit_conditions\n\
  UNION ALL\n\
  SELECT unit, list_name, condition_key, 1 AS removed FROM superseded\n\
) AS c\nGROUP BY unit, list_name, condition_key\nHAVING MAX(removed) = 0"
                .into(),
            false,
        );
        "kept_conditions"
    } else {
        "unit_conditions"
    };

    // 9. Weighted sums and flags.
    let sums: Vec<String> = engine
        .specs()
        .iter()
        .map(|s| {
            let l = &engine.lists()[s.list].list;
            format!(
                "SUM(CASE WHEN w.list_name = {} AND w.weighting = {} THEN w.points ELSE 0 END) AS {}",
                literal(&l.name),
                literal(&l.weightings[s.weighting].name),
                quote_ident(&s.name)
            )
        })
        .collect();
    step(
        "index_points",
        "Step 16. Each index: the sum of its weights over the unit's conditions.",
        format!(
            "SELECT k.unit,\n  {}\nFROM {kept} AS k\nJOIN {} AS w\n  ON w.list_name = k.list_name AND w.condition_key = k.condition_key\nGROUP BY k.unit",
            sums.join(",\n  "),
            t.weights
        ),
        false,
    );
    let flag_cols: Vec<(String, String, String)> = engine
        .columns()
        .iter()
        .filter_map(|c| match c.kind {
            ColumnKind::Flag { condition, .. } => {
                let (list, ci) = engine.condition(condition);
                Some((
                    c.name.clone(),
                    list.name.clone(),
                    list.conditions[ci].key.clone(),
                ))
            }
            _ => None,
        })
        .collect();
    if !flag_cols.is_empty() {
        let sel: Vec<String> = flag_cols
            .iter()
            .map(|(name, list, key)| {
                format!(
                    "MAX(CASE WHEN list_name = {} AND condition_key = {} THEN 1 ELSE 0 END) AS {}",
                    literal(list),
                    literal(key),
                    quote_ident(name)
                )
            })
            .collect();
        step(
            "condition_flags",
            "Step 17. --flags: 1 for each condition the unit has after the hierarchy.",
            format!(
                "SELECT unit,\n  {}\nFROM {kept}\nGROUP BY unit",
                sel.join(",\n  ")
            ),
            false,
        );
    }

    // 10. One row per unit.
    let units = if wide {
        "SELECT morbus_row AS unit\nFROM source_rows".to_string()
    } else {
        "SELECT DISTINCT morbus_unit AS unit\nFROM unit_rows".to_string()
    };
    step(
        "units",
        "Step 18. Every unit, with or without conditions.",
        units,
        false,
    );
    let mut sel = vec!["u.unit".to_string()];
    for s in engine.specs() {
        let n = quote_ident(&s.name);
        sel.push(format!(
            "{} AS {n}",
            d.exact_sum(&format!("COALESCE(s.{n}, 0)"))
        ));
    }
    for (name, _, _) in &flag_cols {
        let n = quote_ident(name);
        sel.push(format!("COALESCE(f.{n}, 0) AS {n}"));
    }
    if cols.age.is_some() {
        sel.push("a.age_years".into());
    }
    let mut from = "FROM units AS u\nLEFT JOIN index_points AS s ON s.unit = u.unit".to_string();
    if !flag_cols.is_empty() {
        from.push_str("\nLEFT JOIN condition_flags AS f ON f.unit = u.unit");
    }
    if cols.age.is_some() {
        from.push_str("\nLEFT JOIN unit_facts AS a ON a.unit = u.unit");
    }
    step(
        "unit_totals",
        "Step 19. Each unit's sums (0 without conditions), flags and age.",
        format!("SELECT {}\n{from}", sel.join(",\n  ")),
        false,
    );
    steps
}

/// The last SELECT: the table's rows (wide) or one row per unit (long),
/// then the output columns in the engine's order.
fn final_select(engine: &Engine, opts: &SqlOptions, cols: &Columns, number: usize) -> String {
    let d = opts.dialect;
    let cfg = &opts.config;
    let wide = cfg.layout == Layout::Wide;
    let mut sel: Vec<String> = Vec::new();
    let (from, order) = if wide {
        match row_source(opts, cols) {
            RowSource::Exclude => sel.push("r.* EXCLUDE (morbus_row)".into()),
            RowSource::Composite => sel.push("(r.morbus_source).*".into()),
            RowSource::Rowid => sel.push("r.*".into()),
            RowSource::Named(names) => {
                sel.extend(names.iter().map(|n| format!("r.{}", quote_ident(n))))
            }
        }
        match row_source(opts, cols) {
            RowSource::Rowid if opts.order_by.is_empty() => (
                format!(
                    "FROM {} AS r\nJOIN unit_totals AS t ON t.unit = r.rowid",
                    quote_name(&opts.table)
                ),
                "ORDER BY r.rowid",
            ),
            RowSource::Rowid => (
                format!(
                    "FROM {} AS r\nJOIN source_rows AS n ON n.morbus_rowid = r.rowid\nJOIN unit_totals AS t ON t.unit = n.morbus_row",
                    quote_name(&opts.table)
                ),
                "ORDER BY n.morbus_row",
            ),
            _ => (
                "FROM source_rows AS r\nJOIN unit_totals AS t ON t.unit = r.morbus_row".to_string(),
                "ORDER BY r.morbus_row",
            ),
        }
    } else {
        for c in [&cols.id, &cols.episode].into_iter().flatten() {
            sel.push(format!("r.{}", quote_ident(c)));
        }
        (
            "FROM source_rows AS r\nJOIN unit_totals AS t ON t.unit = r.morbus_row".to_string(),
            "ORDER BY r.morbus_row",
        )
    };
    let tables = Tables::new(&opts.output);
    // Age points and bands come from their tables by a join per column (a
    // handful of rows each), not a subquery per row.
    let mut joins = String::new();
    for (i, c) in engine.columns().iter().enumerate() {
        let n = quote_ident(&c.name);
        let e = match c.kind {
            ColumnKind::Score { spec } => d.score_value(
                &format!("t.{}", quote_ident(&engine.specs()[spec].name)),
                engine.decimals(spec),
            ),
            ColumnKind::ScoreWithAge { spec } => {
                let s = &engine.specs()[spec];
                let list = &engine.lists()[s.list].list;
                let a = format!("age_points_{i}");
                let _ = write!(
                    joins,
                    "\nLEFT JOIN {} AS {a}\n  ON {a}.list_name = {} AND t.age_years >= {a}.from_age\n AND ({a}.to_age IS NULL OR t.age_years <= {a}.to_age)",
                    tables.age_points,
                    literal(&list.name)
                );
                format!(
                    "CASE WHEN t.age_years IS NULL THEN NULL\n       ELSE {} END",
                    d.score_value(
                        &format!("t.{} + COALESCE({a}.points, 0)", quote_ident(&s.name)),
                        engine.decimals(spec)
                    )
                )
            }
            ColumnKind::Band { spec } => {
                let s = &engine.specs()[spec];
                let list = &engine.lists()[s.list].list;
                let x = format!("t.{}", quote_ident(&s.name));
                let b = format!("band_{i}");
                let _ = write!(
                    joins,
                    "\nLEFT JOIN {} AS {b}\n  ON {b}.list_name = {} AND {b}.weighting = {}\n AND ({b}.lower_bound IS NULL OR {x} > {b}.lower_bound OR ({b}.lower_inclusive = 1 AND {x} = {b}.lower_bound))\n AND ({b}.upper_bound IS NULL OR {x} < {b}.upper_bound OR ({b}.upper_inclusive = 1 AND {x} = {b}.upper_bound))",
                    tables.bands,
                    literal(&list.name),
                    literal(&list.weightings[s.weighting].name)
                );
                format!("{b}.band")
            }
            ColumnKind::Flag { .. } => format!("t.{n}"),
        };
        sel.push(format!("{e} AS {n}"));
    }
    let mut from = from + &joins;
    if cols.date.is_some() {
        // The guard is read before any row comes out: a query over too many
        // unreadable dates stops instead of giving scores.
        from.push_str("\nCROSS JOIN date_guard AS g\nWHERE g.passed = 1");
    }
    format!(
        "-- Step {number}. The output: {}, then the score columns of `morbus score`.\nSELECT {}\n{from}\n{order}",
        if wide {
            "every row of the table with its own columns"
        } else {
            "one row per unit, in order of first appearance"
        },
        sel.join(",\n  ")
    )
}

/// The steps that stop the query as `morbus score` stops a run: when more
/// than `--max-unreadable-dates` percent of the units with a non-empty date
/// have no readable one, with the engine's message
/// (`pipeline::history::check_unreadable_dates`).
fn date_guard(
    step: &mut impl FnMut(&'static str, &str, String, bool),
    d: Dialect,
    cfg: &ScoreConfig,
    stop: &str,
) {
    step(
        "date_counts",
        "Step 12c. Units with a date field that is not empty, and those of them\n\
with no readable date.",
        "SELECT COALESCE(SUM(CASE WHEN day IS NULL AND date_given = 1 THEN 1 ELSE 0 END), 0) AS unreadable,\n  \
COALESCE(SUM(date_given), 0) AS non_empty\nFROM unit_facts"
            .into(),
        false,
    );
    step(
        "date_examples",
        "Step 12d. The first three distinct unreadable dates, in row order.",
        "SELECT MAX(CASE WHEN example_rank = 1 THEN example END) AS example_1,\n  \
MAX(CASE WHEN example_rank = 2 THEN example END) AS example_2,\n  \
MAX(CASE WHEN example_rank = 3 THEN example END) AS example_3\n\
FROM (\n  SELECT example, ROW_NUMBER() OVER (ORDER BY first_row) AS example_rank\n  FROM (\n    \
SELECT date_written AS example, MIN(morbus_row) AS first_row\n    FROM row_facts\n    \
WHERE day IS NULL AND date_given = 1\n    GROUP BY date_written\n  ) AS v\n) AS e\nWHERE example_rank <= 3"
            .into(),
        false,
    );
    let max = cfg.max_unreadable_dates;
    let quoted = |x: &str| format!("'''' || {x} || ''''");
    let message = format!(
        "CAST(c.unreadable AS TEXT) || ' of ' || CAST(c.non_empty AS TEXT)\n    \
|| ' episodes with a date (' || {} || '%) have an unreadable date, more than the {max}% allowed by --max-unreadable-dates; e.g. '\n    \
|| {} || COALESCE(', ' || {}, '') || COALESCE(', ' || {}, '')\n    \
|| {}",
        d.two_decimals("c.unreadable * 100.0 / c.non_empty"),
        quoted("x.example_1"),
        quoted("x.example_2"),
        quoted("x.example_3"),
        literal(&format!(
            " (expected {}); give the dates' format with --date-format, or raise --max-unreadable-dates",
            cfg.date_format
        )),
    );
    step(
        "date_guard",
        &format!(
            "Step 12e. --max-unreadable-dates {max}: more than {max}% of the units with a date\n\
unreadable stops the query with morbus's message (the dates' format is likely\n\
another, and each such episode would be scored alone)."
        ),
        format!(
            "SELECT CASE WHEN c.unreadable > 0 AND c.unreadable * 100.0 > {max} * c.non_empty\n  \
THEN {}\n  ELSE 1 END AS passed\nFROM date_counts AS c\nCROSS JOIN date_examples AS x",
            d.stop(&message, stop)
        ),
        false,
    );
}

/// A `--date-format` pattern as SQL: the date text `t` rewritten as
/// `YYYY-MM-DD` (not yet checked as a calendar date), or NULL where the
/// pattern does not read it, as `pipeline::dates` reads it: `%Y` four
/// digits, `%m` and `%d` one or two digits (greedy; exactly two next to
/// another numeric directive), `%b` an English month abbreviation in any
/// case, other characters literally, and after the pattern nothing or a
/// time after `T` or a space. Each choice of one or two digits is one
/// alternative of a CASE (at most four); at most one of them can match.
fn pattern_iso(d: Dialect, pattern: &str, t: &str) -> String {
    #[derive(Clone, Copy, PartialEq)]
    enum Part {
        Year,
        Month(bool),
        Day(bool),
        MonthName,
        Literal(char),
    }
    let chars: Vec<char> = pattern.chars().collect();
    let numeric_at =
        |i: usize| chars.get(i) == Some(&'%') && matches!(chars.get(i + 1), Some('Y' | 'm' | 'd'));
    let mut parts = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        if chars[i] == '%' && i + 1 < chars.len() {
            let packed = (i >= 2 && numeric_at(i - 2)) || numeric_at(i + 2);
            parts.push(match chars[i + 1] {
                'Y' => Part::Year,
                'm' => Part::Month(packed),
                'd' => Part::Day(packed),
                'b' => Part::MonthName,
                other => Part::Literal(other),
            });
            i += 2;
        } else {
            parts.push(Part::Literal(chars[i]));
            i += 1;
        }
    }
    // The directives that may take one digit.
    let free: Vec<usize> = parts
        .iter()
        .enumerate()
        .filter(|(_, p)| matches!(p, Part::Month(false) | Part::Day(false)))
        .map(|(k, _)| k)
        .collect();
    let months = [
        "jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec",
    ];
    let month_case = |pos: usize| {
        let whens: Vec<String> = months
            .iter()
            .enumerate()
            .map(|(k, m)| format!("WHEN '{m}' THEN '{:02}'", k + 1))
            .collect();
        format!("CASE lower(substr({t}, {pos}, 3)) {} END", whens.join(" "))
    };
    let mut alternatives = Vec::new();
    for choice in 0..(1usize << free.len()) {
        let mut shape = Vec::new();
        let mut checks = Vec::new();
        let (mut year, mut month, mut day) = (String::new(), String::new(), String::new());
        let mut pos = 1usize;
        for (k, part) in parts.iter().enumerate() {
            let width = match free.iter().position(|&f| f == k) {
                Some(bit) if choice & (1 << bit) != 0 => 1,
                _ => 2,
            };
            let number = |pos: usize, width: usize| {
                if width == 1 {
                    format!("'0' || substr({t}, {pos}, 1)")
                } else {
                    format!("substr({t}, {pos}, 2)")
                }
            };
            match *part {
                Part::Year => {
                    shape.extend([ShapeChar::Digit; 4]);
                    year = format!("substr({t}, {pos}, 4)");
                    pos += 4;
                }
                Part::Month(_) | Part::Day(_) => {
                    shape.extend(std::iter::repeat_n(ShapeChar::Digit, width));
                    if width == 1 {
                        // Greedy: one digit only when no second follows.
                        checks.push(format!(
                            "NOT ({})",
                            d.starts_with_shape(
                                &format!("substr({t}, {}, 1)", pos + 1),
                                &[ShapeChar::Digit]
                            )
                        ));
                    }
                    let n = number(pos, width);
                    if matches!(part, Part::Month(_)) {
                        month = n;
                    } else {
                        day = n;
                    }
                    pos += width;
                }
                Part::MonthName => {
                    shape.extend([ShapeChar::Any; 3]);
                    checks.push(format!("{} IS NOT NULL", month_case(pos)));
                    month = month_case(pos);
                    pos += 3;
                }
                Part::Literal(c) => {
                    shape.push(ShapeChar::Literal(c));
                    pos += 1;
                }
            }
        }
        let end = pos - 1;
        let mut all = vec![d.starts_with_shape(t, &shape)];
        all.extend(checks);
        all.push(format!(
            "(length({t}) = {end} OR substr({t}, {pos}, 1) IN ('T', ' '))"
        ));
        alternatives.push(format!(
            "WHEN {}
         THEN {year} || '-' || {month} || '-' || {day}",
            all.join(
                "
          AND "
            )
        ));
    }
    format!(
        "CASE {}
    END",
        alternatives.join(
            "
    "
        )
    )
}
