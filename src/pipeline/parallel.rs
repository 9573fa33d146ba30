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
    consume: impl FnMut(&H, T, Progress) -> Result<(), Error>,
) -> Result<H, Error>
where
    H: Sync,
    T: Send,
{
    let mut reader = BlockReader::new(input, cfg.delimiter, cfg.block_size);
    let Some(first) = reader.next_block().map_err(read_error)? else {
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
    let feed = BlockFeed {
        first: Some((first, header_end)),
        reader,
    };
    run_ordered(
        cfg,
        header,
        feed,
        || RecordScanner::new(cfg.delimiter),
        |h, (block, start), scanner| work(h, &block, start, scanner),
        consume,
    )
}

/// [`run_blocks`] over typed rows: reads the header of `source` with
/// `on_header`, then, while one thread takes the source's batches, runs
/// `work` over every batch (with the 1-based number of its first row) on
/// worker threads and hands each result to `consume` in row order.
pub(crate) fn run_batches<'a, H, T>(
    cfg: &ScoreConfig,
    source: Box<dyn RowSource<'a> + 'a>,
    on_header: impl FnOnce(Header) -> Result<H, Error>,
    work: impl Fn(&H, &dyn Batch, u64) -> T + Sync,
    consume: impl FnMut(&H, T, Progress) -> Result<(), Error>,
) -> Result<H, Error>
where
    H: Sync,
    T: Send,
{
    let header = on_header(source.header())?;
    let feed = BatchFeed {
        source,
        index: 0,
        first: 1,
        len: 0,
    };
    run_ordered(
        cfg,
        header,
        feed,
        || (),
        |h, (first, batch), ()| work(h, batch.as_ref(), first),
        consume,
    )
}

fn read_error(e: std::io::Error) -> Error {
    Error::io("cannot read input", e)
}

/// How far the reader thread of [`run_ordered`] has got, for [`Progress`].
#[derive(Default)]
struct ReadSoFar {
    bytes: AtomicU64,
    rows: AtomicU64,
}

/// Where the reader thread of [`run_ordered`] takes its work items from.
trait Feed: Send {
    type Item: Send;
    /// The next item with its place in input order (0, 1, 2, ... with no
    /// gaps), or `None` at the end.
    fn next(&mut self, read: &ReadSoFar) -> Result<Option<(u64, Self::Item)>, Error>;
    /// Called once the item last returned is queued for the workers.
    fn queued(&mut self, _read: &ReadSoFar) {}
}

/// The blocks of a delimited text: the first one (from the byte after the
/// header), then every later one from the byte 0.
struct BlockFeed<R: Read> {
    first: Option<(Block, usize)>,
    reader: BlockReader<R>,
}

impl<R: Read + Send> Feed for BlockFeed<R> {
    type Item = (Block, usize);

    fn next(&mut self, read: &ReadSoFar) -> Result<Option<(u64, (Block, usize))>, Error> {
        let job = match self.first.take() {
            Some(first) => Some(first),
            None => self
                .reader
                .next_block()
                .map_err(read_error)?
                .map(|b| (b, 0)),
        };
        if job.is_some() {
            read.bytes
                .store(self.reader.bytes_read(), Ordering::Relaxed);
        }
        Ok(job.map(|(b, start)| (b.index, (b, start))))
    }
}

/// The batches of a typed row source, each with the 1-based number of its
/// first row.
struct BatchFeed<'a> {
    source: Box<dyn RowSource<'a> + 'a>,
    index: u64,
    first: u64,
    /// Rows of the batch last returned.
    len: u64,
}

impl<'a> Feed for BatchFeed<'a> {
    type Item = (u64, Box<dyn Batch + 'a>);

    fn next(&mut self, _read: &ReadSoFar) -> Result<Option<(u64, Self::Item)>, Error> {
        Ok(self.source.next_batch()?.map(|b| {
            self.len = b.len() as u64;
            (self.index, (self.first, b))
        }))
    }

    fn queued(&mut self, read: &ReadSoFar) {
        self.index += 1;
        self.first += self.len;
        read.rows.store(self.first - 1, Ordering::Relaxed);
    }
}

/// The machinery of [`run_blocks`] and [`run_batches`]: one thread takes
/// the items of `feed`, worker threads (each with its own `scratch`) run
/// `work` over them, and the calling thread hands each result to `consume`
/// in input order. The first error (of `consume`, else of the feed) stops
/// the run and is returned; otherwise the header state.
fn run_ordered<F, H, S, T>(
    cfg: &ScoreConfig,
    header: H,
    mut feed: F,
    scratch: impl Fn() -> S + Sync,
    work: impl Fn(&H, F::Item, &mut S) -> T + Sync,
    mut consume: impl FnMut(&H, T, Progress) -> Result<(), Error>,
) -> Result<H, Error>
where
    F: Feed,
    H: Sync,
    T: Send,
{
    let n = threads(cfg);
    let read = ReadSoFar::default();
    let (job_tx, job_rx) = sync_channel::<(u64, F::Item)>(n * 2);
    let job_rx = Mutex::new(job_rx);
    let (done_tx, done_rx) = sync_channel::<(u64, T)>(n * 2);
    let stop = AtomicBool::new(false);
    let mut failure: Option<Error> = None;

    std::thread::scope(|s| {
        let reader_failed = s.spawn({
            let (read, stop) = (&read, &stop);
            move || -> Option<Error> {
                loop {
                    if stop.load(Ordering::Relaxed) {
                        return None;
                    }
                    match feed.next(read) {
                        Ok(Some(job)) => {
                            if job_tx.send(job).is_err() {
                                return None;
                            }
                            feed.queued(read);
                        }
                        Ok(None) => return None,
                        Err(e) => return Some(e),
                    }
                }
            }
        });
        for _ in 0..n {
            let done_tx = done_tx.clone();
            let (job_rx, header, scratch, work) = (&job_rx, &header, &scratch, &work);
            s.spawn(move || {
                let mut scratch = scratch();
                loop {
                    let job = job_rx.lock().map(|r| r.recv());
                    let Ok(Ok((index, item))) = job else {
                        return;
                    };
                    let r = work(header, item, &mut scratch);
                    if done_tx.send((index, r)).is_err() {
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
                    bytes_read: read.bytes.load(Ordering::Relaxed),
                    rows: read.rows.load(Ordering::Relaxed),
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
