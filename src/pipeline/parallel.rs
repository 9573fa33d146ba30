//! Block-parallel reading shared by every pipeline: a reader thread cuts the
//! input into blocks of whole records, worker threads process blocks, and
//! the calling thread consumes the results in input order.

use std::collections::BTreeMap;
use std::io::Read;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::mpsc::sync_channel;
use std::sync::Mutex;

use super::{Header, Progress, ScoreConfig};
use crate::io::{Block, BlockReader, RecordRef, RecordScanner};
use crate::rows::{Batch, RowSource};
use crate::Error;

/// Most worker threads a run starts, whatever is asked for: more only
/// cost memory (and enough of them fail to spawn).
pub(crate) const MAX_THREADS: usize = 256;

/// Worker threads: the configured number (at most [`MAX_THREADS`]), or one
/// per core.
pub(crate) fn threads(cfg: &ScoreConfig) -> usize {
    if cfg.threads > 0 {
        return cfg.threads.min(MAX_THREADS);
    }
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

const EMPTY: &str = "the input is empty: expected a header line naming the columns";

/// Reads the header with `on_header`, then runs `work` over every block (from
/// the byte after the header in the first block) on worker threads and hands
/// each result to `consume` in input order. `consume` returning an error
/// stops the run. Returns the header state.
pub(crate) fn run_blocks<H, T>(
    cfg: &ScoreConfig,
    input: impl Read + Send,
    on_header: impl FnOnce(&Block, &RecordRef<'_>) -> Result<H, Error>,
    work: impl Fn(&H, &Block, usize, &mut RecordScanner) -> T + Sync,
    mut consume: impl FnMut(&H, T, Progress) -> Result<(), Error>,
) -> Result<H, Error>
where
    H: Sync,
    T: Send,
{
    let read_err = |e| Error::io("cannot read input", e);
    let mut reader = BlockReader::new(input, cfg.delimiter, cfg.block_size);
    let Some(first) = reader.next_block().map_err(read_err)? else {
        return Err(Error::data(None, EMPTY));
    };
    // The header is the first record of the first block.
    let mut scanner = RecordScanner::new(cfg.delimiter);
    let mut on_header = Some(on_header);
    let mut head: Option<(H, usize)> = None;
    scanner
        .scan(
            &first.data,
            first.last,
            |rec| -> Result<(), Option<Error>> {
                if let Some(f) = on_header.take() {
                    head = Some((f(&first, &rec).map_err(Some)?, rec.offset + rec.raw.len()));
                }
                Err(None)
            },
        )
        .or_else(|e| e.map_or(Ok(()), Err))?;
    let Some((header, header_end)) = head else {
        return Err(Error::data(None, EMPTY));
    };

    let n = threads(cfg);
    let bytes_read = AtomicU64::new(reader.bytes_read());
    let (job_tx, job_rx) = sync_channel::<(Block, usize)>(n * 2);
    let job_rx = Mutex::new(job_rx);
    let (done_tx, done_rx) = sync_channel::<(u64, T)>(n * 2);
    let stop = AtomicBool::new(false);
    let mut failure: Option<Error> = None;

    std::thread::scope(|s| {
        let reader_failed = s.spawn({
            let job_tx = job_tx.clone();
            let (bytes_read, stop) = (&bytes_read, &stop);
            move || -> Option<Error> {
                if job_tx.send((first, header_end)).is_err() {
                    return None;
                }
                loop {
                    if stop.load(Ordering::Relaxed) {
                        return None;
                    }
                    match reader.next_block() {
                        Ok(Some(b)) => {
                            bytes_read.store(reader.bytes_read(), Ordering::Relaxed);
                            if job_tx.send((b, 0)).is_err() {
                                return None;
                            }
                        }
                        Ok(None) => return None,
                        Err(e) => return Some(read_err(e)),
                    }
                }
            }
        });
        drop(job_tx);
        for _ in 0..n {
            let done_tx = done_tx.clone();
            let (job_rx, header, work) = (&job_rx, &header, &work);
            s.spawn(move || {
                let mut scanner = RecordScanner::new(cfg.delimiter);
                loop {
                    let job = job_rx.lock().map(|r| r.recv());
                    let Ok(Ok((block, start))) = job else {
                        return;
                    };
                    let r = work(header, &block, start, &mut scanner);
                    if done_tx.send((block.index, r)).is_err() {
                        return;
                    }
                }
            });
        }
        drop(done_tx);
        // In input order.
        let mut pending: BTreeMap<u64, T> = BTreeMap::new();
        let mut next = 0u64;
        'recv: for (index, r) in done_rx.iter() {
            pending.insert(index, r);
            while let Some(r) = pending.remove(&next) {
                next += 1;
                let p = Progress {
                    bytes_read: bytes_read.load(Ordering::Relaxed),
                    rows: 0,
                };
                if let Err(e) = consume(&header, r, p) {
                    failure = Some(e);
                    break 'recv;
                }
            }
        }
        // On failure, stop the reader and let blocked sends through.
        stop.store(true, Ordering::Relaxed);
        drop(done_rx);
        while let Ok(Ok(_)) = job_rx.lock().map(|r| r.recv()) {}
        if let Ok(Some(e)) = reader_failed.join() {
            if failure.is_none() {
                failure = Some(e);
            }
        }
    });
    match failure {
        Some(e) => Err(e),
        None => Ok(header),
    }
}

/// [`run_blocks`] over typed rows: reads the header of `source` with
/// `on_header`, then, while one thread takes the source's batches, runs
/// `work` over every batch (with the 1-based number of its first row) on
/// worker threads and hands each result to `consume` in row order.
pub(crate) fn run_batches<'a, H, T>(
    cfg: &ScoreConfig,
    mut source: Box<dyn RowSource<'a> + 'a>,
    on_header: impl FnOnce(Header) -> Result<H, Error>,
    work: impl Fn(&H, &dyn Batch, u64) -> T + Sync,
    mut consume: impl FnMut(&H, T, Progress) -> Result<(), Error>,
) -> Result<H, Error>
where
    H: Sync,
    T: Send,
{
    let header = on_header(source.header())?;
    let n = threads(cfg);
    type Job<'b> = (u64, u64, Box<dyn Batch + 'b>);
    let (job_tx, job_rx) = sync_channel::<Job<'a>>(n * 2);
    let job_rx = Mutex::new(job_rx);
    let (done_tx, done_rx) = sync_channel::<(u64, T)>(n * 2);
    let stop = AtomicBool::new(false);
    let rows_read = AtomicU64::new(0);
    let mut failure: Option<Error> = None;
    std::thread::scope(|s| {
        let reader_failed = s.spawn({
            let (stop, rows_read) = (&stop, &rows_read);
            move || -> Option<Error> {
                let (mut index, mut first) = (0u64, 1u64);
                loop {
                    if stop.load(Ordering::Relaxed) {
                        return None;
                    }
                    match source.next_batch() {
                        Ok(Some(b)) => {
                            let len = b.len() as u64;
                            if job_tx.send((index, first, b)).is_err() {
                                return None;
                            }
                            index += 1;
                            first += len;
                            rows_read.store(first - 1, Ordering::Relaxed);
                        }
                        Ok(None) => return None,
                        Err(e) => return Some(e),
                    }
                }
            }
        });
        for _ in 0..n {
            let done_tx = done_tx.clone();
            let (job_rx, header, work) = (&job_rx, &header, &work);
            s.spawn(move || loop {
                let job = job_rx.lock().map(|r| r.recv());
                let Ok(Ok((index, first, batch))) = job else {
                    return;
                };
                let r = work(header, batch.as_ref(), first);
                if done_tx.send((index, r)).is_err() {
                    return;
                }
            });
        }
        drop(done_tx);
        let mut pending: BTreeMap<u64, T> = BTreeMap::new();
        let mut next = 0u64;
        'recv: for (index, r) in done_rx.iter() {
            pending.insert(index, r);
            while let Some(r) = pending.remove(&next) {
                next += 1;
                let p = Progress {
                    bytes_read: 0,
                    rows: rows_read.load(Ordering::Relaxed),
                };
                if let Err(e) = consume(&header, r, p) {
                    failure = Some(e);
                    break 'recv;
                }
            }
        }
        stop.store(true, Ordering::Relaxed);
        drop(done_rx);
        while let Ok(Ok(_)) = job_rx.lock().map(|r| r.recv()) {}
        if let Ok(Some(e)) = reader_failed.join() {
            if failure.is_none() {
                failure = Some(e);
            }
        }
    });
    match failure {
        Some(e) => Err(e),
        None => Ok(header),
    }
}
