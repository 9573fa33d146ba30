//! `explain`: one row per (episode, matched code, index, condition) with
//! where the code came from and whether it counted, and a total row per
//! episode and index.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::io::Write;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Condvar, Mutex};

use super::history::{read_history, CodeRecord, History, Needs, ReadHistory, Windows};
use super::partition::Lines;
use super::{Exclusion, OutputForm, Plan, ScoreConfig, Summary, WindowScope};
use crate::io::value_records::{put_cell, put_varint, Cell};
use crate::io::write_field;
use crate::lists::format_scaled;
use crate::rows::Keys;
use crate::score::{Engine, Value};
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

/// A day as `YYYY-MM-DD`, appended to `out` (nothing for no day).
fn iso_into(days: Option<i32>, out: &mut String) {
    let Some(z) = days else {
        return;
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
    let _ = write!(out, "{y:04}-{m:02}-{d:02}");
}

/// `s` as a JSON string, appended to `out`.
fn json_str(s: &str, out: &mut Vec<u8>) {
    let at = out.len();
    if serde_json::to_writer(&mut *out, s).is_err() {
        out.truncate(at);
        out.extend_from_slice(b"\"\"");
    }
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

/// What explaining an episode reads of its whole history: each episode's
/// final condition set, its place in the window order and its codes. Made
/// once, read by every thread.
pub(crate) struct Prepared {
    resolved: Vec<u64>,
    pos: Vec<u32>,
    /// Codes per episode, in input order.
    by_episode: Vec<Vec<usize>>,
}

impl Prepared {
    pub(crate) fn new(engine: &Engine, hist: &History, sorted: &[u32]) -> Prepared {
        let mut pos = vec![0u32; sorted.len()];
        for (i, &e) in sorted.iter().enumerate() {
            pos[e as usize] = i as u32;
        }
        let mut by_episode: Vec<Vec<usize>> = vec![Vec::new(); hist.episodes.len()];
        for (i, c) in hist.codes.iter().enumerate() {
            by_episode[c.episode as usize].push(i);
        }
        Prepared {
            resolved: hist.final_sets(engine),
            pos,
            by_episode,
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
    let prepared = Prepared::new(engine, hist, sorted);
    for e in 0..hist.episodes.len() {
        explain_episode(engine, windows, hist, sorted, &prepared, e, &mut sink)?;
    }
    Ok(())
}

/// Explains episode `e` of a resolved history: its records, in order, to
/// `sink`.
fn explain_episode<'h>(
    engine: &Engine,
    windows: &Windows,
    hist: &'h History,
    sorted: &[u32],
    prepared: &Prepared,
    e: usize,
    sink: &mut impl FnMut(Record<'h>) -> Result<(), Error>,
) -> Result<(), Error> {
    let Prepared {
        resolved,
        pos,
        by_episode,
    } = prepared;
    let w = hist.words();
    let ep = &hist.episodes[e];
    let mut order: Vec<u32> = Vec::new();
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
        order.extend(hist.window_members(sorted, pos, e, days, windows.scope));
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
                                h.inferior == c && Engine::has(final_bits, sel.offset + h.superior)
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
    Ok(())
}

/// How an [`Explainer`] writes: CSV or JSON lines, or value records for a
/// typed output (`cfg.output_form`).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Form {
    Csv,
    JsonLines,
    Values,
}

/// Writes `explain`'s records as text (CSV or JSON lines) or as value
/// records ([`crate::io::value_records`]: every cell typed, for a Parquet
/// output): the header and each episode's records, for a history in memory
/// or a partition of one.
pub(crate) struct Explainer {
    form: Form,
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
    /// column that is already one of them is a usage error. With
    /// `cfg.output_form` value records, the records are handed over typed
    /// (CSV only: JSON lines are text).
    pub(crate) fn new(
        plan: &Plan,
        cfg: &ScoreConfig,
        format: ExplainFormat,
    ) -> Result<Explainer, Error> {
        let form = match (format, cfg.output_form) {
            (ExplainFormat::Csv, OutputForm::Text) => Form::Csv,
            (ExplainFormat::JsonLines, OutputForm::Text) => Form::JsonLines,
            (ExplainFormat::Csv, OutputForm::ValueRecords) => Form::Values,
            (ExplainFormat::JsonLines, OutputForm::ValueRecords) => {
                return Err(Error::Usage(
                    "--json writes JSON lines; leave it out for a Parquet output".into(),
                ))
            }
        };
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
            form,
            delimiter: cfg.delimiter,
            head,
            numeric,
            id: p.id.is_some(),
            episode: p.episode.is_some(),
            nkeep: p.keep.len(),
        })
    }

    /// The header line (CSV; nothing for JSON lines); for value records,
    /// the stream's opening and the names as its header record.
    pub(crate) fn header(&self) -> Vec<u8> {
        let mut out = Vec::new();
        match self.form {
            Form::Csv => self.emit(&mut out, &self.head),
            Form::JsonLines => {}
            Form::Values => {
                for (i, c) in self.head.iter().enumerate() {
                    if i > 0 {
                        out.push(self.delimiter);
                    }
                    write_field(c.as_bytes(), self.delimiter, &mut out);
                }
                // No pass-through part: every cell is a value.
                super::end_header(OutputForm::ValueRecords, b"", &mut out, 0, Keys::Text);
            }
        }
        out
    }

    fn emit(&self, out: &mut Vec<u8>, cells: &[String]) {
        self.open(out);
        for (i, c) in cells.iter().enumerate() {
            self.cell(out, i, c);
        }
        self.close(out);
    }

    /// Starts a line.
    fn open(&self, out: &mut Vec<u8>) {
        if self.form == Form::JsonLines {
            out.push(b'{');
        }
    }

    /// Cell `i` of a line (column `i` of the header), after what separates
    /// it from the cell before.
    fn cell(&self, out: &mut Vec<u8>, i: usize, v: &str) {
        match self.form {
            Form::Csv | Form::Values => {
                if i > 0 {
                    out.push(self.delimiter);
                }
                write_field(v.as_bytes(), self.delimiter, out);
            }
            Form::JsonLines => {
                if i > 0 {
                    out.push(b',');
                }
                json_str(&self.head[i], out);
                out.push(b':');
                if !self.numeric[i] {
                    json_str(v, out);
                } else if v.is_empty() {
                    out.extend_from_slice(b"null");
                } else {
                    // Row numbers and weights as written: whole numbers
                    // or decimals, valid JSON numbers.
                    out.extend_from_slice(v.as_bytes());
                }
            }
        }
    }

    /// Ends a line.
    fn close(&self, out: &mut Vec<u8>) {
        match self.form {
            Form::Csv | Form::Values => out.push(b'\n'),
            Form::JsonLines => out.extend_from_slice(b"}\n"),
        }
    }

    /// Explains every episode of a resolved history (`sorted`: its window
    /// order) on `pace.threads` threads: each episode's records, as text,
    /// framed by `frame` (the episode's number, its records, the text to
    /// append to), are handed to `write` in input order, in pieces.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn explain(
        &self,
        engine: &Engine,
        windows: &Windows,
        hist: &History,
        sorted: &[u32],
        pace: Pace,
        frame: impl Fn(usize, &[u8], &mut Vec<u8>) + Sync,
        write: impl FnMut(&[u8]) -> Result<(), Error>,
    ) -> Result<(), Error> {
        let prepared = Prepared::new(engine, hist, sorted);
        let prepared = &prepared;
        in_order(
            hist.episodes.len(),
            pace,
            |e, records, out| {
                records.clear();
                self.episode(engine, windows, hist, sorted, prepared, e, records);
                frame(e, records, out);
            },
            write,
        )
    }

    /// Episode `e`'s records, as text, appended to `out`.
    #[allow(clippy::too_many_arguments)]
    fn episode(
        &self,
        engine: &Engine,
        windows: &Windows,
        hist: &History,
        sorted: &[u32],
        prepared: &Prepared,
        e: usize,
        out: &mut Vec<u8>,
    ) {
        if self.form == Form::Values {
            return self.episode_values(engine, windows, hist, sorted, prepared, e, out);
        }
        // The episode's own cells, made once; then each record's, through
        // two reused buffers.
        let mut prefix = Vec::new();
        self.open(&mut prefix);
        let mut first = 0;
        // A typed source's values as the text a delimited extract would
        // hold (`Field::text`'s rule): a sink writing text.
        let keys = hist.plan.keys;
        let mut own = |v: &[u8]| {
            self.cell(&mut prefix, first, &String::from_utf8_lossy(v));
            first += 1;
        };
        self.own_values(hist, e, &mut |key| own(&keys.text(key)));
        own(hist.row(e).to_string().as_bytes());
        let (mut text, mut number) = (String::new(), Vec::new());
        // The sink never fails: nothing to pass on.
        let _ = explain_episode(engine, windows, hist, sorted, prepared, e, &mut |r| {
            let spec = &engine.specs()[r.spec];
            let list = &engine.lists()[spec.list].list;
            let weighting = &list.weightings[spec.weighting];
            out.extend_from_slice(&prefix);
            let mut i = first;
            let mut cell = |out: &mut Vec<u8>, v: &str| {
                self.cell(out, i, v);
                i += 1;
            };
            text.clear();
            let _ = write!(text, "{}:{}", list.name, weighting.name);
            cell(out, &text);
            match (r.source, r.condition) {
                (Some((src, rec)), Some(c)) => {
                    text.clear();
                    let _ = write!(text, "{}", hist.row(src));
                    cell(out, &text);
                    text.clear();
                    iso_into(r.date(hist), &mut text);
                    cell(out, &text);
                    cell(out, String::from_utf8_lossy(&rec.written).trim());
                    text.clear();
                    let _ = write!(text, "{}", rec.code);
                    cell(out, &text);
                    cell(out, &list.conditions[c].key);
                }
                _ => {
                    cell(out, "");
                    text.clear();
                    iso_into(r.date(hist), &mut text);
                    cell(out, &text);
                    cell(out, "");
                    cell(out, "");
                    cell(out, "");
                }
            }
            number.clear();
            format_scaled(r.weight, r.decimals, &mut number);
            cell(out, &String::from_utf8_lossy(&number));
            cell(out, &r.status);
            number.clear();
            if let Some(a) = r.age_points {
                format_scaled(a, r.decimals, &mut number);
            }
            cell(out, &String::from_utf8_lossy(&number));
            self.close(out);
            Ok(())
        });
    }

    /// Episode `e`'s own values (id, episode, kept columns, as asked for)
    /// to `each`, as the history holds them (`hist.plan.keys`): a text
    /// source's bytes, a typed source's keys (`Field::key_into` for the id
    /// and episode, `Field::value_into` for kept values; empty when
    /// missing).
    fn own_values(&self, hist: &History, e: usize, each: &mut impl FnMut(&[u8])) {
        if self.id {
            each(hist.patient_id(hist.episodes[e].patient));
        }
        if self.episode {
            each(hist.key(e));
        }
        for j in 0..self.nkeep {
            each(hist.kept(e, j));
        }
    }

    /// Episode `e`'s records as value records appended to `out`: no
    /// pass-through part, every cell a value (the same cells as the text,
    /// typed: a typed source's id, episode and kept values as their keys,
    /// row numbers whole, dates as days, weights with their decimals, the
    /// rest text; the text's empty cells missing).
    #[allow(clippy::too_many_arguments)]
    fn episode_values(
        &self,
        engine: &Engine,
        windows: &Windows,
        hist: &History,
        sorted: &[u32],
        prepared: &Prepared,
        e: usize,
        out: &mut Vec<u8>,
    ) {
        let mut prefix = Vec::new();
        put_varint(&mut prefix, 0);
        let keys = hist.plan.keys;
        let mut own = |v: &[u8]| match keys {
            // The values themselves: the sink builds them with the input's
            // types.
            Keys::Typed => put_cell(&mut prefix, Cell::Key(v)),
            Keys::Text => put_cell(
                &mut prefix,
                Cell::Text(String::from_utf8_lossy(v).as_bytes()),
            ),
        };
        self.own_values(hist, e, &mut own);
        put_cell(&mut prefix, Cell::Whole(hist.row(e) as i64));
        let missing = Cell::Value(Value::Missing);
        let date = |d: Option<i32>| d.map_or(missing, Cell::Date);
        let mut text = String::new();
        // The sink never fails: nothing to pass on.
        let _ = explain_episode(engine, windows, hist, sorted, prepared, e, &mut |r| {
            let spec = &engine.specs()[r.spec];
            let list = &engine.lists()[spec.list].list;
            let weighting = &list.weightings[spec.weighting];
            out.extend_from_slice(&prefix);
            text.clear();
            let _ = write!(text, "{}:{}", list.name, weighting.name);
            put_cell(out, Cell::Text(text.as_bytes()));
            match (r.source, r.condition) {
                (Some((src, rec)), Some(c)) => {
                    put_cell(out, Cell::Whole(hist.row(src) as i64));
                    put_cell(out, date(r.date(hist)));
                    let written = String::from_utf8_lossy(&rec.written);
                    put_cell(out, Cell::Text(written.trim().as_bytes()));
                    text.clear();
                    let _ = write!(text, "{}", rec.code);
                    put_cell(out, Cell::Text(text.as_bytes()));
                    put_cell(out, Cell::Text(list.conditions[c].key.as_bytes()));
                }
                _ => {
                    put_cell(out, missing);
                    put_cell(out, date(r.date(hist)));
                    put_cell(out, missing);
                    put_cell(out, missing);
                    put_cell(out, missing);
                }
            }
            let points = |scaled| {
                Cell::Value(Value::Score {
                    scaled,
                    decimals: r.decimals,
                })
            };
            put_cell(out, points(r.weight));
            put_cell(out, Cell::Text(r.status.as_bytes()));
            put_cell(out, r.age_points.map_or(missing, points));
            Ok(())
        });
    }
}

/// How `explain`'s episodes are shared out: on how many threads, how many
/// episodes a thread takes at a time, the size of the pieces handed to the
/// writer, and how many bytes of pieces may wait, made ahead of the one
/// being written, before their threads wait too.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Pace {
    threads: usize,
    claim: usize,
    piece: usize,
    ahead: usize,
}

impl Pace {
    /// `threads` threads for `episodes` episodes, within `memory` bytes of
    /// `--memory`: output made ahead at most a sixteenth of it (64 KiB to
    /// 64 MiB), in pieces of up to 1 MiB, and so at most about one and a
    /// half times that in memory at once (besides one episode's records
    /// per thread, which have no bound but the window).
    pub(crate) fn new(threads: usize, episodes: usize, memory: u64) -> Pace {
        let threads = threads.max(1);
        let ahead = (memory / 16).clamp(64 << 10, 64 << 20) as usize;
        Pace {
            threads,
            claim: (episodes / (threads * 16)).clamp(1, 256),
            piece: (ahead / (2 * threads)).clamp(4 << 10, 1 << 20),
            ahead,
        }
    }
}

/// The pieces made by [`in_order`]'s threads, waiting to be written.
struct Pieces {
    /// The first episode not yet written.
    want: usize,
    /// Pieces by their first episode: the episode after their last, and
    /// their text.
    ready: BTreeMap<usize, (usize, Vec<u8>)>,
    /// Bytes in `ready`.
    bytes: usize,
    /// The writer failed or is done: threads stop.
    stop: bool,
    /// A thread failed (panicked).
    failed: bool,
}

/// Runs `format(e, scratch, out)` (appending episode `e`'s text to `out`)
/// for the episodes `0..n` on `pace.threads` threads, each taking
/// `pace.claim` episodes at a time, and hands the text to `write` in
/// episode order, in pieces of about `pace.piece` bytes. A piece that is
/// not the next to be written waits, with its thread, while `pace.ahead`
/// bytes of pieces are waiting already; the next piece never waits, so
/// the writer always has one to come.
fn in_order(
    n: usize,
    pace: Pace,
    format: impl Fn(usize, &mut Vec<u8>, &mut Vec<u8>) + Sync,
    mut write: impl FnMut(&[u8]) -> Result<(), Error>,
) -> Result<(), Error> {
    let workers = pace.threads.min(n.div_ceil(pace.claim));
    if workers <= 1 {
        let (mut scratch, mut out) = (Vec::new(), Vec::new());
        for e in 0..n {
            format(e, &mut scratch, &mut out);
            if out.len() >= pace.piece {
                write(&out)?;
                out.clear();
            }
        }
        return if out.is_empty() { Ok(()) } else { write(&out) };
    }
    let state = Mutex::new(Pieces {
        want: 0,
        ready: BTreeMap::new(),
        bytes: 0,
        stop: false,
        failed: false,
    });
    let changed = Condvar::new();
    let lock = || state.lock().unwrap_or_else(|p| p.into_inner());
    let next = AtomicUsize::new(0);
    /// Marks the run failed when its thread panics.
    struct Failed<'a>(&'a Mutex<Pieces>, &'a Condvar);
    impl Drop for Failed<'_> {
        fn drop(&mut self) {
            if std::thread::panicking() {
                let mut st = self.0.lock().unwrap_or_else(|p| p.into_inner());
                st.failed = true;
                st.stop = true;
                self.1.notify_all();
            }
        }
    }
    std::thread::scope(|s| {
        let worker = || {
            let _failed = Failed(&state, &changed);
            let (mut scratch, mut out) = (Vec::new(), Vec::new());
            loop {
                let from = next.fetch_add(pace.claim, Ordering::Relaxed);
                if from >= n {
                    return;
                }
                let to = (from + pace.claim).min(n);
                let mut start = from;
                for e in from..to {
                    format(e, &mut scratch, &mut out);
                    if out.len() < pace.piece && e + 1 < to {
                        continue;
                    }
                    let mut st = lock();
                    while start != st.want && st.bytes >= pace.ahead && !st.stop {
                        st = changed.wait(st).unwrap_or_else(|p| p.into_inner());
                    }
                    if st.stop {
                        return;
                    }
                    st.bytes += out.len();
                    st.ready.insert(start, (e + 1, std::mem::take(&mut out)));
                    changed.notify_all();
                    start = e + 1;
                }
            }
        };
        let handles: Vec<_> = (0..workers).map(|_| s.spawn(worker)).collect();
        let mut result = Ok(());
        let mut st = lock();
        while st.want < n {
            if st.failed {
                result = Err(Error::data(
                    None,
                    "internal error: an explain thread failed",
                ));
                break;
            }
            let want = st.want;
            let Some((end, text)) = st.ready.remove(&want) else {
                st = changed.wait(st).unwrap_or_else(|p| p.into_inner());
                continue;
            };
            st.want = end;
            st.bytes -= text.len();
            changed.notify_all();
            drop(st);
            result = write(&text);
            st = lock();
            if result.is_err() {
                break;
            }
        }
        st.stop = true;
        changed.notify_all();
        drop(st);
        // A thread that panicked has said so through `failed`.
        for h in handles {
            let _ = h.join();
        }
        result
    })
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
    let sorted = hist.resolve(&windows, super::parallel::threads(cfg));
    let hist = hist;
    let explainer = Explainer::new(&hist.plan, cfg, format)?;
    output.write_all(&explainer.header()).map_err(write_err)?;
    // On every core, the records written in input order as they are made.
    let pace = Pace::new(
        super::parallel::threads(cfg),
        hist.episodes.len(),
        cfg.memory,
    );
    explainer.explain(
        engine,
        &windows,
        &hist,
        &sorted,
        pace,
        |_, records, out| out.extend_from_slice(records),
        |text| output.write_all(text).map_err(write_err),
    )?;
    summary.units += hist.episodes.len() as u64;
    summary.rows_written = summary.units;
    output.flush().map_err(write_err)?;
    Ok(summary)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Episode `e`'s invented text: its number, then 0 to 3,999 bytes
    /// (some episodes alone larger than a piece).
    fn text_of(e: usize, out: &mut Vec<u8>) {
        let len = (e.wrapping_mul(2_654_435_761) >> 7) % 4_000;
        out.extend_from_slice(format!("{e}:").as_bytes());
        out.extend((0..len).map(|i| b'a' + ((e + i) % 26) as u8));
        out.push(b'\n');
    }

    fn run(n: usize, pace: Pace) -> (Vec<u8>, usize) {
        let mut all = Vec::new();
        let mut writes = 0;
        in_order(
            n,
            pace,
            |e, scratch, out| {
                scratch.clear();
                text_of(e, scratch);
                out.extend_from_slice(scratch);
            },
            |text| {
                all.extend_from_slice(text);
                writes += 1;
                Ok(())
            },
        )
        .unwrap();
        (all, writes)
    }

    #[test]
    fn episodes_come_out_in_order_whatever_the_threads_and_pieces() {
        for n in [0, 1, 2, 7, 300, 2_000] {
            let mut want = Vec::new();
            for e in 0..n {
                text_of(e, &mut want);
            }
            for threads in [1, 2, 3, 8, 64] {
                // Pieces and room ahead smaller than one episode, a few
                // episodes, and the defaults.
                for (claim, piece, ahead) in [(1, 1, 1), (3, 5_000, 12_000), (7, 64 << 10, 1 << 20)]
                {
                    let pace = Pace {
                        threads,
                        claim,
                        piece,
                        ahead,
                    };
                    let (got, writes) = run(n, pace);
                    assert!(got == want, "{n} episodes, {pace:?}: out of order");
                    if n > 1 && piece == 1 {
                        assert_eq!(writes, n, "{n} episodes, {pace:?}: a piece per episode");
                    }
                }
            }
            for threads in [1, 2, 64] {
                let (got, _) = run(n, Pace::new(threads, n, 0));
                assert!(got == want, "{n} episodes, {threads} threads: out of order");
            }
        }
    }

    #[test]
    fn a_failed_write_stops_every_thread_and_is_returned() {
        for threads in [1, 2, 8] {
            let pace = Pace {
                threads,
                claim: 2,
                piece: 1,
                ahead: 1,
            };
            let mut writes = 0;
            let r = in_order(
                1_000,
                pace,
                |e, _, out| text_of(e, out),
                |_| {
                    writes += 1;
                    if writes == 3 {
                        Err(Error::data(None, "the disk is full"))
                    } else {
                        Ok(())
                    }
                },
            );
            assert!(
                r.is_err_and(|e| e.to_string().contains("the disk is full")),
                "{threads} threads"
            );
            assert_eq!(writes, 3, "{threads} threads: written after the failure");
        }
    }
}
