//! Lookback beyond the memory limit: the history is partitioned by patient
//! into temporary files, each partition is resolved and formatted in
//! memory on its own, and the partitions' output lines are merged back in
//! input order.
//!
//! 1. While reading, once the history passes half of `--memory`, every
//!    episode read so far and then every later row is written as a compact
//!    binary record to partition `hash(patient id) % PARTITIONS` (row
//!    number, line, date, age, flags, id, episode value, kept values,
//!    condition sets, and the wide layout's raw row). A patient's records
//!    all go to one partition, in input order.
//! 2. Each partition is read back into a [`Builder`] (the same merging of
//!    rows into episodes as the in-memory run), resolved
//!    ([`History::resolve`]) and formatted; its output lines, with their
//!    row numbers, are appended to one result file, and the partition's
//!    file is removed. A partition's episodes are in increasing row order.
//! 3. The output walks the rows in order: a k-way merge by row number of
//!    the partitions' runs of the result file.
//!
//! Every file is registered with `io::atomic` (removed on SIGINT, SIGTERM,
//! SIGHUP) and removed when dropped, after success or failure.

use std::cmp::Reverse;
use std::collections::BinaryHeap;
use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Write};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use super::history::{
    check_unreadable_dates, Builder, DateRead, Formatter, History, RowIn, Windows,
};
use super::rows_store::RowStore;
use super::{Plan, ScoreConfig, Summary};
use crate::matcher::KeyHasher;
use crate::score::Engine;
use crate::Error;
use std::hash::Hasher;

/// Partitions of a spilled history: a history of N bytes needs about
/// N / PARTITIONS in memory per partition.
const PARTITIONS: usize = 128;
/// Write buffer per partition file.
const WRITE_BUFFER: usize = 64 << 10;
/// Raw rows of a partition are kept in blocks of about this size.
const RAW_BLOCK: usize = 1 << 20;

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
}

/// The partition files of a history being spilled.
pub(crate) struct Spill {
    dir: PathBuf,
    parts: Vec<Part>,
    words: usize,
    nkeep: usize,
    exclusions: bool,
    raw: bool,
    /// Bytes and records written.
    bytes: u64,
    records: u64,
    rec: Vec<u8>,
}

fn partition_of(pid: &[u8]) -> usize {
    let mut h = KeyHasher::default();
    h.write(pid);
    let x = h.finish().wrapping_mul(0xD6E8_FEB8_6659_FD93);
    ((x >> 32) as usize) % PARTITIONS
}

fn put_bytes(rec: &mut Vec<u8>, b: &[u8]) {
    rec.extend_from_slice(&(b.len() as u32).to_le_bytes());
    rec.extend_from_slice(b);
}

impl Spill {
    /// Creates the partition files in `dir`.
    pub fn new(
        dir: &Path,
        words: usize,
        nkeep: usize,
        exclusions: bool,
        raw: bool,
    ) -> Result<Spill, Error> {
        let mut parts = Vec::with_capacity(PARTITIONS);
        for _ in 0..PARTITIONS {
            let (path, file) = TempPath::create(dir, "part")?;
            parts.push(Part {
                out: BufWriter::with_capacity(WRITE_BUFFER, file),
                path,
            });
        }
        Ok(Spill {
            dir: dir.to_path_buf(),
            parts,
            words,
            nkeep,
            exclusions,
            raw,
            bytes: 0,
            records: 0,
            rec: Vec::new(),
        })
    }

    /// Writes a row (or an episode read before the spill) and its raw row
    /// to its patient's partition.
    pub fn write(&mut self, r: &RowIn<'_>, raw: &[u8]) -> Result<(), Error> {
        let rec = &mut self.rec;
        rec.clear();
        rec.extend_from_slice(&[0; 4]);
        rec.extend_from_slice(&r.row.to_le_bytes());
        rec.extend_from_slice(&r.line.to_le_bytes());
        let (kind, day) = match r.date {
            DateRead::Missing => (0u8, 0i32),
            DateRead::Day(d) => (1, d),
            DateRead::Unreadable => (2, 0),
        };
        rec.push(r.no_id as u8 | (r.disagrees as u8) << 1 | kind << 2);
        rec.extend_from_slice(&day.to_le_bytes());
        rec.push(r.age.map_or(u8::MAX, |a| a.min(254) as u8));
        put_bytes(rec, r.pid);
        put_bytes(rec, r.ekey);
        for &(s, t) in r.kept {
            put_bytes(rec, &r.kept_bytes[s..t]);
        }
        for &x in r.all {
            rec.extend_from_slice(&x.to_le_bytes());
        }
        if self.exclusions {
            for &x in r.cur {
                rec.extend_from_slice(&x.to_le_bytes());
            }
        }
        if self.raw {
            put_bytes(rec, raw);
        }
        let len = (rec.len() - 4) as u32;
        rec[..4].copy_from_slice(&len.to_le_bytes());
        let part = &mut self.parts[partition_of(r.pid)];
        part.out
            .write_all(rec)
            .map_err(|e| part.path.error("write", e))?;
        self.bytes += rec.len() as u64;
        self.records += 1;
        Ok(())
    }

    /// Resolves each partition (read with `plan`), then writes `head` (the
    /// header line) and every output line in
    /// input order to `output`. Adds the episodes' counts (dates,
    /// disagreements, rows written, what was spilled) to `summary`.
    pub fn finish(
        self,
        engine: &Engine,
        cfg: &ScoreConfig,
        windows: &Windows,
        (plan, head): (Plan, &[u8]),
        summary: &mut Summary,
        output: &mut dyn Write,
    ) -> Result<(), Error> {
        let Spill {
            dir,
            parts,
            words,
            nkeep,
            exclusions,
            raw,
            bytes,
            records,
            ..
        } = self;
        let (result_path, result) = TempPath::create(&dir, "scored")?;
        let mut results = BufWriter::with_capacity(1 << 20, &result);
        let mut segments: Vec<(u64, u64)> = Vec::with_capacity(parts.len());
        let mut at = 0u64;
        let mut episodes = 0u64;
        // A --strict disagreement: the first in input order of any partition.
        let mut first_error: Option<(u64, Error)> = None;
        let mut plan = Some(plan);
        let threads = super::parallel::threads(cfg);
        for part in parts {
            let Part { out, path } = part;
            let file = out
                .into_inner()
                .map_err(|e| path.error("write", e.into_error()))?;
            drop(file);
            let file = File::open(&path.0).map_err(|e| path.error("read", e))?;
            let mut input = BufReader::with_capacity(1 << 18, file);
            let p = plan.take().expect("plan returned by each partition");
            let mut builder = Builder::new(cfg, &p, words);
            let mut store = RowStore::new(usize::MAX, &dir);
            let (mut raw_ends, mut raw_first, mut block) = (Vec::new(), Vec::new(), Vec::new());
            let mut rec = Vec::new();
            let mut kept: Vec<(usize, usize)> = Vec::with_capacity(nkeep);
            let (mut all, mut cur) = (vec![0u64; words], vec![0u64; words]);
            let mut failed = false;
            while read_record(&mut input, &mut rec).map_err(|e| path.error("read", e))? {
                let mut c = Cursor { b: &rec, at: 0 };
                let row = c.u64();
                let line = c.u64();
                let flags = c.u8();
                let day = c.i32();
                let age = c.u8();
                let pid = c.bytes();
                let ekey = c.bytes();
                kept.clear();
                for _ in 0..nkeep {
                    let n = c.u32() as usize;
                    kept.push((c.at, c.at + n));
                    c.at += n;
                }
                for x in all.iter_mut() {
                    *x = c.u64();
                }
                if exclusions {
                    for x in cur.iter_mut() {
                        *x = c.u64();
                    }
                }
                let raw_row = if raw { c.bytes() } else { &[][..] };
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
                    ekey,
                    kept_bytes: &rec,
                    kept: &kept,
                    all: &all,
                    cur: if exclusions { &cur } else { &[] },
                };
                let before = builder.episodes();
                if let Err(e) = builder.add_row(&p, &r, summary) {
                    if first_error.as_ref().is_none_or(|(l, _)| line < *l) {
                        first_error = Some((line, e));
                    }
                    failed = true;
                    break;
                }
                if raw && builder.episodes() > before {
                    if block.len() + raw_row.len() > RAW_BLOCK && !block.is_empty() {
                        store.push(std::mem::take(&mut block))?;
                    }
                    if block.is_empty() {
                        raw_first.push(before as u32);
                    }
                    block.extend_from_slice(raw_row);
                    raw_ends.push(block.len() as u32);
                }
            }
            drop(input);
            drop(path);
            if !block.is_empty() {
                store.push(block)?;
            }
            if failed || first_error.is_some() {
                // Only the first disagreement matters now; keep looking.
                plan = Some(p);
                continue;
            }
            let mut owned = builder.finish(
                p,
                Vec::new(),
                (raw_ends, raw_first, store),
                Vec::new(),
                summary,
            );
            owned.resolve(windows);
            let n = owned.episodes.len();
            episodes += n as u64;
            // Formatted on every core, in chunks, written in order.
            let per = n.div_ceil(threads.max(1)).max(1);
            let hist = &owned;
            let chunks: Result<Vec<Vec<u8>>, Error> = std::thread::scope(|s| {
                let handles: Vec<_> = (0..n)
                    .step_by(per)
                    .map(|from| {
                        s.spawn(move || -> Result<Vec<u8>, Error> {
                            let to = (from + per).min(n);
                            let rows = hist.load_rows(cfg, from..to)?;
                            let mut f = Formatter::new(words);
                            let mut out = Vec::with_capacity((to - from) * 160);
                            let mut line = Vec::new();
                            for e in from..to {
                                line.clear();
                                f.episode(engine, cfg, hist, e, &rows, &mut line);
                                out.extend_from_slice(&hist.row(e).to_le_bytes());
                                out.extend_from_slice(&(line.len() as u32).to_le_bytes());
                                out.extend_from_slice(&line);
                            }
                            Ok(out)
                        })
                    })
                    .collect();
                handles
                    .into_iter()
                    .map(|h| {
                        h.join().unwrap_or_else(|_| {
                            Err(Error::data(None, "internal error: an output thread failed"))
                        })
                    })
                    .collect()
            });
            let start = at;
            for c in chunks? {
                results
                    .write_all(&c)
                    .map_err(|e| result_path.error("write", e))?;
                at += c.len() as u64;
            }
            segments.push((start, at));
            let History { plan: p, .. } = owned;
            plan = Some(p);
        }
        if let Some((_, e)) = first_error {
            return Err(e);
        }
        results.flush().map_err(|e| result_path.error("write", e))?;
        drop(results);
        if plan.as_ref().is_some_and(|p| p.date.is_some()) {
            check_unreadable_dates(cfg, summary, episodes)?;
        }
        summary.spilled_records += records;
        summary.spilled_bytes += bytes + at;
        summary.rows_written += episodes;
        summary.units += episodes;

        // The merge: the next line of every partition, smallest row first.
        let write_err = |e| Error::io("cannot write output", e);
        output.write_all(head).map_err(write_err)?;
        let mut readers: Vec<Segment> = segments.iter().map(|&(s, t)| Segment::new(s, t)).collect();
        let mut heap = BinaryHeap::new();
        for (k, r) in readers.iter_mut().enumerate() {
            if let Some(row) = r.next(&result).map_err(|e| result_path.error("read", e))? {
                heap.push(Reverse((row, k)));
            }
        }
        let mut out: Vec<u8> = Vec::with_capacity(1 << 20);
        while let Some(Reverse((_, k))) = heap.pop() {
            let r = &mut readers[k];
            out.extend_from_slice(r.line());
            if out.len() >= 1 << 20 {
                output.write_all(&out).map_err(write_err)?;
                out.clear();
            }
            if let Some(row) = r.next(&result).map_err(|e| result_path.error("read", e))? {
                heap.push(Reverse((row, k)));
            }
        }
        output.write_all(&out).map_err(write_err)?;
        drop(result);
        drop(result_path);
        Ok(())
    }
}

/// Reads one length-prefixed record into `rec`; `false` at the end.
fn read_record(input: &mut impl Read, rec: &mut Vec<u8>) -> std::io::Result<bool> {
    let mut len = [0u8; 4];
    match input.read_exact(&mut len) {
        Ok(()) => {}
        Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => return Ok(false),
        Err(e) => return Err(e),
    }
    rec.resize(u32::from_le_bytes(len) as usize, 0);
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
    fn u32(&mut self) -> u32 {
        u32::from_le_bytes(self.take(4).try_into().expect("4 bytes"))
    }
    fn i32(&mut self) -> i32 {
        i32::from_le_bytes(self.take(4).try_into().expect("4 bytes"))
    }
    fn u64(&mut self) -> u64 {
        u64::from_le_bytes(self.take(8).try_into().expect("8 bytes"))
    }
    fn bytes(&mut self) -> &'a [u8] {
        let n = self.u32() as usize;
        self.take(n)
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
        }
    }

    /// Has at least `n` unread bytes after `from` in the buffer (moving
    /// them to its start), reading more from `file`.
    fn ensure(&mut self, file: &File, n: usize) -> std::io::Result<()> {
        let have = self.filled - self.line.1;
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
            if room == 0 {
                return Err(std::io::Error::new(
                    std::io::ErrorKind::UnexpectedEof,
                    "a scored partition ends early",
                ));
            }
            let got = file.read_at(&mut self.buf[self.filled..self.filled + room], self.pos)?;
            if got == 0 {
                return Err(std::io::ErrorKind::UnexpectedEof.into());
            }
            self.filled += got;
            self.pos += got as u64;
        }
        Ok(())
    }

    /// Moves to the next line; returns its row number (`None` at the end).
    fn next(&mut self, file: &File) -> std::io::Result<Option<u64>> {
        if self.filled == self.line.1 && self.pos == self.end {
            return Ok(None);
        }
        self.ensure(file, 12)?;
        let at = self.line.1;
        let row = u64::from_le_bytes(self.buf[at..at + 8].try_into().expect("8 bytes"));
        let len = u32::from_le_bytes(self.buf[at + 8..at + 12].try_into().expect("4 bytes"));
        self.line = (at + 12, at + 12);
        self.ensure(file, len as usize)?;
        let s = self.line.1;
        self.line = (s, s + len as usize);
        Ok(Some(row))
    }

    fn line(&self) -> &[u8] {
        &self.buf[self.line.0..self.line.1]
    }
}
