//! # morbus
//!
//! Comorbidity and frailty covariates from the ICD-10 diagnosis fields of
//! hospital episode and claims extracts: the Charlson index (Quan et al. 2005
//! coding), the Elixhauser conditions (Quan et al. 2005 coding) and the
//! Hospital Frailty Risk Score (Gilbert et al. 2018), with published
//! weightings, hierarchies and age points, and user-defined lists in the same
//! plain-text format.
//!
//! The pieces, each in its own module:
//! - [`code`]: reading an ICD-10 code from a field;
//! - [`editions`]: which codes exist in WHO ICD-10 and ICD-10-CM;
//! - [`lists`]: the code lists (format parser, built-ins, catalogue);
//! - [`matcher`]: from a code to the conditions it claims;
//! - [`score`]: conditions, hierarchies, weightings, output values;
//! - [`io`]: streaming delimited text in and out;
//! - [`pipeline`]: `score` over an extract, wide or long, with its summary;
//! - [`rows`]: the row model every source implements (text records, typed
//!   columns of frames and Arrow batches) and how values are read;
//! - [`frame`]: `score` and `explain` over a data frame's typed columns (the bindings);
//! - [`sql`]: a SQL script that scores a table inside a database (DuckDB,
//!   PostgreSQL, SQLite) with the same lists and rules;
//! - [`provenance`]: what produced an output (tool, lists, options, counts);
//! - [`stats`]: the numerics of `compare` (c-statistics, DeLong, logistic
//!   regression, rank correlation);
//! - [`compare`]: several index specifications side by side on one extract,
//!   as a table, JSON or a self-contained HTML report.
//!
//! ```
//! use morbus::lists::Catalogue;
//! use morbus::score::{Engine, IndexSpec, ScoreOptions};
//!
//! let specs = IndexSpec::parse_many("charlson:charlson1987").unwrap();
//! let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
//! let mut unit = engine.unit();
//! for raw in ["I21.9", "E11.2", "E11.9", "C78.0", "C18.7"] {
//!     engine.add_raw(&mut unit.bits, raw.as_bytes());
//! }
//! engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
//! // myocardial infarction 1 + diabetes with complications 2 + metastatic 6
//! // (diabetes without complications and any malignancy are superseded)
//! assert_eq!(engine.score(&unit.bits, 0), 9 * morbus::lists::SCALE);
//! ```

pub mod code;
pub mod compare;
pub mod editions;
pub mod error;
pub mod frame;
pub mod io;
pub mod lists;
pub mod matcher;
pub mod pipeline;
pub mod provenance;
pub mod rows;
pub mod score;
pub mod sql;
pub mod stats;

pub use error::Error;

/// The version of this build of morbus.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
