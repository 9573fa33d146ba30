//! Lookback beyond the memory limit (`score` and `explain`): the history is
//! partitioned by patient into temporary files, each partition is resolved
//! and formatted (scores, or `explain`'s records) in memory on its own, and
//! the partitions' output is merged back in input order.
//!
//! 1. While reading, once the history passes half of `--memory` (or as
//!    soon as the input's size shows that it will), every episode read so
//!    far and then every later row is written as a compact binary record to
//!    partition `hash(patient id) % PARTITIONS`: the row number as the
//!    difference from the partition's previous one, the line (long layout
//!    only), date, age, flags, id, episode value, kept values, and the
//!    condition sets as the numbers of their conditions; for `explain`,
//!    every code too (exclusion, normalised code, field as written). A
//!    patient's records all go to one partition, in input order (the wide
//!    layout without a lookback, where each row stands alone, spreads rows
//!    by their number instead). The wide layout's
//!    raw rows do not travel with them: they go, in input order, to one
//!    rows file, read back once by the final merge.
//! 2. The partitions are read back into [`Builder`]s (the same merging of
//!    rows into episodes as the in-memory run), resolved
//!    ([`History::resolve`](super::history::History::resolve)) and
//!    formatted, several at a time on as many threads as the memory limit
//!    allows; each partition's output (the
//!    scores after the raw row in the wide layout, whole lines in the long
//!    layout; `explain`: all the records of an episode), with row numbers,
//!    is appended to one result file as a run (`explain`'s, many times its
//!    history, goes to a file of its own as it is made), and the
//!    partition's file is removed. A partition's episodes are in
//!    increasing row order.
//! 3. The output walks the rows in order: a k-way merge by row number of
//!    the runs of the result file, each line put after its raw row read
//!    from the rows file.
//!
//! A `--strict` run stopped while reading (a bad record, a failed read)
//! first reads the partitions written so far back for a disagreement on an
//! earlier line ([`Spill::first_disagreement`]), which the in-memory run
//! would have stopped at first.
//!
//! Every file is registered with `io::atomic` (removed on SIGINT, SIGTERM,
//! SIGHUP) and removed when dropped, after success or failure.

use std::cmp::Reverse;
use std::collections::BinaryHeap;
use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Write};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, AtomicUsize, Ordering};
use std::sync::mpsc::sync_channel;

use super::explain::{Explainer, Pace};
use super::history::{
    check_unreadable_dates, Builder, CodeRecord, DateRead, Formatter, RowIn, Windows,
};
use super::rows_store::RowStore;
use super::{Exclusion, Layout, OutputForm, OverMemory, Plan, ScoreConfig, Summary};
use crate::code::Code;
use crate::io::value_records::put_varint;
use crate::matcher::KeyHasher;
use crate::rows::{Keys, RowNaming};
use crate::score::Engine;
use crate::Error;
use std::hash::Hasher;

/// Partitions of a spilled history: a history of N bytes needs about
/// N / PARTITIONS in memory per partition.
const PARTITIONS: usize = 128;
/// Write buffer per partition file.
const WRITE_BUFFER: usize = 64 << 10;
/// What resolving a partition holds in memory, at most, per byte of its
/// file (the episodes, ids, condition sets, window order and formatted
/// output of a compact record of about 25 bytes).
const MEMORY_PER_RECORD_BYTE: u64 = 6;
/// The same for `explain`, whose records carry every code (about 64 bytes
/// in memory for a code of about 12 in the file); its output, many times
/// the history, goes to a file of the partition's own as it is made.
const EXPLAIN_MEMORY_PER_RECORD_BYTE: u64 = 8;

/// What the resolved partitions write.
#[derive(Clone, Copy)]
pub(crate) enum Lines<'a> {
    /// `score`: each episode's scores (after its raw row, in the wide
    /// layout of a text input).
    Scores,
    /// `explain`: each episode's records.
    Explain(&'a Explainer),
}

static SERIAL: AtomicU64 = AtomicU64::new(0);

/// A temporary file: registered for removal on signals, removed on drop.
pub(crate) struct TempPath(PathBuf);

impl TempPath {
    fn create(dir: &Path, what: &str) -> Result<(TempPath, File), Error> {
        let path = dir.join(format!(
            "morbus-{what}-{}-{}.tmp",
            std::process::id(),
            SERIAL.fetch_add(1, Ordering::Relaxed)
        ));
        let file = crate::io::atomic::create_working_file(&path).map_err(|e| {
            Error::io(
                format!("cannot create a temporary file in {}", dir.display()),
                e,
            )
        })?;
        Ok((TempPath(path), file))
    }

    fn error(&self, verb: &str, e: std::io::Error) -> Error {
        Error::io(format!("cannot {verb} {}", self.0.display()), e)
    }
}

impl Drop for TempPath {
    fn drop(&mut self) {
        crate::io::atomic::remove_working_file(&self.0);
    }
}

struct Part {
    out: BufWriter<File>,
    path: TempPath,
    /// Row number of the partition's last record.
    last_row: u64,
    bytes: u64,
}

/// The partition files of a history being spilled.
pub(crate) struct Spill {
    dir: PathBuf,
    parts: Vec<Part>,
    words: usize,
    nkeep: usize,
    exclusions: bool,
    /// Records carry each code as read (for `explain`).
    codes: bool,
    /// Long layout: records carry their line (for `--strict` messages).
    lines: bool,
    /// Wide layout without a lookback: every row is scored alone, so rows
    /// are spread over the partitions by their number, not by patient (an
    /// extract without ids would otherwise be one partition).
    by_row: bool,
    /// The wide layout's raw rows, in input order (when the output copies
    /// them).
    rows: Option<(BufWriter<File>, TempPath)>,
    /// Bytes and records written.
    bytes: u64,
    records: u64,
    rec: Vec<u8>,
    /// The run's plan (to read the records back for `--strict`'s check of
    /// a run stopped while reading) and how a typed source names its rows
    /// in messages.
    plan: Plan,
    naming: Option<RowNaming>,
}

/// The partition of patient id `pid` (held as `keys` says): by a hash of
/// the id's text, or of a typed id's key (a whole number, a date...: its
/// kind and value, not written out as text). A text id of a typed source
/// (a string column) hashes as the same id of a delimited extract, so
/// that both partition alike.
fn partition_of(keys: Keys, pid: &[u8]) -> usize {
    let bytes = match keys.field(pid) {
        crate::rows::Field::Text(t) => t,
        _ => pid,
    };
    let mut h = KeyHasher::default();
    h.write(bytes);
    let x = h.finish().wrapping_mul(0xD6E8_FEB8_6659_FD93);
    ((x >> 32) as usize) % PARTITIONS
}

fn put_bytes(rec: &mut Vec<u8>, b: &[u8]) {
    put_varint(rec, b.len() as u64);
    rec.extend_from_slice(b);
}

/// A condition set as the number of its conditions, then each condition's
/// number as the difference from the previous one.
fn put_set(rec: &mut Vec<u8>, set: &[u64]) {
    let n: u32 = set.iter().map(|w| w.count_ones()).sum();
    put_varint(rec, n as u64);
    let mut last = 0u64;
    for (j, &w) in set.iter().enumerate() {
        let mut x = w;
        while x != 0 {
            let b = (j as u64) * 64 + x.trailing_zeros() as u64;
            x &= x - 1;
            put_varint(rec, b - last);
            last = b;
        }
    }
}

/// The codes of a row: their number, then each one's exclusion (0 none, 1
/// primary, 2 not present on admission), normalised characters and field
/// as written.
fn put_codes(rec: &mut Vec<u8>, codes: &[CodeRecord]) {
    put_varint(rec, codes.len() as u64);
    for c in codes {
        rec.push(match c.exclusion {
            None => 0,
            Some(Exclusion::Primary) => 1,
            Some(Exclusion::NotPresentOnAdmission) => 2,
        });
        put_bytes(rec, c.code.as_bytes());
        put_bytes(rec, &c.written);
    }
}

impl Spill {
    /// Creates the partition files in `dir` (and the rows file, with
    /// `raw`) for records of `words` words per condition set, `nkeep` kept
    /// values, two sets (`exclusions`) and the codes (`codes`), of a run
    /// read with `plan` from a source whose rows `naming` names.
    pub fn new(
        dir: &Path,
        (words, nkeep, exclusions, codes): (usize, usize, bool, bool),
        raw: bool,
        cfg: &ScoreConfig,
        (plan, naming): (&Plan, Option<&RowNaming>),
    ) -> Result<Spill, Error> {
        let mut parts = Vec::with_capacity(PARTITIONS);
        for _ in 0..PARTITIONS {
            let (path, file) = TempPath::create(dir, "part")?;
            parts.push(Part {
                out: BufWriter::with_capacity(WRITE_BUFFER, file),
                path,
                last_row: 0,
                bytes: 0,
            });
        }
        let rows = if raw {
            let (path, file) = TempPath::create(dir, "rows")?;
            Some((BufWriter::with_capacity(1 << 20, file), path))
        } else {
            None
        };
        Ok(Spill {
            dir: dir.to_path_buf(),
            parts,
            words,
            nkeep,
            exclusions,
            codes,
            lines: cfg.layout == Layout::Long,
            by_row: cfg.layout == Layout::Wide
                && cfg.lookback.is_none()
                && cfg.lookback_lists.is_empty(),
            rows,
            bytes: 0,
            records: 0,
            rec: Vec::new(),
            plan: plan.clone(),
            naming: naming.cloned(),
        })
    }

    /// The first `--strict` disagreement in input order among the records
    /// written so far (`None` if there is none, or if they cannot be read
    /// back). A run stopped while reading (a bad record, a failed read)
    /// reports it instead: every record written comes before the stop, and
    /// the in-memory run would have stopped at it first. Only the long
    /// layout's units can disagree. The partitions are read back side by
    /// side into [`Builder`]s, each up to the smallest line found so far;
    /// nothing is resolved or formatted.
    pub fn first_disagreement(&mut self, cfg: &ScoreConfig) -> Option<Error> {
        if !cfg.strict || !self.lines || self.records == 0 {
            return None;
        }
        let mut largest = 0u64;
        for part in &mut self.parts {
            part.out.flush().ok()?;
            largest = largest.max(part.bytes);
        }
        let shape = Shape {
            words: self.words,
            nkeep: self.nkeep,
            exclusions: self.exclusions,
            // A record's codes come last: left unread.
            codes: false,
            lines: true,
            raw: false,
            output: Lines::Scores,
        };
        let fit = (cfg.memory / 4 * 3) / (largest * MEMORY_PER_RECORD_BYTE).max(1);
        let concurrent = (fit as usize).clamp(1, super::parallel::threads(cfg));
        let next = AtomicUsize::new(0);
        let until = AtomicU64::new(u64::MAX);
        let (parts, plan, shape) = (&self.parts, &self.plan, &shape);
        let (next, until) = (&next, &until);
        // Each worker's first disagreement; `None` when one failed.
        let found: Option<Vec<Option<(u64, Error)>>> = std::thread::scope(|s| {
            let workers: Vec<_> = (0..concurrent)
                .map(|_| {
                    s.spawn(move || {
                        let mut first: Option<(u64, Error)> = None;
                        while let Some(part) = parts.get(next.fetch_add(1, Ordering::Relaxed)) {
                            if part.bytes == 0 {
                                continue;
                            }
                            let bound = until.load(Ordering::Relaxed);
                            match read_partition(cfg, plan, shape, &part.path, bound) {
                                Err(Stop::Disagreement(line, e)) if line < bound => {
                                    until.fetch_min(line, Ordering::Relaxed);
                                    if first.as_ref().is_none_or(|(l, _)| line < *l) {
                                        first = Some((line, e));
                                    }
                                }
                                // Unreadable: the stop as it was.
                                Err(Stop::Failed(_)) => return None,
                                _ => {}
                            }
                        }
                        Some(first)
                    })
                })
                .collect();
            workers
                .into_iter()
                .map(|w| w.join().ok().flatten())
                .collect()
        });
        found?
            .into_iter()
            .flatten()
            .min_by_key(|(line, _)| *line)
            .map(|(_, e)| e)
    }

    /// Writes a row (or an episode read before the spill) to its patient's
    /// partition, and its raw row (wide layout) to the rows file. Rows come
    /// in input order. `codes` are the row's (or episode's) codes, in the
    /// order read, written when the spill keeps codes.
    pub fn write(&mut self, r: &RowIn<'_>, raw: &[u8], codes: &[CodeRecord]) -> Result<(), Error> {
        let k = if self.by_row {
            (r.row % PARTITIONS as u64) as usize
        } else {
            partition_of(self.plan.keys, r.pid)
        };
        let part = &mut self.parts[k];
        let rec = &mut self.rec;
        rec.clear();
        put_varint(rec, r.row - part.last_row);
        part.last_row = r.row;
        if self.lines {
            put_varint(rec, r.line);
        }
        let (kind, day) = match r.date {
            DateRead::Missing => (0u8, None),
            DateRead::Day(d) => (1, Some(d)),
            DateRead::Unreadable => (2, None),
        };
        rec.push(r.no_id as u8 | (r.disagrees as u8) << 1 | kind << 2);
        if let Some(d) = day {
            rec.extend_from_slice(&d.to_le_bytes());
        }
        rec.push(r.age.map_or(u8::MAX, |a| a.min(254) as u8));
        put_bytes(rec, r.pid);
        put_bytes(rec, r.ekey);
        for &(s, t) in r.kept {
            put_bytes(rec, &r.kept_bytes[s..t]);
        }
        put_set(rec, r.all);
        if self.exclusions {
            put_set(rec, r.cur);
        }
        if self.codes {
            put_codes(rec, codes);
        }
        let (mut head, mut hl, mut x) = ([0u8; 10], 0, rec.len() as u64);
        while x >= 0x80 {
            head[hl] = x as u8 | 0x80;
            x >>= 7;
            hl += 1;
        }
        head[hl] = x as u8;
        hl += 1;
        part.out
            .write_all(&head[..hl])
            .and_then(|()| part.out.write_all(rec))
            .map_err(|e| part.path.error("write", e))?;
        let n = (hl + rec.len()) as u64;
        part.bytes += n;
        self.bytes += n;
        self.records += 1;
        if let Some((out, path)) = self.rows.as_mut() {
            rec.clear();
            put_varint(rec, raw.len() as u64);
            out.write_all(rec)
                .and_then(|()| out.write_all(raw))
                .map_err(|e| path.error("write", e))?;
            self.bytes += (rec.len() + raw.len()) as u64;
        }
        Ok(())
    }

    /// Resolves each partition (read with `plan`), then writes `head` (the
    /// header line) and every output line (`lines`: scores or explain
    /// records) in input order to `output`. Adds the episodes' counts
    /// (dates, disagreements, rows written, what was spilled) to `summary`.
    #[allow(clippy::too_many_arguments)]
    pub fn finish(
        self,
        engine: &Engine,
        cfg: &ScoreConfig,
        windows: &Windows,
        (plan, head): (Plan, &[u8]),
        lines_of: Lines<'_>,
        summary: &mut Summary,
        output: &mut dyn Write,
    ) -> Result<(), Error> {
        let Spill {
            dir,
            parts,
            words,
            nkeep,
            exclusions,
            codes,
            lines,
            rows,
            bytes,
            records,
            naming,
            ..
        } = self;
        let raw = rows.is_some();
        let rows = match rows {
            Some((out, path)) => {
                let file = out
                    .into_inner()
                    .map_err(|e| path.error("write", e.into_error()))?;
                drop(file);
                let file = File::open(&path.0).map_err(|e| path.error("read", e))?;
                Some((BufReader::with_capacity(1 << 20, file), path))
            }
            None => None,
        };
        let mut files = Vec::with_capacity(parts.len());
        let mut largest = 0u64;
        for part in parts {
            let Part {
                out, path, bytes, ..
            } = part;
            let file = out
                .into_inner()
                .map_err(|e| path.error("write", e.into_error()))?;
            drop(file);
            largest = largest.max(bytes);
            files.push(path);
        }
        // As many partitions at once as there are threads, within three
        // quarters of the memory limit (the history read is gone by now); a
        // partition alone formats on every core.
        let threads = super::parallel::threads(cfg);
        let per_byte = match lines_of {
            Lines::Scores => MEMORY_PER_RECORD_BYTE,
            Lines::Explain(_) => EXPLAIN_MEMORY_PER_RECORD_BYTE,
        };
        let fit = (cfg.memory / 4 * 3) / (largest * per_byte).max(1);
        let concurrent = (fit as usize).clamp(1, threads);
        let inner = if concurrent == 1 { threads } else { 1 };
        let shape = Shape {
            words,
            nkeep,
            exclusions,
            codes,
            lines,
            raw,
            output: lines_of,
        };

        let (result_path, result) = TempPath::create(&dir, "scored")?;
        let mut results = BufWriter::with_capacity(1 << 20, &result);
        // Runs: (file, start, end); file 0 is the result file, the others
        // a partition's own (explain).
        let mut segments: Vec<(usize, u64, u64)> = Vec::with_capacity(files.len());
        let mut own: Vec<(TempPath, File)> = Vec::new();
        let mut at = 0u64;
        let mut episodes = 0u64;
        // A --strict disagreement: the first in input order of any partition.
        let mut first_error: Option<(u64, Error)> = None;
        let mut write_failed: Option<Error> = None;
        let next = AtomicUsize::new(0);
        let files = &files;
        let dir = &dir;
        let next = &next;
        let plan = &plan;
        let shape = &shape;
        let (tx, rx) = sync_channel::<Resolved>(concurrent);
        std::thread::scope(|s| {
            for _ in 0..concurrent {
                let tx = tx.clone();
                s.spawn(move || loop {
                    let k = next.fetch_add(1, Ordering::Relaxed);
                    if k >= files.len() {
                        break;
                    }
                    let r =
                        resolve_partition(engine, cfg, windows, plan, shape, &files[k], inner, dir);
                    if tx.send(r).is_err() {
                        break;
                    }
                });
            }
            drop(tx);
            for r in rx {
                match r {
                    Resolved::Done {
                        out,
                        summary: s,
                        episodes: n,
                    } => {
                        summary.merge(s);
                        episodes += n;
                        if write_failed.is_some() || first_error.is_some() {
                            continue;
                        }
                        let out = match out {
                            Run::Bytes(out) => out,
                            Run::File(path, file, len) => {
                                own.push((path, file));
                                segments.push((own.len(), 0, len));
                                at += len;
                                continue;
                            }
                        };
                        let start = at;
                        match results.write_all(&out) {
                            Ok(()) => {
                                at += out.len() as u64;
                                segments.push((0, start, start + out.len() as u64));
                            }
                            Err(e) => write_failed = Some(result_path.error("write", e)),
                        }
                    }
                    Resolved::Disagreement(line, e) => {
                        if first_error.as_ref().is_none_or(|(l, _)| line < *l) {
                            first_error = Some((line, e));
                        }
                    }
                    Resolved::Failed(e) => {
                        write_failed.get_or_insert(e);
                    }
                }
            }
        });
        if let Some(e) = write_failed {
            return Err(e);
        }
        if let Some((_, e)) = first_error {
            // A typed source's rows by their number, as in memory.
            return Err(match naming {
                Some(n) => n.name(e),
                None => e,
            });
        }
        results.flush().map_err(|e| result_path.error("write", e))?;
        drop(results);
        if plan.date.is_some() {
            check_unreadable_dates(cfg, summary, episodes)?;
        }
        summary.spilled_records += records;
        summary.spilled_bytes += bytes + at;
        summary.rows_written += episodes;
        summary.units += episodes;

        // The merge: the next line of every partition, smallest row first,
        // after its raw row.
        let write_err = |e| Error::io("cannot write output", e);
        output.write_all(head).map_err(write_err)?;
        let mut readers: Vec<Segment> = segments
            .iter()
            .map(|&(_, s, t)| Segment::new(s, t))
            .collect();
        let file_of = |k: usize| match segments[k].0 {
            0 => (&result, &result_path),
            f => (&own[f - 1].1, &own[f - 1].0),
        };
        let mut heap = BinaryHeap::new();
        for (k, r) in readers.iter_mut().enumerate() {
            let (file, path) = file_of(k);
            if let Some(row) = r.next(file).map_err(|e| path.error("read", e))? {
                heap.push(Reverse((row, k)));
            }
        }
        let mut rows = rows;
        let mut raw_row = Vec::new();
        let mut out: Vec<u8> = Vec::with_capacity(1 << 20);
        while let Some(Reverse((_, k))) = heap.pop() {
            let r = &mut readers[k];
            if let Some((input, path)) = rows.as_mut() {
                if !read_record(input, &mut raw_row).map_err(|e| path.error("read", e))? {
                    return Err(path.error(
                        "read",
                        std::io::Error::new(
                            std::io::ErrorKind::UnexpectedEof,
                            "the rows file ends early",
                        ),
                    ));
                }
                match cfg.output_form {
                    OutputForm::Text => out.extend_from_slice(&raw_row),
                    OutputForm::ValueRecords => {
                        crate::io::value_records::put_text(&mut out, &raw_row)
                    }
                }
            }
            out.extend_from_slice(r.line());
            if out.len() >= 1 << 20 {
                output.write_all(&out).map_err(write_err)?;
                out.clear();
            }
            let (file, path) = file_of(k);
            if let Some(row) = r.next(file).map_err(|e| path.error("read", e))? {
                heap.push(Reverse((row, k)));
            }
        }
        output.write_all(&out).map_err(write_err)?;
        drop(own);
        drop(result);
        drop(result_path);
        drop(rows);
        Ok(())
    }
}

/// What a partition's records hold, and what its output is.
struct Shape<'a> {
    words: usize,
    nkeep: usize,
    exclusions: bool,
    codes: bool,
    lines: bool,
    raw: bool,
    output: Lines<'a>,
}

/// A partition resolved: its output (a run of the result file), or the
/// first `--strict` disagreement it holds (with its line), or a failure.
// One per partition: the size of the variants does not matter.
#[allow(clippy::large_enum_variant)]
enum Resolved {
    Done {
        out: Run,
        summary: Summary,
        episodes: u64,
    },
    Disagreement(u64, Error),
    Failed(Error),
}

/// A partition's output: bytes for the result file, or a file of its own
/// (with its length), written as it was made (`explain`, whose output can
/// be many times its history).
enum Run {
    Bytes(Vec<u8>),
    File(TempPath, File, u64),
}

/// Reads partition `path` back into a history, resolves it and formats
/// its episodes (on `threads` threads): each output record is the row
/// number (as the difference from the previous one), the line's length and
/// the line (the part after the raw row, with `shape.raw`). The file is
/// removed once read.
#[allow(clippy::too_many_arguments)]
fn resolve_partition(
    engine: &Engine,
    cfg: &ScoreConfig,
    windows: &Windows,
    plan: &Plan,
    shape: &Shape<'_>,
    path: &TempPath,
    threads: usize,
    dir: &Path,
) -> Resolved {
    let Shape {
        words, raw, output, ..
    } = *shape;
    let p = plan.clone();
    let (builder, mut summary, codes) = match read_partition(cfg, &p, shape, path, u64::MAX) {
        Ok(read) => read,
        Err(Stop::Disagreement(line, e)) => return Resolved::Disagreement(line, e),
        Err(Stop::Failed(e)) => return Resolved::Failed(e),
    };
    crate::io::atomic::remove_working_file(&path.0);
    // Over half of --memory: the limit is passed; say so loudly, naming
    // the id with the most episodes (one patient cannot be split).
    let held = builder.heap_bytes() as u64;
    let store = RowStore::new(0, dir);
    let mut owned = builder.finish(
        p,
        Vec::new(),
        (Vec::new(), Vec::new(), store),
        codes,
        &mut summary,
    );
    owned.set_rows_apart(raw);
    let n = owned.episodes.len();
    if held > cfg.memory / 2 {
        let mut per = vec![0u64; owned.patients_len()];
        for ep in &owned.episodes {
            per[ep.patient as usize] += 1;
        }
        if let Some((p, &k)) = per.iter().enumerate().max_by_key(|&(_, k)| *k) {
            summary.over_memory = Some(OverMemory {
                bytes: held,
                episodes: n as u64,
                id: owned
                    .plan
                    .keys
                    .text(owned.patient_id(p as u32))
                    .into_owned(),
                id_episodes: k,
            });
        }
    }
    let sorted = owned.resolve(windows, threads);
    if let Lines::Explain(explainer) = output {
        // Each episode's records, with its row number, in the partition's
        // order (increasing rows), to a file of the partition's own;
        // formatted on `threads` threads, written in order.
        let (out_path, file) = match TempPath::create(dir, "explained") {
            Ok(f) => f,
            Err(e) => return Resolved::Failed(e),
        };
        let mut out = BufWriter::with_capacity(1 << 18, &file);
        let mut len = 0u64;
        let hist = &owned;
        let frame = |e: usize, records: &[u8], text: &mut Vec<u8>| {
            let last = if e == 0 { 0 } else { hist.row(e - 1) };
            put_varint(text, hist.row(e) - last);
            put_bytes(text, records);
        };
        let pace = Pace::new(threads, n, cfg.memory);
        let done = explainer
            .explain(engine, windows, hist, &sorted, pace, frame, |text| {
                len += text.len() as u64;
                out.write_all(text).map_err(|e| out_path.error("write", e))
            })
            .and_then(|()| out.flush().map_err(|e| out_path.error("write", e)));
        drop(out);
        return match done {
            Ok(()) => Resolved::Done {
                out: Run::File(out_path, file, len),
                summary,
                episodes: n as u64,
            },
            Err(e) => Resolved::Failed(e),
        };
    }
    drop(sorted);
    // Formatted in chunks (on `threads` threads), put together in order.
    let per = n.div_ceil(threads.max(1)).max(1);
    let hist = &owned;
    let format = |from: usize| -> Vec<u8> {
        let to = (from + per).min(n);
        let rows = hist.rows_none();
        let mut f = Formatter::new(words);
        let mut out = Vec::with_capacity((to - from) * 64);
        let mut line = Vec::new();
        let mut last = if from == 0 { 0 } else { hist.row(from - 1) };
        for e in from..to {
            line.clear();
            f.episode(engine, cfg, hist, e, &rows, &mut line);
            let row = hist.row(e);
            put_varint(&mut out, row - last);
            last = row;
            put_bytes(&mut out, &line);
        }
        out
    };
    let chunks: Option<Vec<Vec<u8>>> = if threads <= 1 || n <= per {
        Some((0..n).step_by(per).map(format).collect())
    } else {
        std::thread::scope(|s| {
            let handles: Vec<_> = (0..n)
                .step_by(per)
                .map(|from| s.spawn(move || format(from)))
                .collect();
            handles.into_iter().map(|h| h.join().ok()).collect()
        })
    };
    let Some(chunks) = chunks else {
        return Resolved::Failed(Error::data(None, "internal error: an output thread failed"));
    };
    let out = if chunks.len() == 1 {
        chunks.into_iter().next().unwrap_or_default()
    } else {
        chunks.concat()
    };
    Resolved::Done {
        out: Run::Bytes(out),
        summary,
        episodes: n as u64,
    }
}

/// Why a partition was not read back whole: a `--strict` disagreement
/// (with its line), or a failure.
enum Stop {
    Disagreement(u64, Error),
    Failed(Error),
}

/// Reads partition `path` back into a [`Builder`] (with `plan`), merging
/// its records into episodes as the in-memory run merges rows, up to the
/// first record of line `until` or later (long layout): the builder, its
/// counts and the codes read (with their episode); or the first `--strict`
/// disagreement (with its line), or a failure.
fn read_partition(
    cfg: &ScoreConfig,
    p: &Plan,
    shape: &Shape<'_>,
    path: &TempPath,
    until: u64,
) -> Result<(Builder, Summary, Vec<CodeRecord>), Stop> {
    let Shape {
        words,
        nkeep,
        exclusions,
        codes: with_codes,
        lines,
        ..
    } = *shape;
    let mut summary = Summary::default();
    let file = File::open(&path.0).map_err(|e| Stop::Failed(path.error("read", e)))?;
    let mut input = BufReader::with_capacity(1 << 18, file);
    let mut builder = Builder::new(cfg, p, words);
    let mut rec = Vec::new();
    let mut kept: Vec<(usize, usize)> = Vec::with_capacity(nkeep);
    let (mut all, mut cur) = (vec![0u64; words], vec![0u64; words]);
    let mut row = 0u64;
    let mut codes: Vec<CodeRecord> = Vec::new();
    let mut row_codes: Vec<CodeRecord> = Vec::new();
    loop {
        match read_record(&mut input, &mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(Stop::Failed(path.error("read", e))),
        }
        let mut c = Cursor { b: &rec, at: 0 };
        row += c.varint();
        let line = if lines { c.varint() } else { 0 };
        if line >= until {
            break;
        }
        let flags = c.u8();
        let day = if flags >> 2 == 1 { c.i32() } else { 0 };
        let age = c.u8();
        let pid = c.bytes();
        let ekey = c.bytes();
        kept.clear();
        for _ in 0..nkeep {
            let n = c.varint() as usize;
            kept.push((c.at, c.at + n));
            c.at += n;
        }
        c.set(&mut all);
        if exclusions {
            c.set(&mut cur);
        }
        row_codes.clear();
        if with_codes {
            for _ in 0..c.varint() {
                let exclusion = match c.u8() {
                    1 => Some(Exclusion::Primary),
                    2 => Some(Exclusion::NotPresentOnAdmission),
                    _ => None,
                };
                let Some(code) = Code::from_normalised(c.bytes()) else {
                    return Err(Stop::Failed(path.error(
                        "read",
                        std::io::Error::new(std::io::ErrorKind::InvalidData, "a damaged code"),
                    )));
                };
                row_codes.push(CodeRecord {
                    episode: 0,
                    written: c.bytes().into(),
                    code,
                    exclusion,
                });
            }
        }
        let r = RowIn {
            row,
            line,
            no_id: flags & 1 != 0,
            disagrees: flags & 2 != 0,
            date: match flags >> 2 {
                1 => DateRead::Day(day),
                2 => DateRead::Unreadable,
                _ => DateRead::Missing,
            },
            age: (age != u8::MAX).then_some(age as u32),
            pid,
            pid_hash: None,
            ekey,
            kept_bytes: &rec,
            kept: &kept,
            all: &all,
            cur: if exclusions { &cur } else { &[] },
        };
        match builder.add_row(p, &r, &mut summary) {
            Ok(e) => codes.extend(row_codes.drain(..).map(|c| CodeRecord { episode: e, ..c })),
            Err(e) => return Err(Stop::Disagreement(line, e)),
        }
    }
    Ok((builder, summary, codes))
}

/// Reads one record (its length as a varint, then its bytes) into `rec`;
/// `false` at the end.
fn read_record(input: &mut impl Read, rec: &mut Vec<u8>) -> std::io::Result<bool> {
    let mut len = 0u64;
    let mut shift = 0;
    let mut byte = [0u8; 1];
    loop {
        match input.read_exact(&mut byte) {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof && shift == 0 => {
                return Ok(false)
            }
            Err(e) => return Err(e),
        }
        len |= u64::from(byte[0] & 0x7f) << shift;
        if byte[0] & 0x80 == 0 {
            break;
        }
        shift += 7;
        if shift > 63 {
            return Err(std::io::Error::new(
                std::io::ErrorKind::InvalidData,
                "a damaged record length",
            ));
        }
    }
    rec.resize(len as usize, 0);
    input.read_exact(rec)?;
    Ok(true)
}

/// Reads the fields of a record in order.
struct Cursor<'a> {
    b: &'a [u8],
    at: usize,
}

impl<'a> Cursor<'a> {
    fn take(&mut self, n: usize) -> &'a [u8] {
        let s = &self.b[self.at..self.at + n];
        self.at += n;
        s
    }
    fn u8(&mut self) -> u8 {
        self.take(1)[0]
    }
    fn i32(&mut self) -> i32 {
        i32::from_le_bytes(self.take(4).try_into().expect("4 bytes"))
    }
    fn varint(&mut self) -> u64 {
        let mut x = 0u64;
        let mut shift = 0;
        loop {
            let b = self.u8();
            x |= u64::from(b & 0x7f) << shift;
            if b & 0x80 == 0 {
                return x;
            }
            shift += 7;
        }
    }
    fn bytes(&mut self) -> &'a [u8] {
        let n = self.varint() as usize;
        self.take(n)
    }
    /// A condition set written by [`put_set`], into `set`.
    fn set(&mut self, set: &mut [u64]) {
        set.fill(0);
        let n = self.varint();
        let mut b = 0u64;
        for _ in 0..n {
            b += self.varint();
            set[(b >> 6) as usize] |= 1 << (b & 63);
        }
    }
}

/// One partition's run of the result file, read through a buffer.
struct Segment {
    pos: u64,
    end: u64,
    buf: Vec<u8>,
    /// The current line is `buf[line.0..line.1]`; unread bytes follow up to
    /// `filled`.
    line: (usize, usize),
    filled: usize,
    row: u64,
}

const SEGMENT_BUFFER: usize = 64 << 10;

impl Segment {
    fn new(start: u64, end: u64) -> Segment {
        Segment {
            pos: start,
            end,
            buf: Vec::new(),
            line: (0, 0),
            filled: 0,
            row: 0,
        }
    }

    /// Has at least `n` unread bytes after the current line in the buffer
    /// (or all that remain of the run, if fewer), moving them to its start
    /// and reading more from `file`.
    fn ensure(&mut self, file: &File, n: usize) -> std::io::Result<()> {
        let have = self.filled - self.line.1;
        let n = n.min(have + (self.end - self.pos) as usize);
        if have >= n {
            return Ok(());
        }
        self.buf.copy_within(self.line.1..self.filled, 0);
        self.line = (0, 0);
        self.filled = have;
        let want = n.max(SEGMENT_BUFFER);
        if self.buf.len() < want {
            self.buf.resize(want, 0);
        }
        while self.filled < n {
            let room = (self.buf.len() - self.filled).min((self.end - self.pos) as usize);
            let got = file.read_at(&mut self.buf[self.filled..self.filled + room], self.pos)?;
            if got == 0 {
                return Err(std::io::ErrorKind::UnexpectedEof.into());
            }
            self.filled += got;
            self.pos += got as u64;
        }
        Ok(())
    }

    /// A varint at the buffer's read position.
    fn varint(&mut self) -> std::io::Result<u64> {
        let mut x = 0u64;
        let mut shift = 0;
        loop {
            let at = self.line.1;
            if at >= self.filled || shift > 63 {
                return Err(std::io::Error::new(
                    std::io::ErrorKind::UnexpectedEof,
                    "a scored partition ends early",
                ));
            }
            let b = self.buf[at];
            self.line = (at + 1, at + 1);
            x |= u64::from(b & 0x7f) << shift;
            if b & 0x80 == 0 {
                return Ok(x);
            }
            shift += 7;
        }
    }

    /// Moves to the next line; returns its row number (`None` at the end).
    fn next(&mut self, file: &File) -> std::io::Result<Option<u64>> {
        if self.filled == self.line.1 && self.pos == self.end {
            return Ok(None);
        }
        self.ensure(file, 20)?;
        self.row += self.varint()?;
        let len = self.varint()? as usize;
        self.ensure(file, len)?;
        let s = self.line.1;
        if self.filled - s < len {
            return Err(std::io::Error::new(
                std::io::ErrorKind::UnexpectedEof,
                "a scored partition ends early",
            ));
        }
        self.line = (s, s + len);
        Ok(Some(self.row))
    }

    fn line(&self) -> &[u8] {
        &self.buf[self.line.0..self.line.1]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn condition_sets_come_back_from_their_numbers() {
        let sets: [&[u64]; 4] = [
            &[0, 0, 0],
            &[1, 0, 1 << 63],
            &[u64::MAX, 0x8000_0000_0000_0001, 7],
            &[0, 1 << 20, 0],
        ];
        for set in sets {
            let mut rec = Vec::new();
            put_set(&mut rec, set);
            let mut back = vec![5u64; 3];
            let mut c = Cursor { b: &rec, at: 0 };
            c.set(&mut back);
            assert_eq!(back, set);
            assert_eq!(c.at, rec.len());
        }
    }

    #[test]
    fn varints_round_trip_through_records() {
        let values = [0u64, 1, 127, 128, 300, 1 << 32, u64::MAX];
        let mut file = Vec::new();
        for &v in &values {
            let mut rec = Vec::new();
            put_varint(&mut rec, v);
            put_bytes(&mut file, &rec);
        }
        let mut input = &file[..];
        let mut rec = Vec::new();
        for &v in &values {
            assert!(read_record(&mut input, &mut rec).unwrap());
            assert_eq!(Cursor { b: &rec, at: 0 }.varint(), v);
        }
        assert!(!read_record(&mut input, &mut rec).unwrap());
    }
}
