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

use super::{check_collisions, Exclusion, Layout, Plan, RowIssue, ScoreConfig, Summary};
use crate::code::Code;
use crate::io::{write_field, BlockReader, RecordScanner};
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
    /// Line of the episode's first record.
    pub line: u64,
    /// Data row number (1-based) of the episode's first record.
    pub row: u64,
    /// Long layout with `--episode`: the episode value.
    pub key: Box<[u8]>,
    date_unreadable: bool,
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
    words: usize,
    own_all: Vec<u64>,
    own_current: Vec<u64>,
    /// Wide layout: each row's raw bytes (range into `arena`) and episode.
    rows: Vec<(usize, usize)>,
    arena: Vec<u8>,
    /// Every code, when asked for.
    pub codes: Vec<CodeRecord>,
}

/// Per episode, the window of same-patient episodes that count for it:
/// `sorted[range.0..range.1]`.
pub struct Windows {
    pub sorted: Vec<u32>,
    pub range: Vec<(u32, u32)>,
}

impl History {
    /// Reads the whole extract.
    pub fn read(
        engine: &Engine,
        cfg: &ScoreConfig,
        input: impl Read,
        keep_codes: bool,
    ) -> Result<(History, Summary), Error> {
        let words = engine.words();
        let mut blocks = BlockReader::new(input, cfg.delimiter, cfg.block_size);
        let mut scanner = RecordScanner::new(cfg.delimiter);
        let mut summary = Summary::default();
        let mut plan: Option<Plan> = None;
        let mut header_raw = Vec::new();
        let mut patients: Vec<Box<[u8]>> = Vec::new();
        let mut episodes: Vec<Episode> = Vec::new();
        let mut own_all: Vec<u64> = Vec::new();
        let mut own_current: Vec<u64> = Vec::new();
        let mut rows: Vec<(usize, usize)> = Vec::new();
        let mut arena: Vec<u8> = Vec::new();
        let mut codes: Vec<CodeRecord> = Vec::new();
        let mut patient_index: ByteMap<u32> = ByteMap::default();
        let mut episode_index: ByteMap<u32> = ByteMap::default();
        let mut key = Vec::new();

        while let Some(block) = blocks
            .next_block()
            .map_err(|e| Error::io("cannot read input", e))?
        {
            let mut lines = super::LineCursor::new(&block);
            scanner.scan_block(&block, |rec| -> Result<(), Error> {
                let Some(p) = plan.as_ref() else {
                    let p = Plan::from_header(cfg, &block, &rec)?;
                    summary.dx_columns = p.dx_names();
                    plan = Some(p);
                    header_raw = rec.raw.to_vec();
                    return Ok(());
                };
                summary.rows_read += 1;
                p.check_width(&block, &rec)?;
                let issue = |i: RowIssue| p.issue(i, &block, &rec);
                let line = lines.line_at(&block, rec.offset);

                // Patient. Rows without an id are nobody's history: each
                // gets a patient of its own (counted; an error with --strict).
                let pid = p.id.map_or(&[][..], |c| rec.fields.get(c));
                let no_id = p.id.is_some() && pid.trim_ascii().is_empty();
                if no_id {
                    if cfg.strict {
                        return Err(p.missing_id(line));
                    }
                    summary.missing_ids += 1;
                }
                // Episode: every wide row; in the long layout one per
                // (patient, episode value), or per patient without --episode.
                let ekey = p.episode.map_or(&[][..], |c| rec.fields.get(c));
                let row = summary.rows_read;
                let mut new_episode = || {
                    let patient = match patient_index.get(pid) {
                        Some(&x) if !no_id => x,
                        _ => {
                            let x = patients.len() as u32;
                            if !no_id {
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
                        line,
                        row,
                        key: ekey.into(),
                        date_unreadable: false,
                    });
                    own_all.resize(own_all.len() + words, 0);
                    own_current.resize(own_current.len() + words, 0);
                    (episodes.len() - 1) as u32
                };
                let e = match cfg.layout {
                    Layout::Wide => new_episode(),
                    Layout::Long => {
                        key.clear();
                        key.extend_from_slice(&(pid.len() as u32).to_le_bytes());
                        key.extend_from_slice(pid);
                        key.extend_from_slice(ekey);
                        match episode_index.get(&key[..]) {
                            Some(&x) => x,
                            None => {
                                let x = new_episode();
                                episode_index.insert(key.as_slice().into(), x);
                                x
                            }
                        }
                    }
                };
                let ep = &mut episodes[e as usize];
                if ep.date.is_none() {
                    match p.read_date(cfg, &rec.fields) {
                        Ok(d) => ep.date = d,
                        Err(raw) => {
                            if cfg.strict {
                                return Err(match raw {
                                    Some(v) => issue(RowIssue::UnreadableDate(v)),
                                    None => Error::Strict {
                                        line: Some(line),
                                        message: "missing date".into(),
                                    },
                                });
                            }
                            ep.date_unreadable |= raw.is_some();
                        }
                    }
                }
                // Ages are read (and counted) on every row, as without
                // history; an episode keeps its first readable age.
                let age = p.read_age(cfg, &rec.fields, &mut summary).map_err(issue)?;
                if ep.age.is_none() {
                    ep.age = age;
                }
                let base = e as usize * words;
                let mut excluded = (0u64, 0u64);
                p.read_codes(cfg, &rec.fields, &mut summary, |written, code, excl| {
                    engine.add_code(&mut own_all[base..base + words], &code);
                    match excl {
                        None => engine.add_code(&mut own_current[base..base + words], &code),
                        Some(Exclusion::Primary) => excluded.0 += 1,
                        Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
                    }
                    if keep_codes {
                        codes.push(CodeRecord {
                            episode: e,
                            written: written.into(),
                            code,
                            exclusion: excl,
                        });
                    }
                })
                .map_err(issue)?;
                summary.excluded_primary += excluded.0;
                summary.excluded_not_on_admission += excluded.1;
                if cfg.layout == Layout::Wide {
                    let start = arena.len();
                    arena.extend_from_slice(rec.raw);
                    rows.push((start, rec.raw.len()));
                }
                Ok(())
            })?;
        }
        let Some(plan) = plan else {
            return Err(Error::data(
                None,
                "the input is empty: expected a header line naming the columns",
            ));
        };
        for ep in &episodes {
            if ep.date.is_none() && plan.date.is_some() {
                if ep.date_unreadable {
                    summary.unreadable_dates += 1;
                } else {
                    summary.missing_dates += 1;
                }
            }
        }
        let hist = History {
            plan,
            header_raw,
            patients,
            episodes,
            words,
            own_all,
            own_current,
            rows,
            arena,
            codes,
        };
        Ok((hist, summary))
    }

    /// The window of every episode. Without a lookback (or without a date)
    /// an episode's window is itself alone.
    pub fn windows(&self, lookback: Option<u32>) -> Windows {
        let n = self.episodes.len();
        let mut sorted: Vec<u32> = (0..n as u32).collect();
        // Per patient, dated episodes by date, then undated; input order
        // breaks ties.
        sorted.sort_by_key(|&e| {
            let ep = &self.episodes[e as usize];
            (ep.patient, ep.date.is_none(), ep.date.unwrap_or(0), e)
        });
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

    /// Each episode's condition set after the window and the hierarchy.
    pub fn resolve(&self, engine: &Engine, windows: &Windows) -> Vec<u64> {
        let w = self.words;
        let mut out = vec![0u64; self.episodes.len() * w];
        let mut scratch = vec![0u64; w];
        for (e, &(lo, hi)) in windows.range.iter().enumerate() {
            let bits = &mut out[e * w..(e + 1) * w];
            bits.copy_from_slice(&self.own_current[e * w..(e + 1) * w]);
            for &f in &windows.sorted[lo as usize..hi as usize] {
                if f as usize != e {
                    let other = &self.own_all[f as usize * w..(f as usize + 1) * w];
                    for (b, o) in bits.iter_mut().zip(other) {
                        *b |= o;
                    }
                }
            }
            engine.apply_hierarchy(bits, &mut scratch);
        }
        out
    }

    pub fn words(&self) -> usize {
        self.words
    }

    /// Wide layout: each row's raw bytes, in input order (one per episode).
    pub fn row_raw(&self, e: usize) -> &[u8] {
        let (s, l) = self.rows[e];
        &self.arena[s..s + l]
    }
}

/// Scores from the patient history and writes the output: wide, every row
/// in input order; long, one row per episode in order of first appearance.
pub fn score_history(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Read,
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
    let resolved = hist.resolve(engine, &windows);
    let w = hist.words();
    let mut values: Vec<Value> = Vec::new();
    let write_err = |e| Error::io("cannot write output", e);
    for (e, ep) in hist.episodes.iter().enumerate() {
        engine.values(&resolved[e * w..(e + 1) * w], ep.age, &mut values);
        match cfg.layout {
            Layout::Wide => out.extend_from_slice(hist.row_raw(e)),
            Layout::Long => {
                write_field(&hist.patients[ep.patient as usize], d, &mut out);
                if p.episode.is_some() {
                    out.push(d);
                    write_field(&ep.key, d, &mut out);
                }
            }
        }
        engine.write_values(&values, d, &mut out);
        out.extend_from_slice(eol);
        summary.rows_written += 1;
        summary.units += 1;
        if out.len() >= cfg.block_size {
            output.write_all(&out).map_err(write_err)?;
            out.clear();
        }
    }
    output.write_all(&out).map_err(write_err)?;
    output.flush().map_err(write_err)?;
    Ok(summary)
}
