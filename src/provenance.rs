//! Provenance of a scoring run: which tool, lists, weightings and options
//! produced an output, and what the run read. `morbus score --provenance
//! FILE` writes it as JSON; [`Provenance::new`] builds it from the engine,
//! the configuration and the summary of a run.
//!
//! The JSON object has these fields:
//!
//! | field | meaning |
//! |---|---|
//! | `format` | version of this JSON layout (1) |
//! | `tool` | `name` and `version` of morbus |
//! | `input`, `output` | paths as given (`null`: standard input or output) |
//! | `lists` | every list used: `name`, `version`, `title`, `editions`, `source`, `checksum` (SHA-256 of the canonical content), `origin` (`built-in (FILE)` or a path), `builtin` (true/false), and `weightings` used (`name`, `label`, `source`) |
//! | `indices` | every index scored: `spec` (`LIST:WEIGHTING`), `list`, `weighting`, `column` |
//! | `options` | `layout` (`wide`/`long`), `dx` (names and patterns as given), `dx_columns` (the columns read), `dx_separator`, `delimiter`, `id_column`, `episode_column`, `date_column`, `date_format`, `lookback` (`null`, or an object: `days`, a number or `null` for the whole history, for every list not named; `lists`, list name to `{"days": ...}` for `--lookback LIST=DAYS`; `window`, `current-and-earlier` or `earlier-only`), `exclude_primary`, `primary_column`, `poa_column`, `poa_values`, `age_column`, `hierarchy`, `flags`, `strict` |
//! | `columns` | the output columns added, in order |
//! | `rows` | `read`, `written`, `units` (episodes in wide, ids in long), `missing_ids` (rows with an empty id field), `disagreeing_units` (long-layout units whose rows give different dates, ages or values of a kept column; the first is used), `spilled_records` and `spilled_bytes` (a lookback whose history was over half of `--memory`: the episodes and rows written to partition files, and the bytes of temporary files written; 0 when it fitted), and `over_memory` only when a partition of a spilled history still took more than half of `--memory`: its `bytes`, `episodes`, and the patient `id` with the most episodes in it (`id_episodes`) |
//! | `codes` | `read` (valid, that is well-shaped, codes), `invalid` (count of malformed values: not ICD-10-shaped), `top_invalid` (up to 20 most frequent invalid values with their `count`), `edition` (`who`, `cm` or `any`: where codes were looked up), `edition_sources` (the code sets: edition, release, package), `unknown` (well-shaped codes in no selected edition, stem included), `top_unknown`, `extended` (codes not in the selected editions whose three- or four-character stem is), `top_extended` (normalised codes with their `count`) |
//! | `excluded` | codes left out: `primary` (primary diagnosis), `not_on_admission` |
//! | `ages` | `missing` and `unreadable` age fields; `null` without an age column |
//! | `dates` | `missing` and `unreadable` dates (per episode), `unreadable_examples` (the first distinct unreadable values), `read` (date fields read), `day_month_either` (of those, dates that would also be valid with day and month swapped), `day_month_proven` (dates whose day is over 12), `max_unreadable_percent`; `null` without a date column |
//! | `present_on_admission` | `columns` (as given), `values_counting` (the values that count; `BLANK` is an empty field), `rule` (the rule in words), `indicators` (every value read with its `count`; `""` is a blank), `unrecognised` (indicators outside the guidelines' values and `values_counting`); `null` without `--poa` |
//!
//! ```
//! use morbus::lists::Catalogue;
//! use morbus::pipeline::{score_stream, ScoreConfig};
//! use morbus::provenance::Provenance;
//! use morbus::score::{Engine, IndexSpec, ScoreOptions};
//!
//! let specs = IndexSpec::parse_many("charlson:charlson1987").unwrap();
//! let engine = Engine::new(&Catalogue::builtin(), &specs, ScoreOptions::default()).unwrap();
//! let cfg = ScoreConfig { dx: vec!["dx*".into()], ..ScoreConfig::default() };
//! let data = "id,dx1,dx2\n1,I21.9,??\n2,,\n";
//! let mut out = Vec::new();
//! let summary = score_stream(&engine, &cfg, data.as_bytes(), &mut out).unwrap();
//! let p = Provenance::new(&engine, &cfg, &summary);
//! assert_eq!(p.lists[0].name, "charlson");
//! assert_eq!(p.rows.read, 2);
//! assert_eq!(p.codes.invalid, 1);
//! let json = p.to_json();
//! assert!(json.contains("\"checksum\""));
//! ```

use serde::Serialize;

use crate::lists::Origin;
use crate::pipeline::{Layout, ScoreConfig, Summary};
use crate::score::Engine;

/// Invalid values listed in `codes.top_invalid`.
pub const TOP_INVALID: usize = 20;

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Provenance {
    pub format: u32,
    pub tool: Tool,
    pub input: Option<String>,
    pub output: Option<String>,
    pub lists: Vec<ListUsed>,
    pub indices: Vec<IndexUsed>,
    pub options: Options,
    pub columns: Vec<String>,
    pub rows: Rows,
    pub codes: Codes,
    pub excluded: Excluded,
    pub ages: Option<Ages>,
    pub dates: Option<Dates>,
    pub present_on_admission: Option<PresentOnAdmission>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Tool {
    pub name: String,
    pub version: String,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ListUsed {
    pub name: String,
    pub version: String,
    pub title: String,
    pub editions: Vec<String>,
    pub source: String,
    pub checksum: String,
    pub origin: String,
    pub builtin: bool,
    /// The weightings of this list that the run scored.
    pub weightings: Vec<WeightingUsed>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WeightingUsed {
    pub name: String,
    pub label: String,
    pub source: String,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct IndexUsed {
    pub spec: String,
    pub list: String,
    pub weighting: String,
    pub column: String,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Options {
    pub layout: String,
    pub dx: Vec<String>,
    pub dx_columns: Vec<String>,
    pub dx_separator: Option<String>,
    pub delimiter: String,
    pub id_column: Option<String>,
    pub episode_column: Option<String>,
    pub date_column: Option<String>,
    pub date_format: String,
    /// `null`: no lookback; `{"days": null}`: the whole history.
    pub lookback: Option<Lookback>,
    pub exclude_primary: bool,
    pub primary_column: Option<String>,
    pub poa_column: Option<String>,
    pub poa_values: Vec<String>,
    pub age_column: Option<String>,
    pub hierarchy: bool,
    pub flags: bool,
    pub strict: bool,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Lookback {
    /// Window in days of every list not named in `lists`; `None` for the
    /// whole history. Left out when only named lists have a window.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub days: Option<Option<u32>>,
    /// Per-list windows (`--lookback LIST=DAYS`), when given: list name to
    /// `{"days": ...}`.
    #[serde(skip_serializing_if = "std::collections::BTreeMap::is_empty")]
    pub lists: std::collections::BTreeMap<String, ListLookback>,
    /// `current-and-earlier` or `earlier-only` (`--window`).
    pub window: &'static str,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ListLookback {
    /// Window in days; `None` for the whole history.
    pub days: Option<u32>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Dates {
    pub missing: u64,
    pub unreadable: u64,
    pub unreadable_examples: Vec<String>,
    pub read: u64,
    pub day_month_either: u64,
    pub day_month_proven: u64,
    pub max_unreadable_percent: f64,
}

/// The present-on-admission rule of a run and the indicators it read.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PresentOnAdmission {
    pub columns: String,
    pub values_counting: Vec<String>,
    pub rule: String,
    pub indicators: Vec<InvalidValue>,
    pub unrecognised: u64,
}

/// The present-on-admission rule in words.
pub const POA_RULE: &str = "a code of the episode being scored counts only when its indicator is one of values_counting (BLANK: an empty field); earlier episodes' codes count regardless. Y, N, U, W, 1 and blank are the values of the ICD-10-CM Official Guidelines for Coding and Reporting, Appendix I; any other value is unrecognised and its code does not count";

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Excluded {
    /// Codes left out as the primary diagnosis.
    pub primary: u64,
    /// Codes left out as not present on admission.
    pub not_on_admission: u64,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Rows {
    pub read: u64,
    pub written: u64,
    pub units: u64,
    /// Rows whose id field was empty (long layout, lookback).
    pub missing_ids: u64,
    /// Long-layout units whose rows give different dates or ages.
    pub disagreeing_units: u64,
    /// A history over half of `--memory`: episodes and rows written to
    /// partition files, and the bytes of temporary files written (0: none).
    pub spilled_records: u64,
    pub spilled_bytes: u64,
    /// A spilled history's partition that still held more than half of
    /// `--memory` (absent when none did).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub over_memory: Option<OverMemory>,
}

/// A partition over its share of `--memory`: the bytes its history took,
/// its episodes, and the patient id with the most of them.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct OverMemory {
    pub bytes: u64,
    pub episodes: u64,
    pub id: String,
    pub id_episodes: u64,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Codes {
    pub read: u64,
    pub invalid: u64,
    pub top_invalid: Vec<InvalidValue>,
    pub edition: String,
    pub edition_sources: Vec<String>,
    pub unknown: u64,
    pub top_unknown: Vec<InvalidValue>,
    pub extended: u64,
    pub top_extended: Vec<InvalidValue>,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct InvalidValue {
    pub value: String,
    pub count: u64,
}

#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Ages {
    pub missing: u64,
    pub unreadable: u64,
}

fn char_name(c: u8) -> String {
    match c {
        b'\t' => "tab".into(),
        c => (c as char).to_string(),
    }
}

impl Provenance {
    /// The provenance of a finished run.
    pub fn new(engine: &Engine, cfg: &ScoreConfig, summary: &Summary) -> Provenance {
        let lists = engine
            .lists()
            .iter()
            .enumerate()
            .map(|(li, s)| {
                let l = &s.list;
                let mut weightings: Vec<WeightingUsed> = Vec::new();
                for spec in engine.specs().iter().filter(|sp| sp.list == li) {
                    let w = &l.weightings[spec.weighting];
                    if weightings.iter().all(|x| x.name != w.name) {
                        weightings.push(WeightingUsed {
                            name: w.name.clone(),
                            label: w.label.clone(),
                            source: w.source.clone(),
                        });
                    }
                }
                ListUsed {
                    name: l.name.clone(),
                    version: l.version.clone(),
                    title: l.title.clone(),
                    editions: l.editions.clone(),
                    source: l.source.clone(),
                    checksum: l.checksum.clone(),
                    origin: l.origin.to_string(),
                    builtin: matches!(l.origin, Origin::Builtin(_)),
                    weightings,
                }
            })
            .collect();
        let indices = engine
            .specs()
            .iter()
            .map(|sp| {
                let l = &engine.lists()[sp.list].list;
                let w = &l.weightings[sp.weighting].name;
                IndexUsed {
                    spec: format!("{}:{w}", l.name),
                    list: l.name.clone(),
                    weighting: w.clone(),
                    column: sp.name.clone(),
                }
            })
            .collect();
        let opts = engine.options();
        Provenance {
            format: 1,
            tool: Tool {
                name: "morbus".into(),
                version: crate::VERSION.into(),
            },
            input: None,
            output: None,
            lists,
            indices,
            options: Options {
                layout: match cfg.layout {
                    Layout::Wide => "wide".into(),
                    Layout::Long => "long".into(),
                },
                dx: cfg.dx.clone(),
                dx_columns: summary.dx_columns.clone(),
                dx_separator: cfg.dx_sep.map(char_name),
                delimiter: char_name(cfg.delimiter),
                id_column: cfg.id.clone(),
                episode_column: cfg.episode.clone(),
                date_column: cfg.date.clone(),
                date_format: cfg.date_format.to_string(),
                lookback: cfg.uses_history().then(|| Lookback {
                    days: cfg.lookback.map(|d| (d != u32::MAX).then_some(d)),
                    lists: cfg
                        .lookback_lists
                        .iter()
                        .map(|(n, d)| {
                            (
                                n.clone(),
                                ListLookback {
                                    days: (*d != u32::MAX).then_some(*d),
                                },
                            )
                        })
                        .collect(),
                    window: cfg.window.name(),
                }),
                exclude_primary: cfg.exclude_primary,
                primary_column: cfg.primary.clone(),
                poa_column: cfg.poa.clone(),
                poa_values: cfg.poa_values.clone(),
                age_column: cfg.age.clone(),
                hierarchy: opts.hierarchy,
                flags: opts.flags,
                strict: cfg.strict,
            },
            columns: engine.columns().iter().map(|c| c.name.clone()).collect(),
            rows: Rows {
                read: summary.rows_read,
                written: summary.rows_written,
                units: summary.units,
                missing_ids: summary.missing_ids,
                disagreeing_units: summary.disagreeing_units,
                spilled_records: summary.spilled_records,
                spilled_bytes: summary.spilled_bytes,
                over_memory: summary.over_memory.as_ref().map(|o| OverMemory {
                    bytes: o.bytes,
                    episodes: o.episodes,
                    id: String::from_utf8_lossy(&o.id).into_owned(),
                    id_episodes: o.id_episodes,
                }),
            },
            codes: Codes {
                read: summary.codes_read,
                invalid: summary.invalid_codes,
                top_invalid: summary
                    .top_invalid(TOP_INVALID)
                    .into_iter()
                    .map(|(value, count)| InvalidValue { value, count })
                    .collect(),
                edition: cfg.edition.name().into(),
                edition_sources: cfg
                    .edition
                    .sources()
                    .into_iter()
                    .map(String::from)
                    .collect(),
                unknown: summary.unknown_codes,
                top_unknown: summary
                    .top_unknown(TOP_INVALID)
                    .into_iter()
                    .map(|(value, count)| InvalidValue { value, count })
                    .collect(),
                extended: summary.extended_codes,
                top_extended: summary
                    .top_extended(TOP_INVALID)
                    .into_iter()
                    .map(|(value, count)| InvalidValue { value, count })
                    .collect(),
            },
            excluded: Excluded {
                primary: summary.excluded_primary,
                not_on_admission: summary.excluded_not_on_admission,
            },
            ages: cfg.age.as_ref().map(|_| Ages {
                missing: summary.missing_ages,
                unreadable: summary.unreadable_ages,
            }),
            dates: cfg.date.as_ref().map(|_| Dates {
                missing: summary.missing_dates,
                unreadable: summary.unreadable_dates,
                unreadable_examples: summary
                    .unreadable_date_examples
                    .iter()
                    .map(|v| String::from_utf8_lossy(v).into_owned())
                    .collect(),
                read: summary.dates_read,
                day_month_either: summary.dates_either_order,
                day_month_proven: summary.dates_order_proven,
                max_unreadable_percent: cfg.max_unreadable_dates,
            }),
            present_on_admission: cfg.poa.as_ref().map(|p| PresentOnAdmission {
                columns: p.clone(),
                values_counting: cfg.poa_values.clone(),
                rule: POA_RULE.into(),
                indicators: summary
                    .poa_by_value()
                    .into_iter()
                    .map(|(value, count)| InvalidValue { value, count })
                    .collect(),
                unrecognised: summary.unrecognised_poa,
            }),
        }
    }

    /// Records the input and output paths (`None`: standard streams).
    pub fn with_files(mut self, input: Option<String>, output: Option<String>) -> Provenance {
        self.input = input;
        self.output = output;
        self
    }

    /// Pretty-printed JSON, ending in a newline.
    pub fn to_json(&self) -> String {
        let mut s = serde_json::to_string_pretty(self).unwrap_or_else(|_| "{}".into());
        s.push('\n');
        s
    }
}
