//! Command-line front end. Parses options, calls the library, prints the
//! summary and maps errors to exit codes (see [`morbus::error`]).

use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};

use clap::{Args, Parser, Subcommand, ValueEnum};

use morbus::io::{AtomicFile, End, Extract, Table};
use morbus::lists::{self, Catalogue, Loaded};
use morbus::pipeline::explain::ExplainFormat;
use morbus::pipeline::{self, DateFormat, Edition, Layout, ScoreConfig};
use morbus::provenance::Provenance;
use morbus::score::{Engine, IndexSpec, ScoreOptions, DEFAULT_INDICES};
use morbus::Error;

/// `eprintln!` that never panics: a closed or full standard error loses
/// the message, not the run.
macro_rules! say {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stderr(), $($arg)*);
    }};
}

mod list_cmds;
mod progress;

#[derive(Parser)]
#[command(
    name = "morbus",
    version,
    about = "Comorbidity and frailty covariates from the ICD-10 diagnosis fields of episode extracts",
    long_about = "Comorbidity and frailty covariates (Charlson, Elixhauser, Hospital Frailty Risk Score) \
from the ICD-10 diagnosis fields of hospital episode and claims extracts.\n\n\
These indices support population-level risk adjustment and research, not decisions about an \
individual patient. Review the code lists against local coding standards before use.\n\n\
Exit codes: 0 success, 1 unreadable input data, 2 usage (options, columns, lists), 3 stopped by --strict.",
    after_help = "\
Examples (the demo data of the repository):
  morbus score demo-data/episodes.csv --dx 'dx*' --age age -o scored.csv
  morbus explain demo-data/episodes.csv --dx 'dx*' --index charlson -o explained.csv
  morbus lists"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Add comorbidity and frailty scores to an extract.
    Score(Box<ScoreArgs>),
    /// Show, code by code, how each episode's scores come about.
    Explain(Box<ExplainArgs>),
    /// Compare index specifications on one extract: prevalence, distributions,
    /// c-statistics, logistic models, pairwise tests.
    Compare(Box<CompareArgs>),
    /// Write a SQL script that scores a table inside a database (DuckDB, PostgreSQL,
    /// SQLite) with the same lists and rules as `score`.
    Sql(Box<SqlArgs>),
    /// Code lists: the table of available lists, or show, export, check, diff.
    Lists(ListsArgs),
}

#[derive(Clone, Copy, ValueEnum, PartialEq, Eq)]
enum DialectArg {
    /// DuckDB.
    Duckdb,
    /// PostgreSQL.
    Postgres,
    /// SQLite (3.35 or later).
    Sqlite,
}

#[derive(Clone, Copy, ValueEnum, PartialEq, Eq)]
enum CreateKind {
    /// CREATE VIEW NAME (the list tables are kept, named NAME_code_prefixes, ...).
    View,
    /// CREATE TABLE NAME AS (the temporary list tables are dropped afterwards).
    Table,
}

#[derive(Args)]
#[command(after_help = "\
The script scores the rows of --table as `morbus score` scores the same rows exported to a \
file: same lists (created as tables by the script, from the catalogue including --lists DIR), \
same code reading, exclusions, lookback, hierarchies, weights, age points and bands. A header \
comment records the morbus version, every list's version and checksum, and the options.

Dates are read from a date or timestamp column, from text starting YYYY-MM-DD, or from text \
in the --date-format pattern; more than --max-unreadable-dates percent unreadable stops the \
query with the message `score` gives. In the wide layout the output is every row of the table \
with its columns, then the score columns, in the table's order (--order-by COLS for an \
explicit one); without --columns, SQLite needs a table (its rowid), and without --order-by, \
PostgreSQL needs a table (its ctid) rather than a view.

Example: morbus sql --dialect postgres --table episodes --dx dx1,dx2,dx3 --age age \
--id patient_id --date admitted --lookback 365 --create view scored_episodes | psql")]
struct SqlArgs {
    /// The SQL engine the script is for.
    #[arg(long, value_enum)]
    dialect: DialectArg,
    /// The table or view to score (schema.name allowed).
    #[arg(long, value_name = "NAME")]
    table: String,
    /// Diagnosis columns: names, comma-separated; globs such as 'dx*' need --columns.
    #[arg(long, value_name = "COLS", required = true)]
    dx: Vec<String>,
    /// The table's columns in order, comma-separated: lets --dx use globs, checks every
    /// column named, and lists the columns by name in the wide output.
    #[arg(long, value_name = "COLS")]
    columns: Option<String>,
    /// Split a diagnosis field holding several codes at this character.
    #[arg(long, value_name = "CHAR")]
    dx_sep: Option<String>,
    /// Layout of the table.
    #[arg(long, value_enum, default_value = "wide")]
    layout: LayoutArg,
    /// Id column: the patient (for --lookback) or the unit of a long table.
    #[arg(long, value_name = "COL")]
    id: Option<String>,
    /// Long layout: episode column grouping code rows into episodes.
    #[arg(long, value_name = "COL")]
    episode: Option<String>,
    /// Episode date column (for --lookback): a date, a timestamp or YYYY-MM-DD text.
    #[arg(long, value_name = "COL")]
    date: Option<String>,
    /// Date pattern with %Y %m %d %b, e.g. '%d/%m/%Y' (default: YYYY-MM-DD); read in SQL
    /// exactly as `score` reads it.
    #[arg(long, value_name = "PATTERN")]
    date_format: Option<String>,
    /// Stop the query (with morbus's message) when more than this percentage of the
    /// non-empty episode dates cannot be read, as `score` stops a run.
    #[arg(long, value_name = "PERCENT", default_value = "1")]
    max_unreadable_dates: String,
    /// Score each episode from the same patient's episodes dated within DAYS before it
    /// (inclusive) and itself; `all` for the whole history. One window per list with
    /// LIST=DAYS pairs (`charlson=365,hfrs=730`), as in `score`.
    #[arg(long, value_name = "DAYS")]
    lookback: Option<String>,
    /// Which episodes of a lookback window count: `current-and-earlier` or `earlier-only`
    /// (as in `score`).
    #[arg(long, value_name = "SCOPE", default_value = "current-and-earlier")]
    window: String,
    /// Not taken: `score --edition` changes only the summary's counts of unknown and
    /// extended codes, never a score, and the SQL writes no summary.
    #[arg(long, value_name = "EDITION", hide = true)]
    edition: Option<String>,
    /// Leave out the primary diagnosis of the episode being scored (wide: the first
    /// diagnosis column; long: the rows flagged by --primary).
    #[arg(long)]
    exclude_primary: bool,
    /// Long layout: column flagging the primary-diagnosis row (1, y, yes, true, p, primary).
    #[arg(long, value_name = "COL")]
    primary: Option<String>,
    /// Present-on-admission indicator column (long layout), or columns paired in order
    /// with the --dx columns (wide layout: names, or globs with --columns).
    #[arg(long, value_name = "COLS")]
    poa: Option<String>,
    /// Present-on-admission values that count, comma-separated; `blank` stands for an
    /// empty field (default as in `score`: Y, W and exempt codes, 1 or blank).
    #[arg(long, value_name = "VALUES", default_value = "Y,W,1,blank")]
    poa_values: String,
    /// Index specifications LIST[:WEIGHTING], comma-separated or repeated.
    #[arg(long = "index", value_name = "SPEC")]
    index: Vec<String>,
    /// Age column (whole years): adds `<list>_<weighting>_age` for lists with age points.
    #[arg(long, value_name = "COL")]
    age: Option<String>,
    /// Add a 0/1 column `<list>_<condition>` per condition.
    #[arg(long)]
    flags: bool,
    /// Switch the lists' hierarchies off.
    #[arg(long)]
    no_hierarchy: bool,
    /// Directory of code lists (*.tsv) that add to or replace the built-ins.
    #[arg(long, value_name = "DIR")]
    lists: Option<PathBuf>,
    /// Create a view or a table NAME instead of ending with the query.
    #[arg(long, num_args = 2, value_names = ["view|table", "NAME"])]
    create: Option<Vec<String>>,
    /// Drop an existing view or table NAME (and a view's list tables) first.
    #[arg(long)]
    replace: bool,
    /// Columns that put the rows in the extract's order, comma-separated (e.g. episode_id):
    /// rows are numbered and the output ordered by them. Without it: SQLite's rowid,
    /// PostgreSQL's ctid (a table, not a view), DuckDB's scan order.
    #[arg(long, value_name = "COLS")]
    order_by: Option<String>,
    /// Write the script to this file instead of standard output.
    #[arg(long, short, value_name = "PATH")]
    output: Option<PathBuf>,
    /// Do not print messages on standard error.
    #[arg(long, short)]
    quiet: bool,
}

#[derive(Args)]
#[command(after_help = "\
The unit is the episode (a wide row; a long-layout episode, or each id without --episode); \
with --lookback the scores come from the patient history as in `score`. Without --index every \
weighting of every list is compared. With --age, lists with age points are also compared with \
their age points added (units without a readable age are then left out).

Units are analysed when the outcome is 0 or 1 and every adjustment column has a value; empty, \
NA, N/A, N/K, NK, NULL and . (any case) are missing (counted and left out). Any other outcome value, or a non-number in an \
--adjust column, stops the run with the line (exit 1). A categorical column (--adjust-cat) enters \
the models as 0/1 indicators, one per level except the reference: the first level in byte order \
of the values as written.

The results describe groups of patients for research and risk adjustment, not individuals.

Examples:
  morbus compare demo-data/episodes.csv --dx 'dx*' --outcome died_within_30_days
  morbus compare demo-data/episodes.csv --dx 'dx*' --outcome died_within_30_days --id patient_id --date admission_date --lookback 365 --json compare.json
  morbus compare demo-data/episodes.csv --dx 'dx*' --outcome died_within_30_days --index charlson,elixhauser --adjust-spline age:4 --adjust-cat sex --by site --folds 5 --id patient_id --cluster patient_id --report compare.html")]
struct CompareArgs {
    #[command(flatten)]
    input: InputArgs,
    /// The 0/1 outcome column.
    #[arg(long, value_name = "COL", required = true)]
    outcome: String,
    /// Numeric adjustment columns for the models (e.g. age), comma-separated or repeated.
    #[arg(long, value_name = "COLS")]
    adjust: Vec<String>,
    /// Categorical adjustment columns (e.g. sex), one indicator per level except the first.
    #[arg(long = "adjust-cat", value_name = "COLS")]
    adjust_cat: Vec<String>,
    /// Numeric adjustment columns entered as restricted cubic splines: COL or COL:K with K
    /// knots (3 to 7, default 4) at Harrell's quantiles; the column's linear term is included.
    #[arg(long = "adjust-spline", value_name = "COL[:K]")]
    adjust_spline: Vec<String>,
    /// Cluster column (e.g. the patient id): cluster-robust standard errors of the models and
    /// c-statistic intervals and tests allowing for clusters (Obuchowski 1997).
    #[arg(long, value_name = "COL")]
    cluster: Option<String>,
    /// Provider column (e.g. a site): observed/expected ratios per provider under each
    /// index, exact intervals, funnel limits at 95% and 99.8%, agreement between indices.
    #[arg(long, value_name = "COL")]
    by: Option<String>,
    /// Providers with an expected count below this are listed but not judged.
    #[arg(long, value_name = "N", default_value_t = morbus::compare::DEFAULT_MIN_EXPECTED)]
    min_expected: f64,
    /// Widen the funnel limits for over-dispersion (Spiegelhalter 2005, QSHC).
    #[arg(long, value_enum, value_name = "MODE")]
    overdispersion: Option<OverdispersionArg>,
    /// Cross-validate each index's model in K folds formed by --id (a patient's episodes
    /// stay together): c-statistic, calibration intercept and slope, Brier score.
    #[arg(long, value_name = "K")]
    folds: Option<usize>,
    /// Seed of the fold assignment.
    #[arg(long, value_name = "N", default_value_t = morbus::compare::DEFAULT_SEED)]
    seed: u64,
    /// Compare every index with this one (NAME or LIST:WEIGHTING) instead of all pairs.
    #[arg(long, value_name = "SPEC")]
    reference: Option<String>,
    /// Also write the results as JSON to this file.
    #[arg(long, value_name = "FILE")]
    json: Option<PathBuf>,
    /// Also write a self-contained HTML report with charts to this file.
    #[arg(long, value_name = "FILE")]
    report: Option<PathBuf>,
}

#[derive(Clone, Copy, ValueEnum, PartialEq, Eq)]
enum OverdispersionArg {
    /// Limits widened by the square root of the dispersion factor.
    Multiplicative,
    /// A between-provider variance added (random effects).
    Additive,
}

#[derive(Args)]
#[command(after_help = "\
Examples:
  morbus explain demo-data/episodes.csv --dx 'dx*' --index charlson -o explained.csv
  morbus explain demo-data/episodes.csv --dx 'dx*' --id patient_id --date admission_date --lookback 365 --json -o explained.jsonl
  morbus explain demo-data/episodes-long.csv --layout long --id patient_id --episode episode_id --dx code --index hfrs -o explained.csv")]
struct ExplainArgs {
    #[command(flatten)]
    input: InputArgs,
    /// Write JSON lines instead of CSV (numbers as JSON numbers, empty values as null).
    #[arg(long)]
    json: bool,
    /// Name each episode by this column too (its value on the episode's row; long layout:
    /// the episode's first non-empty value), placed after the id and episode columns.
    #[arg(long, value_name = "COL")]
    label: Option<String>,
    /// Output path (`.gz` compresses, `.parquet` writes Parquet); standard output by default.
    #[arg(long, short, value_name = "PATH")]
    output: Option<PathBuf>,
    /// Output format (default: Parquet for a `.parquet`, `.parq` or `.pq` path, else CSV).
    #[arg(long, value_enum, value_name = "FORMAT")]
    output_format: Option<FormatArg>,
}

#[derive(Clone, Copy, ValueEnum, PartialEq, Eq)]
enum FormatArg {
    /// Delimited text (gzip-compressed for a `.gz` path).
    Csv,
    /// Apache Parquet: typed score columns; a Parquet input's own columns copied as they are.
    Parquet,
}

#[derive(Clone, Copy, ValueEnum, PartialEq, Eq)]
enum LayoutArg {
    /// One row per episode, several diagnosis columns.
    Wide,
    /// One code per row, grouped by --id.
    Long,
}

/// `--edition`.
#[derive(Clone, Copy, ValueEnum)]
enum EditionArg {
    /// WHO ICD-10, 2019 edition.
    Who,
    /// ICD-10-CM, April 2026 release (fiscal year 2026).
    Cm,
    /// Either (a code is known when one of the two has it).
    Any,
}

/// Options shared by every command that reads an extract.
#[derive(Args, Clone)]
struct InputArgs {
    /// Input CSV (plain or gzip) or Parquet (recognised by its content); `-` or nothing reads
    /// standard input.
    input: Option<PathBuf>,
    /// Diagnosis columns: names and/or globs, comma-separated (e.g. 'dx*').
    #[arg(long, value_name = "COLS", required = true)]
    dx: Vec<String>,
    /// Split a diagnosis field holding several codes at this character.
    #[arg(long, value_name = "CHAR")]
    dx_sep: Option<String>,
    /// Field delimiter of the input (and output): a character, or `tab`.
    #[arg(long, value_name = "CHAR", default_value = ",")]
    delimiter: String,
    /// Layout of the extract.
    #[arg(long, value_enum, default_value = "wide")]
    layout: LayoutArg,
    /// Id column: the patient (for --lookback) or the unit of a long extract.
    #[arg(long, value_name = "COL")]
    id: Option<String>,
    /// Long layout: episode column grouping code rows into episodes (one output row per episode).
    #[arg(long, value_name = "COL")]
    episode: Option<String>,
    /// Episode date column (for --lookback).
    #[arg(long, value_name = "COL")]
    date: Option<String>,
    /// Date pattern with %Y %m %d %b, e.g. '%d/%m/%Y' (default: YYYY-MM-DD).
    #[arg(long, value_name = "PATTERN")]
    date_format: Option<String>,
    /// Score each episode from the same patient's episodes dated within DAYS before it
    /// (inclusive) and itself; `all` for the whole history. One window per list with
    /// LIST=DAYS pairs (`charlson=365,hfrs=730`); a bare DAYS beside them is the window of
    /// the lists not named, and lists without a window are scored from the episode alone.
    #[arg(long, value_name = "DAYS")]
    lookback: Option<String>,
    /// Which episodes of a lookback window count: `current-and-earlier` (the episode itself
    /// and every episode of the window up to and including its day) or `earlier-only`
    /// (only episodes dated before its day: its own codes and those of other episodes of
    /// the same day are left out).
    #[arg(long, value_name = "SCOPE", default_value = "current-and-earlier")]
    window: String,
    /// Leave out the primary diagnosis of the episode being scored (wide: the first
    /// diagnosis column; long: the rows flagged by --primary).
    #[arg(long)]
    exclude_primary: bool,
    /// Long layout: column flagging the primary-diagnosis row (1, y, yes, true, p, primary).
    #[arg(long, value_name = "COL")]
    primary: Option<String>,
    /// Present-on-admission indicator column (long layout), or columns paired in order
    /// with the --dx columns (wide layout: names or globs, e.g. 'poa*'); codes of the
    /// episode being scored count only when their indicator is one of --poa-values.
    #[arg(long, value_name = "COLS")]
    poa: Option<String>,
    /// Present-on-admission values that count, comma-separated; `blank` stands for an
    /// empty field. The default follows the ICD-10-CM reporting guidelines: Y, W and
    /// exempt codes (1 or blank) count, N and U do not.
    #[arg(long, value_name = "VALUES", default_value = "Y,W,1,blank")]
    poa_values: String,
    /// Stop (exit 1) when more than this percentage of the non-empty episode dates
    /// cannot be read with the date format.
    #[arg(long, value_name = "PERCENT", default_value = "1")]
    max_unreadable_dates: String,
    /// Index specifications LIST[:WEIGHTING], comma-separated or repeated (the lists and
    /// weightings are listed in the full help, --help).
    #[arg(long = "index", value_name = "SPEC", long_help = index_help())]
    index: Vec<String>,
    /// Age column (whole years): adds `<list>_<weighting>_age` for lists with age points.
    #[arg(long, value_name = "COL")]
    age: Option<String>,
    /// Switch the lists' hierarchies off.
    #[arg(long)]
    no_hierarchy: bool,
    /// Directory of code lists (*.tsv) that add to or replace the built-ins.
    #[arg(long, value_name = "DIR")]
    lists: Option<PathBuf>,
    /// ICD-10 editions a code is looked up in: a well-shaped code in none of them (nor its
    /// category or subcategory) is counted as unknown, one whose category or subcategory
    /// is in one of them as extended (a national variant). Both still score by prefix.
    #[arg(long, value_enum, default_value = "any")]
    edition: EditionArg,
    /// Stop (exit 3) at the first warning, with its line: an invalid code, an unknown code
    /// (see --edition; extended codes do not stop), a missing or
    /// unreadable age or date, a row with an empty --id, or a warning of a list loaded
    /// with --lists. Input that cannot be read at all (wrong field count, a quote never
    /// closed) fails with exit 1, with or without --strict.
    #[arg(long)]
    strict: bool,
    /// Do not print the summary or the progress line on standard error.
    #[arg(long, short)]
    quiet: bool,
    /// Memory limit of a run that holds the extract (--lookback, --episode, --keep,
    /// explain): the wide layout's input rows, kept for the output, take at most half of
    /// it in memory and the rest waits in a temporary file; a `score` or `explain` history
    /// over the other half is partitioned by patient into temporary files and scored a
    /// partition at a time, with the same output (e.g. 512MiB, 2GiB).
    #[arg(long, value_name = "LIMIT", default_value = "1GiB")]
    memory: String,
    /// Directory for temporary files (default: the system's).
    #[arg(long, value_name = "DIR")]
    temp_dir: Option<PathBuf>,
    /// Worker threads for wide scoring and for `compare`'s numerics (default: one per core;
    /// at most 256).
    #[arg(long, value_name = "N", default_value_t = 0)]
    threads: usize,
}

#[derive(Args)]
#[command(after_help = "\
Examples:
  morbus score demo-data/episodes.csv --dx 'dx*' --age age -o scored.csv
  morbus score demo-data/episodes.csv --dx 'dx*' --index charlson:charlson1987,hfrs --flags --provenance scored.json -o scored.csv
  morbus score demo-data/episodes-long.csv --layout long --id patient_id --episode episode_id --dx code --date admission_date --lookback 365 -o episodes-scored.csv")]
struct ScoreArgs {
    #[command(flatten)]
    input: InputArgs,
    /// Add a 0/1 column `<list>_<condition>` per condition.
    #[arg(long)]
    flags: bool,
    /// Long layout: carry these columns (names, comma-separated or repeated) into each output
    /// row after the id and episode: the unit's first non-empty value; units whose rows give
    /// other values are counted, as for date and age.
    #[arg(long, value_name = "COLS")]
    keep: Vec<String>,
    /// Output path (`.gz` compresses, `.parquet` writes Parquet); standard output by default.
    #[arg(long, short, value_name = "PATH")]
    output: Option<PathBuf>,
    /// Output format (default: Parquet for a `.parquet`, `.parq` or `.pq` path, else CSV).
    #[arg(long, value_enum, value_name = "FORMAT")]
    output_format: Option<FormatArg>,
    /// Write what produced the output (tool, lists with versions and
    /// checksums, options, counts) as JSON to this file.
    #[arg(long, value_name = "FILE")]
    provenance: Option<PathBuf>,
}

#[derive(Clone, Copy, ValueEnum, PartialEq, Eq)]
enum ExportFormat {
    /// The list file (canonical text), loadable with --lists.
    List,
    /// A flat CSV table of code prefixes with their conditions and weights.
    Prefixes,
}

/// Without a subcommand: a table of the available lists.
#[derive(Args)]
#[command(after_help = "\
Examples:
  morbus lists
  morbus lists show charlson
  morbus lists export charlson my-lists/ --force")]
struct ListsArgs {
    /// Also load the lists found in this directory (they replace built-ins
    /// of the same name).
    #[arg(long, value_name = "DIR", global = true)]
    lists: Option<PathBuf>,
    #[command(subcommand)]
    command: Option<ListsCommand>,
}

#[derive(Subcommand)]
enum ListsCommand {
    /// Everything a list holds: metadata, conditions with their codes,
    /// hierarchy, weightings with their weights, age points and bands.
    #[command(after_help = "\
Examples:
  morbus lists show charlson
  morbus lists show hfrs --json")]
    Show {
        /// List name (or path to a list file).
        name: String,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Write an editable copy DIR/NAME.tsv that `--lists DIR` loads back, or with
    /// `--format prefixes` the flat table DIR/NAME-prefixes.csv for SQL.
    #[command(after_help = "\
Examples:
  morbus lists export charlson my-lists/ --force
  morbus lists export elixhauser my-lists/ --force
  morbus lists export charlson sql-lists/ --format prefixes --force")]
    Export {
        /// List name (or path to a list file).
        name: String,
        /// Directory to write to (created if needed).
        dir: PathBuf,
        /// Replace the file if it exists.
        #[arg(long)]
        force: bool,
        /// `list` (the editable list file) or `prefixes` (CSV: list, version, condition,
        /// label, prefix, entry, points per weighting; one row per code prefix).
        #[arg(long, value_enum, default_value = "list")]
        format: ExportFormat,
    },
    /// Validate a list file, or every list of a directory: prints each error
    /// and warning with file and line; exits 2 on errors.
    #[command(after_help = "\
Examples:
  morbus lists check code-lists/
  morbus lists check code-lists/charlson.tsv")]
    Check {
        /// A list file or a directory of lists.
        path: PathBuf,
    },
    /// What changed from list A to list B: conditions, codes per condition,
    /// hierarchy, weights, bands, age points, version and sources. A and B may
    /// both be directories (as `lists export` writes): lists are paired by name,
    /// and lists present on one side only are reported.
    #[command(after_help = "\
Examples:
  morbus lists diff charlson code-lists/charlson.tsv
  morbus lists diff charlson code-lists/charlson.tsv --json")]
    Diff {
        /// List name, path to a list file, or directory of lists (before).
        a: String,
        /// List name, path to a list file, or directory of lists (after).
        b: String,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
}

/// The full help of `--index`: the built-in lists with their weightings and
/// defaults, from the catalogue itself.
fn index_help() -> String {
    let cat = Catalogue::builtin();
    let mut s = String::from(
        "Index specifications LIST[:WEIGHTING], comma-separated or repeated; a bare LIST takes \
         its default weighting.\n\nBuilt-in lists and their weightings (--lists DIR adds more; \
         `morbus lists` shows them):",
    );
    for l in cat.lists() {
        let w: Vec<String> = l
            .weightings
            .iter()
            .map(|w| {
                if w.name == l.default_weighting {
                    format!("{} (default)", w.name)
                } else {
                    w.name.clone()
                }
            })
            .collect();
        s.push_str(&format!("\n  {}: {}", l.name, w.join(", ")));
    }
    s.push_str(&format!(
        "\n\nWithout --index: {DEFAULT_INDICES} (compare: every weighting of every list)."
    ));
    s
}

/// On a terminal, says after a moment that the command waits for data on
/// standard input, and how to name a file instead; quiet once data came.
struct StdinNotice(Option<std::sync::Arc<std::sync::atomic::AtomicBool>>);

impl StdinNotice {
    fn new(a: &InputArgs, command: &str) -> StdinNotice {
        use std::sync::atomic::{AtomicBool, Ordering};
        let stdin = a.input.as_ref().is_none_or(|p| p.as_os_str() == "-");
        if !stdin || !std::io::stdin().is_terminal() {
            return StdinNotice(None);
        }
        let done = std::sync::Arc::new(AtomicBool::new(false));
        let seen = done.clone();
        let command = command.to_string();
        let after = std::env::var("MORBUS_STDIN_NOTICE_MS")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(1500);
        std::thread::spawn(move || {
            std::thread::sleep(std::time::Duration::from_millis(after));
            if !seen.load(Ordering::SeqCst) {
                eprintln!(
                    "morbus: waiting for CSV on standard input (type or paste it, then Ctrl-D; \
                     Ctrl-C stops). To read a file, name it: morbus {command} FILE.csv --dx ..."
                );
            }
        });
        StdinNotice(Some(done))
    }
}

impl Drop for StdinNotice {
    fn drop(&mut self) {
        if let Some(d) = &self.0 {
            d.store(true, std::sync::atomic::Ordering::SeqCst);
        }
    }
}

/// Runs the command line and returns the exit code.
pub fn run() -> i32 {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return code;
        }
    };
    #[cfg(unix)]
    if let Err(e) = morbus::io::atomic::remove_temporaries_on_signals() {
        say!("morbus: warning: cannot watch for interrupts ({e}); an interrupted run may leave a temporary file");
    }
    let result = match cli.command {
        Command::Score(a) => score(*a),
        Command::Explain(a) => explain(*a),
        Command::Compare(a) => compare(*a),
        Command::Sql(a) => sql(*a),
        Command::Lists(a) => lists_command(a),
    };
    match result {
        Ok(()) => 0,
        // The reader of standard output chose to stop (`| head`): the run
        // ends quietly, as Unix tools do.
        Err(_) if morbus::io::atomic::stdout_closed_by_reader() => 0,
        Err(e) => {
            say!("morbus: error: {e}");
            e.exit_code()
        }
    }
}

fn one_char(text: &str, what: &str) -> Result<u8, Error> {
    match text {
        "tab" | "\\t" => return Ok(b'\t'),
        _ => {}
    }
    let b = text.as_bytes();
    if b.len() == 1 && b[0].is_ascii() && b[0] != b'"' && b[0] != b'\n' && b[0] != b'\r' {
        Ok(b[0])
    } else {
        Err(Error::Usage(format!(
            "{what} must be one ASCII character (or 'tab'), not '{text}'"
        )))
    }
}

/// The built-in lists plus those of `--lists DIR` (which replace built-ins of
/// the same name, saying so on stderr).
/// With `strict`, a list loaded with warnings stops the run (exit 3).
fn catalogue(dir: Option<&PathBuf>, quiet: bool, strict: bool) -> Result<Catalogue, Error> {
    let mut cat = Catalogue::builtin();
    if let Some(dir) = dir {
        let loaded = lists::load_dir(dir)?;
        if loaded.is_empty() {
            return Err(Error::Usage(format!(
                "no code lists (*.tsv) found in {}",
                dir.display()
            )));
        }
        if strict {
            let warnings: Vec<String> = loaded
                .iter()
                .flat_map(|l| l.warnings.iter().map(|w| w.to_string()))
                .collect();
            if !warnings.is_empty() {
                return Err(Error::Strict {
                    line: None,
                    message: format!("code list warning: {}", warnings.join("; ")),
                });
            }
        }
        for l in loaded {
            for w in &l.warnings {
                say!("morbus: {w}");
            }
            let name = l.list.name.clone();
            let origin = l.list.origin.clone();
            if let Some(old) = cat.insert(l.list) {
                if !quiet {
                    say!("morbus: list '{name}' from {origin} replaces the {old} list");
                }
            }
        }
    }
    Ok(cat)
}

fn engine_for(a: &InputArgs, flags: bool) -> Result<(Catalogue, Engine), Error> {
    engine_with_default(a, flags, |_| {
        IndexSpec::parse_many(DEFAULT_INDICES).map_err(Error::from)
    })
}

fn engine_with_default(
    a: &InputArgs,
    flags: bool,
    default: impl FnOnce(&Catalogue) -> Result<Vec<IndexSpec>, Error>,
) -> Result<(Catalogue, Engine), Error> {
    let cat = catalogue(a.lists.as_ref(), a.quiet, a.strict)?;
    let specs = if a.index.is_empty() {
        default(&cat)?
    } else {
        IndexSpec::parse_many(&a.index.join(","))?
    };
    let options = ScoreOptions {
        hierarchy: !a.no_hierarchy,
        flags,
        age: a.age.is_some(),
    };
    let engine = Engine::new(&cat, &specs, options)?;
    Ok((cat, engine))
}

/// Column names given comma-separated and/or repeated.
fn names_list(values: &[String]) -> Vec<String> {
    values
        .iter()
        .flat_map(|v| v.split(','))
        .map(|v| v.trim().to_string())
        .filter(|v| !v.is_empty())
        .collect()
}

/// The history options of `score`, `explain`, `compare` and `sql`, read
/// and checked in one place (the same messages for every command).
struct HistoryOptions {
    lookback: Option<u32>,
    lookback_lists: Vec<(String, u32)>,
    window: pipeline::WindowScope,
    date_format: DateFormat,
}

fn history_options(
    lookback: Option<&str>,
    window: &str,
    date_format: Option<&str>,
    poa_values: &str,
    date_without_episode: bool,
) -> Result<HistoryOptions, Error> {
    let (days, lookback_lists) = match lookback {
        None => (None, Vec::new()),
        Some(t) => pipeline::parse_lookback(t, "--lookback")?,
    };
    let scope = pipeline::WindowScope::parse(window).ok_or_else(|| {
        Error::Usage(format!(
            "--window takes 'current-and-earlier' or 'earlier-only', not '{window}'"
        ))
    })?;
    if scope != pipeline::WindowScope::default() && lookback.is_none() {
        return Err(Error::Usage(
            "--window is used with --lookback DAYS (or 'all')".into(),
        ));
    }
    let date_format = match date_format {
        None => DateFormat::Iso,
        Some(p) => DateFormat::from_pattern_checked(p)
            .map_err(|why| Error::Usage(format!("--date-format '{p}' {why}")))?,
    };
    if poa_values.trim().is_empty() {
        return Err(Error::Usage(
            "--poa-values is empty; name the values that count (e.g. Y,W,1,blank)".into(),
        ));
    }
    if date_without_episode && lookback.is_none() {
        return Err(Error::Usage(
            "--date is used with --lookback DAYS (or 'all')".into(),
        ));
    }
    Ok(HistoryOptions {
        lookback: days,
        lookback_lists,
        window: scope,
        date_format,
    })
}

fn config_for(a: &InputArgs) -> Result<ScoreConfig, Error> {
    let layout = match a.layout {
        LayoutArg::Wide => Layout::Wide,
        LayoutArg::Long => Layout::Long,
    };
    if layout == Layout::Long && a.id.is_none() {
        return Err(Error::Usage("--layout long needs --id COL".into()));
    }
    let HistoryOptions {
        lookback,
        lookback_lists,
        window,
        date_format,
    } = history_options(
        a.lookback.as_deref(),
        &a.window,
        a.date_format.as_deref(),
        &a.poa_values,
        a.date.is_some() && a.episode.is_none(),
    )?;
    Ok(ScoreConfig {
        episode: a.episode.clone(),
        date: a.date.clone(),
        date_format,
        lookback,
        lookback_lists,
        window,
        memory: morbus::pipeline::rows_store::parse_memory(&a.memory).ok_or_else(|| {
            Error::Usage(format!(
                "--memory takes a size such as 512MiB or 2GiB, not '{}'",
                a.memory
            ))
        })?,
        temp_dir: a.temp_dir.clone(),
        exclude_primary: a.exclude_primary,
        primary: a.primary.clone(),
        poa: a.poa.clone(),
        poa_values: pipeline::poa_values_from(std::slice::from_ref(&a.poa_values)),
        max_unreadable_dates: pipeline::percent_from(&a.max_unreadable_dates)
            .map_err(|why| Error::Usage(format!("--max-unreadable-dates {why}")))?,
        dx: a.dx.clone(),
        dx_sep: a
            .dx_sep
            .as_deref()
            .map(|s| one_char(s, "--dx-sep"))
            .transpose()?,
        layout,
        id: a.id.clone(),
        age: a.age.clone(),
        delimiter: one_char(&a.delimiter, "--delimiter")?,
        strict: a.strict,
        edition: match a.edition {
            EditionArg::Who => Edition::Who,
            EditionArg::Cm => Edition::Cm,
            EditionArg::Any => Edition::Any,
        },
        threads: a.threads,
        ..ScoreConfig::default()
    })
}

/// An optional file output for [`morbus::io::check_distinct`].
fn file_end<'a>(role: &'a str, path: &'a Option<PathBuf>) -> Option<End<'a>> {
    path.as_deref().map(|p| End::new(role, Some(p)))
}

fn score(a: ScoreArgs) -> Result<(), Error> {
    let (_cat, engine) = engine_for(&a.input, a.flags)?;
    let mut cfg = config_for(&a.input)?;
    cfg.keep = names_list(&a.keep);
    if !cfg.keep.is_empty() && cfg.layout == Layout::Wide {
        return Err(Error::Usage(
            "--keep is for the long layout; a wide output keeps every input column already".into(),
        ));
    }
    morbus::io::check_distinct(
        &[End::new("input", a.input.input.as_deref())],
        &[
            Some(End::new("--output", a.output.as_deref())),
            file_end("--provenance", &a.provenance),
        ]
        .into_iter()
        .flatten()
        .collect::<Vec<_>>(),
    )?;
    // Create the provenance file (a temporary file beside it) before the
    // output and the run, so that an unwritable path fails before any work
    // is done; it is written at the end, from the run's final counts.
    let provenance_file = a
        .provenance
        .as_deref()
        .map(morbus::io::AtomicFile::create)
        .transpose()?;
    let parquet_out = wants_parquet(a.output_format, a.output.as_deref());
    let run = || -> Result<pipeline::Summary, Error> {
        // A long output keeps only the id and episode columns; a Parquet
        // output of a Parquet input copies the input's own columns from it:
        // either way the pipeline needs only the columns it reads.
        let only_read = parquet_out || cfg.layout == Layout::Long;
        let mut input = open_extract("score", &a.input, &cfg, only_read, &[])?;
        let mut output = input.open_output(
            a.output.as_deref(),
            parquet_out,
            Table::Scores,
            &engine,
            &cfg,
        )?;
        let show = !a.input.quiet && std::io::stderr().is_terminal();
        let mut bar = progress::ProgressLine::new(input.size).with_rows(input.rows);
        let mut on_progress = |p| {
            if show {
                bar.update(p)
            }
        };
        // The input's size lets a history that will not fit go to
        // partitions early (a hint; the output is the same without it).
        // A Parquet output takes the scores as values, not as text.
        let cfg = pipeline::ScoreConfig {
            input_size: input.size,
            output_form: if parquet_out {
                pipeline::OutputForm::ValueRecords
            } else {
                pipeline::OutputForm::Text
            },
            ..cfg.clone()
        };
        // A Parquet input without history is scored typed from its record
        // batches to a typed output.
        let result = match input.score_plain(&engine, &cfg, &mut output, &mut on_progress) {
            Some(r) => r,
            None => {
                // A history run reads a Parquet input's typed rows too. In
                // the wide layout it writes the scores only: a Parquet
                // output copies the input's own columns from the file, a
                // text output formats them in front of the scores.
                let rows = input.take_input()?;
                #[allow(unused_labels)]
                'run: {
                    #[cfg(feature = "parquet")]
                    if cfg.layout == Layout::Wide && !parquet_out {
                        if let Some(joined) = input.joined_text(&mut output.writer, cfg.delimiter) {
                            break 'run joined.and_then(|mut joined| {
                                let s = pipeline::score_stream_observed(
                                    &engine,
                                    &cfg,
                                    rows,
                                    &mut joined,
                                    &mut on_progress,
                                )?;
                                joined.finish()?;
                                Ok(s)
                            });
                        }
                    }
                    pipeline::score_stream_observed(
                        &engine,
                        &cfg,
                        rows,
                        &mut output.writer,
                        &mut on_progress,
                    )
                }
            }
        };
        if show {
            bar.finish();
        }
        let summary = result?;
        output.finish()?;
        Ok(summary)
    };
    // A run that fails drops the provenance file's guard: no provenance for
    // a run that did not finish.
    let summary = run()?;
    if let Some(file) = provenance_file {
        let shown = |p: &Option<PathBuf>| {
            p.as_ref()
                .filter(|p| p.as_os_str() != "-")
                .map(|p| p.display().to_string())
        };
        let prov = Provenance::new(&engine, &cfg, &summary)
            .with_files(shown(&a.input.input), shown(&a.output));
        file.write_and_commit(prov.to_json().as_bytes())?;
    }
    if !a.input.quiet {
        say!("{}", summary.report());
    }
    Ok(())
}

fn explain(a: ExplainArgs) -> Result<(), Error> {
    let (_cat, engine) = engine_for(&a.input, false)?;
    let mut cfg = config_for(&a.input)?;
    cfg.keep = a.label.iter().cloned().collect();
    let parquet_out = wants_parquet(a.output_format, a.output.as_deref());
    if parquet_out && a.json {
        return Err(Error::Usage(
            "--json writes JSON lines; leave it out for a Parquet output".into(),
        ));
    }
    morbus::io::check_distinct(
        &[End::new("input", a.input.input.as_deref())],
        &[End::new("--output", a.output.as_deref())],
    )?;
    // explain keeps only the id and episode columns.
    let mut input = open_extract("explain", &a.input, &cfg, true, &[])?;
    let mut output = input.open_output(
        a.output.as_deref(),
        parquet_out,
        Table::Explain,
        &engine,
        &cfg,
    )?;
    let format = if a.json {
        ExplainFormat::JsonLines
    } else {
        ExplainFormat::Csv
    };
    // The input's size lets a history that will not fit go to partitions
    // early (a hint; the output is the same without it). A Parquet output
    // takes the records' cells as values, not as text.
    let cfg = ScoreConfig {
        input_size: input.size,
        output_form: if parquet_out {
            pipeline::OutputForm::ValueRecords
        } else {
            pipeline::OutputForm::Text
        },
        ..cfg
    };
    let summary = pipeline::explain_stream(
        &engine,
        &cfg,
        format,
        input.take_input()?,
        &mut output.writer,
    )?;
    output.finish()?;
    if !a.input.quiet {
        say!("{}", summary.report());
    }
    Ok(())
}

/// Opens the input of a run (see [`Extract::open`]); the command line keeps
/// the Parquet decoder's caught panics off standard error.
fn open_extract(
    command: &str,
    a: &InputArgs,
    cfg: &ScoreConfig,
    only_read: bool,
    extra: &[String],
) -> Result<Extract, Error> {
    #[cfg(feature = "parquet")]
    morbus::io::parquet::quiet_decoder_panics();
    // Opening reads the first bytes: the notice is for a wait before them.
    let _notice = StdinNotice::new(a, command);
    Extract::open(a.input.as_deref(), cfg, only_read, extra)
}

/// Whether the output is Parquet: as asked, or by the output's name.
fn wants_parquet(format: Option<FormatArg>, path: Option<&std::path::Path>) -> bool {
    match format {
        Some(f) => f == FormatArg::Parquet,
        None => path.is_some_and(morbus::io::is_parquet_path),
    }
}

fn split_columns(items: &[String]) -> Vec<String> {
    items
        .iter()
        .flat_map(|s| s.split(','))
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
        .collect()
}

fn compare(a: CompareArgs) -> Result<(), Error> {
    let (_cat, engine) =
        engine_with_default(&a.input, false, |cat| Ok(morbus::compare::all_specs(cat)))?;
    let cfg = config_for(&a.input)?;
    let opts = morbus::compare::CompareOptions {
        outcome: a.outcome.trim().to_string(),
        adjust: split_columns(&a.adjust),
        adjust_categorical: split_columns(&a.adjust_cat),
        splines: split_columns(&a.adjust_spline)
            .iter()
            .map(|s| morbus::compare::parse_spline(s))
            .collect::<Result<_, _>>()?,
        by: a.by.as_ref().map(|b| b.trim().to_string()),
        cluster: a.cluster.as_ref().map(|c| c.trim().to_string()),
        min_expected: a.min_expected,
        overdispersion: a.overdispersion.map(|o| match o {
            OverdispersionArg::Multiplicative => morbus::compare::Overdispersion::Multiplicative,
            OverdispersionArg::Additive => morbus::compare::Overdispersion::Additive,
        }),
        folds: a.folds,
        seed: a.seed,
        reference: a.reference.clone(),
    };
    morbus::io::check_distinct(
        &[End::new("input", a.input.input.as_deref())],
        &[
            Some(End::new("standard output", None)),
            file_end("--json", &a.json),
            file_end("--report", &a.report),
        ]
        .into_iter()
        .flatten()
        .collect::<Vec<_>>(),
    )?;
    morbus::io::atomic::check_stdout_open()?;
    // Created before the run: an unwritable path fails before any work.
    let json_file = a.json.as_deref().map(AtomicFile::create).transpose()?;
    let report_file = a.report.as_deref().map(AtomicFile::create).transpose()?;
    let mut wanted = vec![opts.outcome.clone()];
    wanted.extend(opts.adjust.iter().cloned());
    wanted.extend(opts.adjust_categorical.iter().cloned());
    wanted.extend(opts.splines.iter().map(|(c, _)| c.clone()));
    wanted.extend(opts.by.iter().cloned());
    wanted.extend(opts.cluster.iter().cloned());
    if opts.folds.is_some() {
        wanted.extend(cfg.id.iter().cloned());
    }
    let mut input = open_extract("compare", &a.input, &cfg, true, &wanted)?;
    // A Parquet input's rows are read typed (rows named `row N of FILE`).
    let rows = input.take_input()?;
    let (result, summary) = morbus::compare::compare(&engine, &cfg, &opts, rows)?;
    if let Some(file) = json_file {
        let text = morbus::compare::json_text(&result)?;
        file.write_and_commit((text + "\n").as_bytes())?;
    }
    if let Some(file) = report_file {
        file.write_and_commit(morbus::compare::html_report(&result).as_bytes())?;
    }
    let mut out = morbus::io::atomic::stdout();
    out.write_all(morbus::compare::text_table(&result).as_bytes())
        .and_then(|()| out.flush())
        .map_err(|e| Error::io("cannot write output", e))?;
    if !a.input.quiet {
        // compare writes no rows: leave that count out of the shared summary.
        say!("{}", summary.report().replacen(", 0 rows written", "", 1));
    }
    Ok(())
}

fn list_table(cat: &Catalogue) -> Result<(), Error> {
    let mut out = morbus::io::atomic::stdout();
    let rows: Vec<[String; 8]> = cat
        .lists()
        .iter()
        .map(|l| {
            [
                list_cmds::shown(&l.name),
                list_cmds::shown(&l.version),
                l.conditions.len().to_string(),
                l.code_entries().to_string(),
                list_cmds::shown(
                    &l.weightings
                        .iter()
                        .map(|w| {
                            if w.name == l.default_weighting {
                                format!("{} (default)", w.name)
                            } else {
                                w.name.clone()
                            }
                        })
                        .collect::<Vec<_>>()
                        .join(", "),
                ),
                l.checksum[..12].to_string(),
                list_cmds::shown(&l.origin.to_string()),
                list_cmds::shown(&l.source),
            ]
        })
        .collect();
    let head = [
        "name",
        "version",
        "conditions",
        "code entries",
        "weightings",
        "checksum",
        "origin",
        "source",
    ];
    let mut widths: Vec<usize> = head.iter().map(|h| h.len()).collect();
    for r in &rows {
        for (w, c) in widths.iter_mut().zip(r.iter()).take(7) {
            *w = (*w).max(c.chars().count());
        }
    }
    let line = |cells: Vec<&str>| -> String {
        let mut s = String::new();
        for (i, c) in cells.iter().enumerate() {
            if i < 7 {
                s.push_str(&format!("{:<w$}  ", c, w = widths[i]));
            } else {
                s.push_str(c);
            }
        }
        s.trim_end().to_string()
    };
    let w = |e| Error::io("cannot write output", e);
    writeln!(out, "{}", line(head.to_vec())).map_err(w)?;
    for r in &rows {
        writeln!(out, "{}", line(r.iter().map(String::as_str).collect())).map_err(w)?;
    }
    Ok(())
}

fn sql(a: SqlArgs) -> Result<(), Error> {
    let cat = catalogue(a.lists.as_ref(), a.quiet, false)?;
    let specs = if a.index.is_empty() {
        IndexSpec::parse_many(DEFAULT_INDICES)?
    } else {
        IndexSpec::parse_many(&a.index.join(","))?
    };
    let options = ScoreOptions {
        hierarchy: !a.no_hierarchy,
        flags: a.flags,
        age: a.age.is_some(),
    };
    let engine = Engine::new(&cat, &specs, options)?;
    let layout = match a.layout {
        LayoutArg::Wide => Layout::Wide,
        LayoutArg::Long => Layout::Long,
    };
    if let Some(e) = &a.edition {
        return Err(Error::Usage(format!(
            "--edition {e} is not taken by `morbus sql`: in `score` it only sorts well-shaped codes \
into known, extended and unknown for the summary, and never changes a score; the SQL writes \
no summary (run `morbus score --edition {e}` on a sample to see those counts)"
        )));
    }
    let HistoryOptions {
        lookback,
        lookback_lists,
        window,
        date_format,
    } = history_options(
        a.lookback.as_deref(),
        &a.window,
        a.date_format.as_deref(),
        &a.poa_values,
        a.date.is_some() && a.episode.is_none(),
    )?;
    let config = ScoreConfig {
        dx: a.dx.clone(),
        dx_sep: a
            .dx_sep
            .as_deref()
            .map(|s| one_char(s, "--dx-sep"))
            .transpose()?,
        layout,
        id: a.id.clone(),
        episode: a.episode.clone(),
        date: a.date.clone(),
        lookback,
        lookback_lists,
        window,
        date_format,
        max_unreadable_dates: pipeline::percent_from(&a.max_unreadable_dates)
            .map_err(|why| Error::Usage(format!("--max-unreadable-dates {why}")))?,
        exclude_primary: a.exclude_primary,
        primary: a.primary.clone(),
        poa: a.poa.clone(),
        poa_values: pipeline::poa_values_from(std::slice::from_ref(&a.poa_values)),
        age: a.age.clone(),
        ..ScoreConfig::default()
    };
    let output = match a.create.as_deref() {
        None => morbus::sql::SqlOutput::Query,
        Some([kind, name]) => match kind.as_str() {
            "view" => morbus::sql::SqlOutput::View(name.clone()),
            "table" => morbus::sql::SqlOutput::Table(name.clone()),
            other => {
                return Err(Error::Usage(format!(
                    "--create takes 'view NAME' or 'table NAME', not '{other}'"
                )))
            }
        },
        Some(_) => {
            return Err(Error::Usage(
                "--create takes 'view NAME' or 'table NAME'".into(),
            ))
        }
    };
    if a.replace && output == morbus::sql::SqlOutput::Query {
        return Err(Error::Usage(
            "--replace goes with --create view|table NAME".into(),
        ));
    }
    let columns = a.columns.as_deref().map(|c| {
        c.split(',')
            .map(|n| n.trim().to_string())
            .filter(|n| !n.is_empty())
            .collect::<Vec<_>>()
    });
    let opts = morbus::sql::SqlOptions {
        dialect: match a.dialect {
            DialectArg::Duckdb => morbus::sql::Dialect::DuckDb,
            DialectArg::Postgres => morbus::sql::Dialect::Postgres,
            DialectArg::Sqlite => morbus::sql::Dialect::Sqlite,
        },
        table: a.table.clone(),
        config,
        columns,
        output,
        replace: a.replace,
        order_by: a
            .order_by
            .as_deref()
            .map(|c| {
                c.split(',')
                    .map(|n| n.trim().to_string())
                    .filter(|n| !n.is_empty())
                    .collect()
            })
            .unwrap_or_default(),
    };
    let script = morbus::sql::generate(&engine, &opts)?;
    if opts.dialect == morbus::sql::Dialect::Postgres && opts.order_by.is_empty() && !a.quiet {
        eprintln!(
            "morbus: warning: PostgreSQL keeps no row order: without --order-by the rows are \
numbered and given in the order they are stored (ctid), which need not be the order they were \
loaded in; give --order-by COLS (e.g. episode_id) for the extract's order"
        );
    }
    match &a.output {
        None => {
            let mut out = morbus::io::atomic::stdout();
            out.write_all(script.as_bytes())
                .and_then(|()| out.flush())
                .map_err(|e| Error::io("cannot write output", e))
        }
        Some(path) => morbus::io::atomic::write_atomically(path, script.as_bytes()),
    }
}

fn lists_command(a: ListsArgs) -> Result<(), Error> {
    if !matches!(a.command, Some(ListsCommand::Export { .. })) {
        morbus::io::atomic::check_stdout_open()?;
    }
    match a.command {
        None => list_table(&catalogue(a.lists.as_ref(), false, false)?),
        Some(ListsCommand::Check { path }) => list_cmds::check(&path),
        Some(ListsCommand::Show { name, json }) => {
            let cat = catalogue(a.lists.as_ref(), false, false)?;
            let l = resolve_list(&name, &cat)?;
            list_cmds::show(&l.list, json)
        }
        Some(ListsCommand::Export {
            name,
            dir,
            force,
            format: ExportFormat::Prefixes,
        }) => {
            let cat = catalogue(a.lists.as_ref(), false, false)?;
            let l = resolve_list(&name, &cat)?;
            let path = lists::export_prefixes_to_dir(&l.list, &dir, force)?;
            eprintln!(
                "morbus: wrote the code prefixes of list '{}' version {} (checksum {}) to {}",
                l.list.name,
                l.list.version,
                &l.list.checksum[..12],
                path.display()
            );
            Ok(())
        }
        Some(ListsCommand::Export {
            name, dir, force, ..
        }) => {
            let cat = catalogue(a.lists.as_ref(), false, false)?;
            let l = resolve_list(&name, &cat)?;
            let path = lists::export_to_dir(&l.list, &dir, force)?;
            say!(
                "morbus: wrote list '{}' version {} ({} code entries, checksum {}) to {}",
                l.list.name,
                l.list.version,
                l.list.code_entries(),
                &l.list.checksum[..12],
                path.display()
            );
            Ok(())
        }
        Some(ListsCommand::Diff { a: la, b: lb, json }) => {
            let (da, db) = (Path::new(&la).is_dir(), Path::new(&lb).is_dir());
            if da && db {
                let (d, warnings) = lists::diff_dirs(Path::new(&la), Path::new(&lb))?;
                for w in &warnings {
                    eprintln!("{w}");
                }
                return list_cmds::diff_dirs(&d, json);
            }
            if da || db {
                let (dir, other) = if da { (&la, &lb) } else { (&lb, &la) };
                return Err(Error::Usage(format!(
                    "'{dir}' is a directory but '{other}' is not: compare two directories (lists paired by name) or two lists"
                )));
            }
            let cat = catalogue(a.lists.as_ref(), false, false)?;
            let left = resolve_list(&la, &cat)?;
            let right = resolve_list(&lb, &cat)?;
            list_cmds::diff(&left.list, &right.list, json)
        }
    }
}

/// A list named on the command line, with its warnings printed.
fn resolve_list(arg: &str, cat: &Catalogue) -> Result<Loaded, Error> {
    let l = lists::resolve(arg, cat)?;
    for w in &l.warnings {
        say!("morbus: {w}");
    }
    Ok(l)
}
