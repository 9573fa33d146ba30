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

use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::io::{Read, Write};

use super::dates;
use super::parallel::{run_batches, run_blocks};
use super::rows_store::{Loaded, RowStore};
use super::{
    check_collisions, disagreement, keep_first, Exclusion, Layout, Plan, RowIssue, ScoreConfig,
    Summary, WindowScope,
};
use crate::code::Code;
use crate::io::{write_field, RecordScanner};
use crate::matcher::KeyHasher;
use crate::rows::{Batch, BatchRow, Row, RowSource};
use crate::score::{Engine, Value};
use crate::Error;

type ByteMap<V> = HashMap<Box<[u8]>, V, BuildHasherDefault<KeyHasher>>;

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

/// One episode of the extract.
#[derive(Clone, Debug)]
pub struct Episode {
    pub patient: u32,
    /// Days since 1970-01-01; `None` when missing or unreadable.
    pub date: Option<i32>,
    pub age: Option<u32>,
    /// Data row number (1-based) of the episode's first record.
    pub row: u64,
    date_unreadable: bool,
    /// A later row of the episode gave another date or age (long layout).
    disagrees: bool,
}

/// One code of an episode (kept for `explain`).
#[derive(Clone, Debug)]
pub struct CodeRecord {
    pub episode: u32,
    pub written: Box<[u8]>,
    pub code: Code,
    pub exclusion: Option<Exclusion>,
}

/// The extract held in memory.
pub struct History {
    pub(crate) plan: Plan,
    /// The header's raw bytes.
    pub header_raw: Vec<u8>,
    pub patients: Vec<Box<[u8]>>,
    pub episodes: Vec<Episode>,
    /// Long layout with `--episode`: each episode's value.
    keys: Vec<Box<[u8]>>,
    /// Kept columns (`ScoreConfig::keep`): per episode, one value per
    /// column (the first non-empty one of its rows).
    kept: Vec<Option<Box<[u8]>>>,
    words: usize,
    own_all: Vec<u64>,
    /// Empty when no exclusion rule is on (then it equals `own_all`).
    own_current: Vec<u64>,
    /// Wide layout: each row's raw bytes, as (block, start, end) into the
    /// blocks' own buffers (kept as read: no copy into one arena).
    row_spans: Vec<(u32, u32, u32)>,
    raw_blocks: RowStore,
    /// Every code, when asked for.
    pub codes: Vec<CodeRecord>,
    /// `own_all` holds each episode's windowed set ([`History::resolve`]).
    resolved: bool,
}

/// What a [`History`] keeps besides the condition sets.
#[derive(Clone, Copy, Debug, Default)]
pub struct Needs {
    /// Every code, for `explain`.
    pub codes: bool,
    /// The wide layout's raw rows, for an output that copies them.
    pub rows: bool,
}

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

/// How a row's date read.
#[derive(Clone, Copy)]
enum DateRead {
    Day(i32),
    Missing,
    Unreadable,
}

/// One data row as a worker read it.
struct RowRead {
    /// An id column was given but this row's id is empty: the row is
    /// nobody's history and gets a patient of its own.
    no_id: bool,
    pid: (usize, usize),
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
    let id_text = |c: usize| row.field(c).text_or_empty();
    let no_id = p.id.is_some_and(|c| id_text(c).trim_ascii().is_empty());
    if no_id {
        if cfg.strict {
            return Err(p.missing_id(line()));
        }
        b.summary.missing_ids += 1;
    }
    let id = |c: Option<usize>, ids: &mut Vec<u8>| {
        let s = ids.len();
        if let Some(c) = c {
            ids.extend_from_slice(&id_text(c));
        }
        (s, ids.len())
    };
    let pid = id(p.id, &mut b.ids);
    let ekey = id(p.episode, &mut b.ids);
    for &c in &p.keep {
        let span = id(Some(c), &mut b.ids);
        b.keep.push(span);
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
    let line = match cfg.layout {
        Layout::Long => line(),
        Layout::Wide => 0,
    };
    b.rows.push(RowRead {
        no_id,
        pid,
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
fn check_unreadable_dates(
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

impl History {
    /// Reads the whole extract, reading blocks of text or batches of typed
    /// rows on every core and merging them in input order.
    pub fn read<'a>(
        engine: &Engine,
        cfg: &ScoreConfig,
        input: impl Into<Input<'a>>,
        needs: Needs,
    ) -> Result<(History, Summary), Error> {
        let keep_codes = needs.codes;
        let words = engine.words();
        let exclusions = cfg.exclude_primary || cfg.poa.is_some();
        let mut summary = Summary::default();
        let mut patients: Vec<Box<[u8]>> = Vec::new();
        let mut episodes: Vec<Episode> = Vec::new();
        let mut keys: Vec<Box<[u8]>> = Vec::new();
        let mut kept: Vec<Option<Box<[u8]>>> = Vec::new();
        let mut own_all: Vec<u64> = Vec::new();
        let mut own_current: Vec<u64> = Vec::new();
        let mut row_spans: Vec<(u32, u32, u32)> = Vec::new();
        let temp_dir = cfg.temp_dir.clone().unwrap_or_else(std::env::temp_dir);
        let mut raw_blocks = RowStore::new((cfg.memory / 2) as usize, &temp_dir);
        let keep_rows = needs.rows && cfg.layout == Layout::Wide;
        let mut codes: Vec<CodeRecord> = Vec::new();
        let mut patient_index: ByteMap<u32> = ByteMap::default();
        let mut episode_index: ByteMap<u32> = ByteMap::default();
        let mut key = Vec::new();
        let mut rows_seen = 0u64;

        let keeps = Keeps {
            codes: keep_codes,
            exclusions,
            rows: needs.rows,
        };
        // Merges the rows of each block (or batch), in input order.
        let mut consume = |h: &(Plan, Vec<u8>), b: BlockRows| -> Result<(), Error> {
            let long_episodes = h.0.episode.is_some();
            let nkeep = h.0.keep.len();
            let mut block_episode = Vec::with_capacity(b.rows.len());
            for (i, r) in b.rows.iter().enumerate() {
                rows_seen += 1;
                let pid = &b.ids[r.pid.0..r.pid.1];
                // A new episode's patient; rows without an id get a
                // patient of their own.
                let mut fresh = |episodes: &mut Vec<Episode>,
                                 own_all: &mut Vec<u64>,
                                 own_current: &mut Vec<u64>| {
                    let patient = match patient_index.get(pid) {
                        Some(&x) if !r.no_id => x,
                        _ => {
                            let x = patients.len() as u32;
                            if !r.no_id {
                                patient_index.insert(pid.into(), x);
                            }
                            patients.push(pid.into());
                            x
                        }
                    };
                    episodes.push(Episode {
                        patient,
                        date: None,
                        age: None,
                        row: rows_seen,
                        date_unreadable: false,
                        disagrees: false,
                    });
                    own_all.resize(own_all.len() + words, 0);
                    if exclusions {
                        own_current.resize(own_current.len() + words, 0);
                    }
                    kept.resize(kept.len() + nkeep, None);
                    (episodes.len() - 1) as u32
                };
                // Every wide row is an episode; in the long layout one
                // per (patient, episode value), or per patient.
                let e = match cfg.layout {
                    Layout::Wide => fresh(&mut episodes, &mut own_all, &mut own_current),
                    Layout::Long => {
                        let ekey = &b.ids[r.ekey.0..r.ekey.1];
                        key.clear();
                        key.extend_from_slice(&(pid.len() as u32).to_le_bytes());
                        key.extend_from_slice(pid);
                        key.extend_from_slice(ekey);
                        match episode_index.get(&key[..]) {
                            Some(&x) => x,
                            None => {
                                let x = fresh(&mut episodes, &mut own_all, &mut own_current);
                                episode_index.insert(key.as_slice().into(), x);
                                if long_episodes {
                                    keys.push(ekey.into());
                                }
                                x
                            }
                        }
                    }
                };
                block_episode.push(e);
                let ep = &mut episodes[e as usize];
                // The first readable date and age of an episode's rows
                // count; a later row giving another one is counted (and
                // stops a --strict run).
                let day = match r.date {
                    DateRead::Day(d) => Some(d),
                    DateRead::Unreadable => {
                        ep.date_unreadable |= ep.date.is_none();
                        None
                    }
                    DateRead::Missing => None,
                };
                let iso = |d: i32| {
                    let mut t = Vec::new();
                    dates::write_iso_date(d as i64, &mut t);
                    String::from_utf8_lossy(&t).into_owned()
                };
                let other_date = keep_first(&mut ep.date, day)
                    .map(|(first, d)| disagreement("date", iso(d), iso(first)));
                let other_age =
                    keep_first(&mut ep.age, r.age).map(|(first, a)| disagreement("age", a, first));
                let mut other_kept = None;
                for j in 0..nkeep {
                    let (s, t) = b.keep[i * nkeep + j];
                    let v = &b.ids[s..t];
                    if v.trim_ascii().is_empty() {
                        continue;
                    }
                    match &kept[e as usize * nkeep + j] {
                        None => kept[e as usize * nkeep + j] = Some(v.into()),
                        Some(first) if **first != *v && other_kept.is_none() => {
                            let name = &h.0.header.names[h.0.keep[j]];
                            other_kept = Some(disagreement(
                                &format!("value of column '{name}'"),
                                String::from_utf8_lossy(v),
                                String::from_utf8_lossy(first),
                            ));
                        }
                        Some(_) => {}
                    }
                }
                if let Some(message) = other_date.or(other_age).or(other_kept) {
                    if cfg.strict {
                        return Err(Error::Strict {
                            line: Some(r.line),
                            message,
                        });
                    }
                    summary.count_disagreeing(&mut ep.disagrees);
                }
                let (dst, src) = (e as usize * words, i * words);
                for k in 0..words {
                    own_all[dst + k] |= b.all[src + k];
                }
                if exclusions {
                    for k in 0..words {
                        own_current[dst + k] |= b.cur[src + k];
                    }
                }
            }
            if keep_rows {
                let bi = raw_blocks.push(b.raw)?;
                let mut start = 0u32;
                row_spans.extend(b.raw_ends.iter().map(|&x| {
                    let span = (bi, start, x as u32);
                    start = x as u32;
                    span
                }));
            }
            for mut c in b.codes {
                c.episode = block_episode[c.episode as usize];
                codes.push(c);
            }
            summary.merge(b.summary);
            b.err.map_or(Ok(()), Err)
        };
        let (plan, header_raw) = match input.into() {
            Input::Text(input) => run_blocks(
                cfg,
                input,
                |block, rec| Ok((Plan::from_header(cfg, block, rec)?, rec.raw.to_vec())),
                |h, block, start, scanner| {
                    read_block(engine, cfg, &h.0, block, start, scanner, keeps)
                },
                |h, b, _| consume(h, b),
            )?,
            Input::Rows(source) => {
                let naming = source.naming();
                run_batches(
                    cfg,
                    source,
                    |header| Ok((Plan::new(cfg, header, false)?, Vec::new())),
                    |h, batch, first| read_batch(engine, cfg, &h.0, batch, first, keeps),
                    |h, b, _| consume(h, b),
                )
                .map_err(|e| naming.name(e))?
            }
        };
        summary.dx_columns = plan.dx_names();
        if plan.date.is_some() {
            summary.date_format = Some(cfg.date_format.to_string());
            for ep in &episodes {
                if ep.date.is_none() {
                    if ep.date_unreadable {
                        summary.unreadable_dates += 1;
                    } else {
                        summary.missing_dates += 1;
                    }
                }
            }
            check_unreadable_dates(cfg, &summary, episodes.len() as u64)?;
        }
        let hist = History {
            plan,
            header_raw,
            patients,
            episodes,
            keys,
            kept,
            words,
            own_all,
            own_current,
            row_spans,
            raw_blocks,
            codes,
            resolved: false,
        };
        Ok((hist, summary))
    }

    /// Episodes in window order: per patient, dated episodes by date, then
    /// undated ones; input order breaks ties.
    pub fn window_order(&self) -> Vec<u32> {
        // One packed key per episode: patient (32 bits), then 1 bit
        // "undated", then the date shifted to be non-negative.
        let mut keyed: Vec<(u64, u32)> = self
            .episodes
            .iter()
            .enumerate()
            .map(|(e, ep)| {
                let day = match ep.date {
                    Some(d) => (d as i64 - i32::MIN as i64) as u64,
                    None => 1 << 32,
                };
                (((ep.patient as u64) << 33) | day, e as u32)
            })
            .collect();
        keyed.sort_unstable();
        keyed.into_iter().map(|(_, e)| e).collect()
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
    pub fn resolve(&mut self, windows: &Windows) -> Vec<u32> {
        let sorted = self.window_order();
        if self.resolved {
            return sorted;
        }
        let w = self.words;
        let n = sorted.len();
        let mut counts = vec![0u32; w * 64];
        let mut present = vec![0u64; w];
        let mut multi = vec![0u64; w];
        let mut res: Vec<u64> = Vec::new();
        let earlier_only = windows.scope == WindowScope::EarlierOnly;
        let own_all = &mut self.own_all;
        let own_current = &self.own_current;
        let episodes = &self.episodes;
        let date = |e: u32| episodes[e as usize].date.map_or(0, i64::from);
        let mut i = 0;
        while i < n {
            let patient = episodes[sorted[i] as usize].patient;
            let mut end = i + 1;
            while end < n && episodes[sorted[end] as usize].patient == patient {
                end += 1;
            }
            let seg = &sorted[i..end];
            res.clear();
            res.resize(seg.len() * w, 0);
            for (k, &e) in seg.iter().enumerate() {
                let e = e as usize;
                let cur = if own_current.is_empty() {
                    &own_all[e * w..(e + 1) * w]
                } else {
                    &own_current[e * w..(e + 1) * w]
                };
                for j in 0..w {
                    res[k * w + j] = if earlier_only {
                        cur[j] & !windows.windowed[j]
                    } else {
                        cur[j]
                    };
                }
            }
            let dated = seg
                .iter()
                .take_while(|&&e| episodes[e as usize].date.is_some())
                .count();
            for g in &windows.groups {
                let own = |e: u32| &own_all[e as usize * w..(e as usize + 1) * w];
                let (mut lo, mut hi) = (0usize, 0usize);
                for k in 0..dated {
                    let d = date(seg[k]);
                    while hi < dated && (date(seg[hi]) < d || (!earlier_only && date(seg[hi]) == d))
                    {
                        count_in(own(seg[hi]), &g.mask, &mut counts, &mut present, &mut multi);
                        hi += 1;
                    }
                    while lo < hi && date(seg[lo]) < d - g.days as i64 {
                        count_out(own(seg[lo]), &g.mask, &mut counts, &mut present, &mut multi);
                        lo += 1;
                    }
                    let mine = own(seg[k]);
                    let out = &mut res[k * w..(k + 1) * w];
                    for j in 0..w {
                        let others = if earlier_only {
                            present[j]
                        } else {
                            multi[j] | (present[j] & !mine[j])
                        };
                        out[j] |= others & g.mask[j];
                    }
                }
                while lo < hi {
                    count_out(own(seg[lo]), &g.mask, &mut counts, &mut present, &mut multi);
                    lo += 1;
                }
            }
            for (k, &e) in seg.iter().enumerate() {
                let e = e as usize;
                own_all[e * w..(e + 1) * w].copy_from_slice(&res[k * w..(k + 1) * w]);
            }
            i = end;
        }
        self.own_current = Vec::new();
        self.resolved = true;
        sorted
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
        let (Some(days), Some(d)) = (days, self.episodes[e].date) else {
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
            let Some(x) = ep.date else { break };
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
        self.keys.get(e).map_or(&[][..], |k| &k[..])
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

    /// Whether the raw rows went partly to a temporary file.
    pub fn rows_spilled(&self) -> bool {
        self.raw_blocks.spilled()
    }
}

/// Scores from the patient history and writes the output: wide, every row
/// in input order; long, one row per episode in order of first appearance.
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
    };
    let input = input.into();
    // Typed rows in the wide layout: there is no row text to copy; the
    // output holds the score columns only, and the caller puts the input's
    // own columns in front (a Parquet output copies them from the input).
    let scores_only = matches!(input, Input::Rows(_)) && cfg.layout == Layout::Wide;
    let (mut hist, mut summary) = History::read(engine, cfg, input, needs)?;
    hist.resolve(&windows);
    let hist = hist;
    let p = &hist.plan;
    let d = cfg.delimiter;
    let mut out = Vec::with_capacity(cfg.block_size + 4096);
    let eol: &[u8] = if p.crlf { b"\r\n" } else { b"\n" };
    match cfg.layout {
        Layout::Wide => {
            let names: Vec<&str> = p.header.names.iter().map(String::as_str).collect();
            check_collisions(&names, engine)?;
            if !scores_only {
                out.extend_from_slice(&hist.header_raw);
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
    out.extend_from_slice(eol);
    let write_err = |e| Error::io("cannot write output", e);
    output.write_all(&out).map_err(write_err)?;
    // Episodes are formatted on every core, a round of chunks at a time, and
    // written in order.
    let format_chunk = |range: std::ops::Range<usize>, rows: &Loaded<'_>| -> Vec<u8> {
        let mut out = Vec::with_capacity(range.len() * 128);
        let mut bits = vec![0u64; hist.words()];
        let mut scratch = bits.clone();
        let mut values: Vec<Value> = Vec::new();
        for e in range {
            let ep = &hist.episodes[e];
            hist.final_into(engine, e, &mut bits, &mut scratch);
            engine.values(&bits, ep.age, &mut values);
            match cfg.layout {
                Layout::Wide if scores_only => {}
                Layout::Wide => {
                    let (b, s, t) = hist.row_spans[e];
                    out.extend_from_slice(rows.slice(b, s, t));
                }
                Layout::Long => {
                    write_field(&hist.patients[ep.patient as usize], d, &mut out);
                    if p.episode.is_some() {
                        out.push(d);
                        write_field(hist.key(e), d, &mut out);
                    }
                    for j in 0..p.keep.len() {
                        out.push(d);
                        write_field(hist.kept(e, j), d, &mut out);
                    }
                }
            }
            let at = out.len();
            engine.write_values(&values, d, &mut out);
            if scores_only && out.len() > at {
                // No column before the first score.
                out.remove(at);
            }
            out.extend_from_slice(eol);
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
        // The raw rows of this round, read back if they wait on disk.
        let rows = match cfg.layout {
            Layout::Wide if scores_only => hist.raw_blocks.none(),
            Layout::Wide => hist.raw_blocks.load(
                hist.row_spans[start].0,
                hist.row_spans[(start + threads * CHUNK).min(n) - 1].0,
            )?,
            Layout::Long => hist.raw_blocks.none(),
        };
        start = (start + threads * CHUNK).min(n);
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
