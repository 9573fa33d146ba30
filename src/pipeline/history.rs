//! Patient history: scoring each episode from its own codes and those of the
//! same patient's episodes whose date lies in `[date - lookback, date]`
//! (both ends inclusive; later episodes never count, episodes of the same day
//! count each other).
//!
//! The extract is read into memory once: per episode its patient, date, age,
//! and two condition sets: `own_all` (every code, used when the episode is an
//! earlier one) and `own_current` (without the codes that the primary and
//! present-on-admission rules leave out, used when the episode is the one
//! being scored). Episodes are then sorted per patient by date and each
//! episode's window is found with two pointers.

use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::io::{Read, Write};

use super::dates;
use super::parallel::run_blocks;
use super::{
    check_collisions, disagreement, keep_first, Exclusion, Layout, Plan, RowIssue, ScoreConfig,
    Summary,
};
use crate::code::Code;
use crate::io::{write_field, RecordScanner};
use crate::matcher::KeyHasher;
use crate::score::{Engine, Value};
use crate::Error;

type ByteMap<V> = HashMap<Box<[u8]>, V, BuildHasherDefault<KeyHasher>>;

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
    words: usize,
    own_all: Vec<u64>,
    /// Empty when no exclusion rule is on (then it equals `own_all`).
    own_current: Vec<u64>,
    /// Wide layout: each row's raw bytes, as (block, start, end) into the
    /// blocks' own buffers (kept as read: no copy into one arena).
    row_spans: Vec<(u32, u32, u32)>,
    raw_blocks: Vec<Vec<u8>>,
    /// Every code, when asked for.
    pub codes: Vec<CodeRecord>,
}

/// Per episode, the window of same-patient episodes that count for it:
/// `sorted[range.0..range.1]`.
pub struct Windows {
    pub sorted: Vec<u32>,
    pub range: Vec<(u32, u32)>,
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
    /// Patient ids and episode values of the rows.
    ids: Vec<u8>,
    all: Vec<u64>,
    cur: Vec<u64>,
    raw: Vec<u8>,
    raw_ends: Vec<usize>,
    /// Codes with `episode` holding the row's index in the block.
    codes: Vec<CodeRecord>,
}

/// Reads the data records of one block.
fn read_block(
    engine: &Engine,
    cfg: &ScoreConfig,
    p: &Plan,
    block: &crate::io::Block,
    start: usize,
    scanner: &mut RecordScanner,
    (keep_codes, exclusions): (bool, bool),
) -> BlockRows {
    let words = engine.words();
    let mut b = BlockRows {
        summary: Summary::default(),
        err: None,
        rows: Vec::new(),
        ids: Vec::new(),
        all: Vec::new(),
        cur: Vec::new(),
        raw: Vec::new(),
        raw_ends: Vec::new(),
        codes: Vec::new(),
    };
    // Lines counted incrementally: O(block) per block.
    let mut lines = super::LineCursor::new(block);
    let r = scanner.scan_from(&block.data, start, block.last, |rec| -> Result<(), Error> {
        b.summary.rows_read += 1;
        p.check_width(block, &rec)?;
        let issue = |i: RowIssue| p.issue(i, block, &rec);
        let mut line = || lines.line_at(block, rec.offset);
        let no_id =
            p.id.is_some_and(|c| rec.fields.get(c).trim_ascii().is_empty());
        if no_id {
            if cfg.strict {
                return Err(p.missing_id(line()));
            }
            b.summary.missing_ids += 1;
        }
        let id = |c: Option<usize>, ids: &mut Vec<u8>| {
            let s = ids.len();
            if let Some(c) = c {
                ids.extend_from_slice(rec.fields.get(c));
            }
            (s, ids.len())
        };
        let pid = id(p.id, &mut b.ids);
        let ekey = id(p.episode, &mut b.ids);
        let date = match p.read_date(cfg, &rec.fields, &mut b.summary) {
            Ok(Some(d)) => DateRead::Day(d),
            Ok(None) => DateRead::Missing,
            Err(raw) => {
                if cfg.strict {
                    return Err(match raw {
                        Some(v) => issue(RowIssue::UnreadableDate(v)),
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
            .read_age(cfg, &rec.fields, &mut b.summary)
            .map_err(issue)?;
        let row = b.rows.len();
        b.all.resize(b.all.len() + words, 0);
        if exclusions {
            b.cur.resize(b.cur.len() + words, 0);
        }
        let base = row * words;
        let (all, cur, codes) = (&mut b.all, &mut b.cur, &mut b.codes);
        let mut excluded = (0u64, 0u64);
        p.read_codes(cfg, &rec.fields, &mut b.summary, |written, code, excl| {
            engine.add_code(&mut all[base..base + words], &code);
            match excl {
                None if exclusions => engine.add_code(&mut cur[base..base + words], &code),
                None => {}
                Some(Exclusion::Primary) => excluded.0 += 1,
                Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
            }
            if keep_codes {
                codes.push(CodeRecord {
                    episode: row as u32,
                    written: written.into(),
                    code,
                    exclusion: excl,
                });
            }
        })
        .map_err(issue)?;
        b.summary.excluded_primary += excluded.0;
        b.summary.excluded_not_on_admission += excluded.1;
        if cfg.layout == Layout::Wide {
            b.raw.extend_from_slice(rec.raw);
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
    });
    b.err = r.err();
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
    /// Reads the whole extract, parsing blocks on every core and merging
    /// them in input order.
    pub fn read(
        engine: &Engine,
        cfg: &ScoreConfig,
        input: impl Read + Send,
        keep_codes: bool,
    ) -> Result<(History, Summary), Error> {
        let words = engine.words();
        let exclusions = cfg.exclude_primary || cfg.poa.is_some();
        let mut summary = Summary::default();
        let mut patients: Vec<Box<[u8]>> = Vec::new();
        let mut episodes: Vec<Episode> = Vec::new();
        let mut keys: Vec<Box<[u8]>> = Vec::new();
        let mut own_all: Vec<u64> = Vec::new();
        let mut own_current: Vec<u64> = Vec::new();
        let mut row_spans: Vec<(u32, u32, u32)> = Vec::new();
        let mut raw_blocks: Vec<Vec<u8>> = Vec::new();
        let mut codes: Vec<CodeRecord> = Vec::new();
        let mut patient_index: ByteMap<u32> = ByteMap::default();
        let mut episode_index: ByteMap<u32> = ByteMap::default();
        let mut key = Vec::new();
        let mut rows_seen = 0u64;

        let (plan, header_raw) = run_blocks(
            cfg,
            input,
            |block, rec| Ok((Plan::from_header(cfg, block, rec)?, rec.raw.to_vec())),
            |h, block, start, scanner| {
                read_block(
                    engine,
                    cfg,
                    &h.0,
                    block,
                    start,
                    scanner,
                    (keep_codes, exclusions),
                )
            },
            |h, b: BlockRows, _| {
                let long_episodes = h.0.episode.is_some();
                let mut block_episode = Vec::with_capacity(b.rows.len());
                for (i, r) in b.rows.iter().enumerate() {
                    rows_seen += 1;
                    let pid = &b.ids[r.pid.0..r.pid.1];
                    // A new episode's patient; rows without an id get a
                    // patient of their own.
                    let mut fresh =
                        |episodes: &mut Vec<Episode>,
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
                    let other_age = keep_first(&mut ep.age, r.age)
                        .map(|(first, a)| disagreement("age", a, first));
                    if let Some(message) = other_date.or(other_age) {
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
                if cfg.layout == Layout::Wide {
                    let bi = raw_blocks.len() as u32;
                    let mut start = 0u32;
                    row_spans.extend(b.raw_ends.iter().map(|&x| {
                        let span = (bi, start, x as u32);
                        start = x as u32;
                        span
                    }));
                    raw_blocks.push(b.raw);
                }
                for mut c in b.codes {
                    c.episode = block_episode[c.episode as usize];
                    codes.push(c);
                }
                summary.merge(b.summary);
                b.err.map_or(Ok(()), Err)
            },
        )?;
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
            words,
            own_all,
            own_current,
            row_spans,
            raw_blocks,
            codes,
        };
        Ok((hist, summary))
    }

    /// The window of every episode. Without a lookback (or without a date)
    /// an episode's window is itself alone.
    pub fn windows(&self, lookback: Option<u32>) -> Windows {
        let n = self.episodes.len();
        // Per patient, dated episodes by date, then undated; input order
        // breaks ties. One packed key per episode: patient (32 bits), then
        // 1 bit "undated", then the date shifted to be non-negative.
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
        let sorted: Vec<u32> = keyed.into_iter().map(|(_, e)| e).collect();
        let mut range = vec![(0u32, 0u32); n];
        let mut i = 0;
        while i < n {
            let patient = self.episodes[sorted[i] as usize].patient;
            let mut end = i;
            while end < n && self.episodes[sorted[end] as usize].patient == patient {
                end += 1;
            }
            let (mut lo, mut hi) = (i, i);
            for k in i..end {
                let ep = &self.episodes[sorted[k] as usize];
                match (ep.date, lookback) {
                    (Some(d), Some(l)) => {
                        let d = d as i64;
                        while hi < end
                            && self.episodes[sorted[hi] as usize]
                                .date
                                .is_some_and(|x| (x as i64) <= d)
                        {
                            hi += 1;
                        }
                        while self.episodes[sorted[lo] as usize]
                            .date
                            .is_some_and(|x| (x as i64) < d - l as i64)
                        {
                            lo += 1;
                        }
                        range[sorted[k] as usize] = (lo as u32, hi as u32);
                    }
                    _ => range[sorted[k] as usize] = (k as u32, k as u32 + 1),
                }
            }
            i = end;
        }
        Windows { sorted, range }
    }

    /// Episode `e`'s condition set after its window and the hierarchy, into
    /// `bits` (`scratch`: the hierarchy's work space).
    pub fn resolve_into(
        &self,
        engine: &Engine,
        windows: &Windows,
        e: usize,
        bits: &mut [u64],
        scratch: &mut [u64],
    ) {
        let w = self.words;
        let current = if self.own_current.is_empty() {
            &self.own_all
        } else {
            &self.own_current
        };
        bits.copy_from_slice(&current[e * w..(e + 1) * w]);
        let (lo, hi) = windows.range[e];
        for &f in &windows.sorted[lo as usize..hi as usize] {
            if f as usize != e {
                let other = &self.own_all[f as usize * w..(f as usize + 1) * w];
                for (b, o) in bits.iter_mut().zip(other) {
                    *b |= o;
                }
            }
        }
        engine.apply_hierarchy(bits, scratch);
    }

    /// Every episode's condition set after its window and the hierarchy.
    pub fn resolve(&self, engine: &Engine, windows: &Windows) -> Vec<u64> {
        let w = self.words;
        let mut out = vec![0u64; self.episodes.len() * w];
        let mut scratch = vec![0u64; w];
        for e in 0..self.episodes.len() {
            self.resolve_into(
                engine,
                windows,
                e,
                &mut out[e * w..(e + 1) * w],
                &mut scratch,
            );
        }
        out
    }

    /// Long layout with `--episode`: episode `e`'s value.
    pub fn key(&self, e: usize) -> &[u8] {
        self.keys.get(e).map_or(&[][..], |k| &k[..])
    }

    pub fn words(&self) -> usize {
        self.words
    }

    /// Wide layout: each row's raw bytes, in input order (one per episode).
    pub fn row_raw(&self, e: usize) -> &[u8] {
        let (b, start, end) = self.row_spans[e];
        &self.raw_blocks[b as usize][start as usize..end as usize]
    }
}

/// Scores from the patient history and writes the output: wide, every row
/// in input order; long, one row per episode in order of first appearance.
pub fn score_history(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Read + Send,
    output: &mut dyn Write,
) -> Result<Summary, Error> {
    let (hist, mut summary) = History::read(engine, cfg, input, false)?;
    let p = &hist.plan;
    let d = cfg.delimiter;
    let mut out = Vec::with_capacity(cfg.block_size + 4096);
    let eol: &[u8] = if p.crlf { b"\r\n" } else { b"\n" };
    match cfg.layout {
        Layout::Wide => {
            let names: Vec<&str> = p.header.names.iter().map(String::as_str).collect();
            check_collisions(&names, engine)?;
            out.extend_from_slice(&hist.header_raw);
        }
        Layout::Long => {
            let mut keep = vec![p.header.names[p.id.unwrap_or(0)].as_str()];
            if let Some(c) = p.episode {
                keep.push(&p.header.names[c]);
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
    for c in engine.columns() {
        out.push(d);
        write_field(c.name.as_bytes(), d, &mut out);
    }
    out.extend_from_slice(eol);
    let windows = hist.windows(cfg.lookback);
    let write_err = |e| Error::io("cannot write output", e);
    output.write_all(&out).map_err(write_err)?;
    // Episodes are formatted on every core, a round of chunks at a time, and
    // written in order.
    let format_chunk = |range: std::ops::Range<usize>| -> Vec<u8> {
        let mut out = Vec::with_capacity(range.len() * 128);
        let mut bits = vec![0u64; hist.words()];
        let mut scratch = bits.clone();
        let mut values: Vec<Value> = Vec::new();
        for e in range {
            let ep = &hist.episodes[e];
            hist.resolve_into(engine, &windows, e, &mut bits, &mut scratch);
            engine.values(&bits, ep.age, &mut values);
            match cfg.layout {
                Layout::Wide => out.extend_from_slice(hist.row_raw(e)),
                Layout::Long => {
                    write_field(&hist.patients[ep.patient as usize], d, &mut out);
                    if p.episode.is_some() {
                        out.push(d);
                        write_field(hist.key(e), d, &mut out);
                    }
                }
            }
            engine.write_values(&values, d, &mut out);
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
        start = (start + threads * CHUNK).min(n);
        let parts: Option<Vec<Vec<u8>>> = std::thread::scope(|s| {
            let handles: Vec<_> = chunks
                .into_iter()
                .map(|r| s.spawn(|| format_chunk(r)))
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
