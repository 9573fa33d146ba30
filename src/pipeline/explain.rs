//! `explain`: one row per (episode, matched code, index, condition) with
//! where the code came from and whether it counted, and a total row per
//! episode and index.

use std::io::Write;

use super::history::{read_history, CodeRecord, History, Needs, ReadHistory, Windows};
use super::partition::Lines;
use super::{Exclusion, Plan, ScoreConfig, Summary, WindowScope};
use crate::io::write_field;
use crate::lists::format_scaled;
use crate::score::Engine;
use crate::Error;

/// The columns of `explain` after the id, episode and label columns.
pub const EXPLAIN_COLUMNS: [&str; 10] = [
    "row",
    "index",
    "source_row",
    "source_date",
    "code_as_written",
    "code",
    "condition",
    "weight",
    "status",
    "age_points",
];

/// Output format of `explain`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ExplainFormat {
    Csv,
    JsonLines,
}

/// Why a matched code does or does not add its weight.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Status {
    /// Adds its weight.
    Counted,
    /// Another code of the unit already counted this condition.
    Repeated,
    /// The hierarchy removed the condition: a superior condition is present.
    SupersededBy(String),
    /// Left out of the episode being scored.
    Excluded(Exclusion),
    /// A code of the episode being scored, left out because only earlier
    /// episodes count (`--window earlier-only`).
    CurrentEpisode,
}

impl Status {
    pub fn label(&self) -> String {
        match self {
            Status::Counted => "counted".into(),
            Status::Repeated => "repeated".into(),
            Status::SupersededBy(k) => format!("superseded_by:{k}"),
            Status::Excluded(Exclusion::Primary) => "excluded:primary_diagnosis".into(),
            Status::Excluded(Exclusion::NotPresentOnAdmission) => {
                "excluded:not_present_on_admission".into()
            }
            Status::CurrentEpisode => "excluded:current_episode".into(),
        }
    }
}

fn iso(days: Option<i32>) -> String {
    let Some(z) = days else {
        return String::new();
    };
    // H. Hinnant's civil_from_days.
    let z = z as i64 + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = if m <= 2 { y + 1 } else { y };
    format!("{y:04}-{m:02}-{d:02}")
}

fn json_str(s: &str) -> String {
    serde_json::to_string(s).unwrap_or_else(|_| "\"\"".into())
}

/// One record of `explain`, typed: a matched code of an episode's window,
/// or a total of an episode and index.
#[derive(Clone, Debug)]
pub struct Record<'h> {
    /// The episode explained.
    pub episode: usize,
    /// The index specification (into [`Engine::specs`]).
    pub spec: usize,
    /// A code row: the episode the code comes from and the code as read.
    pub source: Option<(usize, &'h CodeRecord)>,
    /// A code row: the condition (into the list's conditions).
    pub condition: Option<usize>,
    /// The condition's weight (code rows) or the total, scaled by
    /// [`crate::lists::SCALE`].
    pub weight: i64,
    /// Decimals of the index's weights.
    pub decimals: u32,
    /// `counted`, `repeated`, `superseded_by:KEY`, `excluded:...`, `total`,
    /// `total_with_age:AGE`.
    pub status: String,
    /// The age points of a `total_with_age` record.
    pub age_points: Option<i64>,
}

impl Record<'_> {
    /// The date shown with the record: the source episode's (code rows),
    /// the episode's own (totals).
    pub fn date(&self, hist: &History) -> Option<i32> {
        match self.source {
            Some((src, _)) => hist.episodes[src].date(),
            None => hist.episodes[self.episode].date(),
        }
    }
}

/// Explains every episode of a resolved history (`sorted`: its window
/// order), handing the records to `sink` episode by episode, in input
/// order: per index, the current episode's codes, then those of the
/// window's other episodes (most recent first), then the totals.
pub fn explain_history(
    engine: &Engine,
    windows: &Windows,
    hist: &History,
    sorted: &[u32],
    mut sink: impl FnMut(Record<'_>) -> Result<(), Error>,
) -> Result<(), Error> {
    let resolved = hist.final_sets(engine);
    let mut pos = vec![0u32; sorted.len()];
    for (i, &e) in sorted.iter().enumerate() {
        pos[e as usize] = i as u32;
    }
    let w = hist.words();
    // Codes per episode, in input order.
    let mut by_episode: Vec<Vec<usize>> = vec![Vec::new(); hist.episodes.len()];
    for (i, c) in hist.codes.iter().enumerate() {
        by_episode[c.episode as usize].push(i);
    }
    let mut order: Vec<u32> = Vec::new();
    for (e, ep) in hist.episodes.iter().enumerate() {
        let final_bits = &resolved[e * w..(e + 1) * w];
        for (si, spec) in engine.specs().iter().enumerate() {
            let sel = &engine.lists()[spec.list];
            let list = &sel.list;
            let weighting = &list.weightings[spec.weighting];
            let decimals = weighting.decimals;
            // The current episode first, then the window's others, most
            // recent first.
            let days = windows.per_list[spec.list];
            order.clear();
            order.push(e as u32);
            order.extend(hist.window_members(sorted, &pos, e, days, windows.scope));
            let current_left_out = days.is_some() && windows.scope == WindowScope::EarlierOnly;
            let mut counted = vec![false; list.conditions.len()];
            let mut total = 0i64;
            for &src in &order {
                for &ci in &by_episode[src as usize] {
                    let rec = &hist.codes[ci];
                    let mut hits: Vec<usize> = Vec::new();
                    engine.matcher().for_each_hit(&rec.code, |id| {
                        let id = id as usize;
                        if id >= sel.offset && id < sel.offset + list.conditions.len() {
                            hits.push(id - sel.offset);
                        }
                    });
                    hits.sort_unstable();
                    hits.dedup();
                    for c in hits {
                        let status = if src as usize == e && current_left_out {
                            Status::CurrentEpisode
                        } else if src as usize == e && rec.exclusion.is_some() {
                            Status::Excluded(rec.exclusion.unwrap_or(Exclusion::Primary))
                        } else if !Engine::has(final_bits, sel.offset + c) {
                            let sup = list
                                .hierarchy
                                .iter()
                                .find(|h| {
                                    h.inferior == c
                                        && Engine::has(final_bits, sel.offset + h.superior)
                                })
                                .or_else(|| list.hierarchy.iter().find(|h| h.inferior == c))
                                .map(|h| list.conditions[h.superior].key.clone())
                                .unwrap_or_default();
                            Status::SupersededBy(sup)
                        } else if counted[c] {
                            Status::Repeated
                        } else {
                            counted[c] = true;
                            total += weighting.weights[c];
                            Status::Counted
                        };
                        sink(Record {
                            episode: e,
                            spec: si,
                            source: Some((src as usize, rec)),
                            condition: Some(c),
                            weight: weighting.weights[c],
                            decimals,
                            status: status.label(),
                            age_points: None,
                        })?;
                    }
                }
            }
            debug_assert_eq!(total, engine.score(final_bits, si));
            let score = engine.score(final_bits, si);
            let total_row = |scaled: i64, status: String, age_points: Option<i64>| Record {
                episode: e,
                spec: si,
                source: None,
                condition: None,
                weight: scaled,
                decimals,
                status,
                age_points,
            };
            sink(total_row(score, "total".into(), None))?;
            if let (Some(age), true) = (
                ep.age(),
                engine.options().age && !list.age_points.is_empty(),
            ) {
                let points = list.points_for_age(age);
                sink(total_row(
                    score + points,
                    format!("total_with_age:{age}"),
                    Some(points),
                ))?;
            }
        }
    }
    Ok(())
}

/// Writes `explain`'s records as text (CSV or JSON lines): the header and
/// each episode's records, for a history in memory or a partition of one.
pub(crate) struct Explainer {
    format: ExplainFormat,
    delimiter: u8,
    head: Vec<String>,
    /// JSON: which columns are numbers (null when empty).
    numeric: Vec<bool>,
    id: bool,
    episode: bool,
    nkeep: usize,
}

impl Explainer {
    /// The output's columns for a history read with `plan`; a `--label`
    /// column that is already one of them is a usage error.
    pub(crate) fn new(
        plan: &Plan,
        cfg: &ScoreConfig,
        format: ExplainFormat,
    ) -> Result<Explainer, Error> {
        let p = plan;
        let mut head: Vec<String> = Vec::new();
        if let Some(c) = p.id {
            head.push(p.header.names[c].clone());
        }
        if let Some(c) = p.episode {
            head.push(p.header.names[c].clone());
        }
        for &c in &p.keep {
            let name = &p.header.names[c];
            if head.contains(name) || EXPLAIN_COLUMNS.contains(&name.as_str()) {
                return Err(Error::Usage(format!(
                    "--label column '{name}' is already a column of explain's output"
                )));
            }
            head.push(name.clone());
        }
        let numbers_from = head.len();
        head.push("row".into());
        for h in &EXPLAIN_COLUMNS[1..] {
            head.push(h.to_string());
        }
        let numeric: Vec<bool> = head
            .iter()
            .enumerate()
            .map(|(i, h)| {
                i >= numbers_from
                    && matches!(h.as_str(), "row" | "source_row" | "weight" | "age_points")
            })
            .collect();
        Ok(Explainer {
            format,
            delimiter: cfg.delimiter,
            head,
            numeric,
            id: p.id.is_some(),
            episode: p.episode.is_some(),
            nkeep: p.keep.len(),
        })
    }

    /// The header line (CSV; nothing for JSON lines).
    pub(crate) fn header(&self) -> Vec<u8> {
        let mut out = Vec::new();
        if self.format == ExplainFormat::Csv {
            self.emit(&mut out, &self.head);
        }
        out
    }

    fn emit(&self, out: &mut Vec<u8>, cells: &[String]) {
        let d = self.delimiter;
        match self.format {
            ExplainFormat::Csv => {
                for (i, c) in cells.iter().enumerate() {
                    if i > 0 {
                        out.push(d);
                    }
                    write_field(c.as_bytes(), d, out);
                }
                out.push(b'\n');
            }
            ExplainFormat::JsonLines => {
                out.push(b'{');
                for (i, (k, v)) in self.head.iter().zip(cells).enumerate() {
                    if i > 0 {
                        out.push(b',');
                    }
                    out.extend_from_slice(json_str(k).as_bytes());
                    out.push(b':');
                    if !self.numeric[i] {
                        out.extend_from_slice(json_str(v).as_bytes());
                    } else if v.is_empty() {
                        out.extend_from_slice(b"null");
                    } else {
                        // Row numbers and weights as written: whole numbers
                        // or decimals, valid JSON numbers.
                        out.extend_from_slice(v.as_bytes());
                    }
                }
                out.extend_from_slice(b"}\n");
            }
        }
    }

    /// Explains every episode of a resolved history (`sorted`: its window
    /// order), handing each episode's records, as text, to `each` with the
    /// episode's number, in input order.
    pub(crate) fn explain(
        &self,
        engine: &Engine,
        windows: &Windows,
        hist: &History,
        sorted: &[u32],
        mut each: impl FnMut(usize, &[u8]) -> Result<(), Error>,
    ) -> Result<(), Error> {
        let mut out: Vec<u8> = Vec::new();
        let mut prefix: Vec<String> = Vec::new();
        let mut prefix_of = usize::MAX;
        let scaled_text = |scaled: i64, decimals: u32| {
            let mut t = Vec::new();
            format_scaled(scaled, decimals, &mut t);
            String::from_utf8_lossy(&t).into_owned()
        };
        explain_history(engine, windows, hist, sorted, |r| {
            let e = r.episode;
            if prefix_of != e {
                if prefix_of != usize::MAX {
                    each(prefix_of, &out)?;
                    out.clear();
                }
                prefix_of = e;
                let ep = &hist.episodes[e];
                prefix.clear();
                if self.id {
                    prefix.push(String::from_utf8_lossy(hist.patient_id(ep.patient)).into_owned());
                }
                if self.episode {
                    prefix.push(String::from_utf8_lossy(hist.key(e)).into_owned());
                }
                for j in 0..self.nkeep {
                    prefix.push(String::from_utf8_lossy(hist.kept(e, j)).into_owned());
                }
                prefix.push(hist.row(e).to_string());
            }
            let spec = &engine.specs()[r.spec];
            let list = &engine.lists()[spec.list].list;
            let weighting = &list.weightings[spec.weighting];
            let mut cells = prefix.clone();
            cells.push(format!("{}:{}", list.name, weighting.name));
            match (r.source, r.condition) {
                (Some((src, rec)), Some(c)) => {
                    cells.push(hist.row(src).to_string());
                    cells.push(iso(r.date(hist)));
                    cells.push(String::from_utf8_lossy(&rec.written).trim().to_string());
                    cells.push(rec.code.to_string());
                    cells.push(list.conditions[c].key.clone());
                }
                _ => cells.extend([
                    String::new(),
                    iso(r.date(hist)),
                    String::new(),
                    String::new(),
                    String::new(),
                ]),
            }
            cells.push(scaled_text(r.weight, r.decimals));
            cells.push(r.status);
            cells.push(
                r.age_points
                    .map_or_else(String::new, |a| scaled_text(a, r.decimals)),
            );
            self.emit(&mut out, &cells);
            Ok(())
        })?;
        if prefix_of != usize::MAX {
            each(prefix_of, &out)?;
        }
        Ok(())
    }
}

/// Runs `explain` over an extract (text, or typed rows). A history over
/// half of `--memory` is partitioned by patient into temporary files,
/// explained a partition at a time and merged back in input order, with
/// the same output ([`super::partition`]).
pub fn explain_stream<'a>(
    engine: &Engine,
    cfg: &ScoreConfig,
    format: ExplainFormat,
    input: impl Into<super::history::Input<'a>>,
    output: &mut dyn Write,
) -> Result<Summary, Error> {
    let windows = Windows::new(engine, cfg)?;
    let needs = Needs {
        codes: true,
        rows: false,
        output: Some(|_, cfg, plan| Explainer::new(plan, cfg, ExplainFormat::Csv).map(drop)),
    };
    let spill_at = (cfg.memory / 2) as usize;
    let write_err = |e| Error::io("cannot write output", e);
    let (mut hist, mut summary) =
        match read_history(engine, cfg, input, needs, Some(spill_at), &[])? {
            (ReadHistory::Memory(h), s) => (h, s),
            (ReadHistory::Spilled(sp, plan, _), mut summary) => {
                let explainer = Explainer::new(&plan, cfg, format)?;
                let head = explainer.header();
                sp.finish(
                    engine,
                    cfg,
                    &windows,
                    (plan, &head),
                    Lines::Explain(&explainer),
                    &mut summary,
                    output,
                )?;
                output.flush().map_err(write_err)?;
                return Ok(summary);
            }
        };
    let sorted = hist.resolve(&windows);
    let hist = hist;
    let explainer = Explainer::new(&hist.plan, cfg, format)?;
    let mut out = explainer.header();
    explainer.explain(engine, &windows, &hist, &sorted, |_, records| {
        out.extend_from_slice(records);
        if out.len() > 1 << 20 {
            output.write_all(&out).map_err(write_err)?;
            out.clear();
        }
        Ok(())
    })?;
    summary.units += hist.episodes.len() as u64;
    summary.rows_written = summary.units;
    output.write_all(&out).map_err(write_err)?;
    output.flush().map_err(write_err)?;
    Ok(summary)
}
