//! The wide layout's raw rows, held between reading the history and writing
//! the output: in memory up to a budget, then in a temporary file that is
//! read back in input order, a round of rows at a time. The file is removed
//! when the store is dropped (after a successful run or a failed one), and
//! on SIGINT, SIGTERM or SIGHUP with the outputs' temporary files
//! (`io::atomic`).

use std::fs::File;
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::Error;

/// Where one block of raw rows is.
enum Place {
    Memory(Vec<u8>),
    /// Byte offset and length in the temporary file.
    Disk(u64, usize),
}

/// A temporary file, removed on drop.
struct TempFile {
    file: File,
    path: PathBuf,
    len: u64,
}

impl Drop for TempFile {
    fn drop(&mut self) {
        crate::io::atomic::remove_working_file(&self.path);
    }
}

/// The raw rows of the wide layout.
pub(crate) struct RowStore {
    blocks: Vec<Place>,
    in_memory: usize,
    budget: usize,
    dir: PathBuf,
    file: Option<TempFile>,
}

static SERIAL: AtomicU64 = AtomicU64::new(0);

impl RowStore {
    /// A store keeping up to `budget` bytes in memory and the rest in a
    /// temporary file in `dir`.
    pub fn new(budget: usize, dir: &Path) -> RowStore {
        RowStore {
            blocks: Vec::new(),
            in_memory: 0,
            budget,
            dir: dir.to_path_buf(),
            file: None,
        }
    }

    /// Whether some rows went to the temporary file.
    pub fn spilled(&self) -> bool {
        self.file.is_some()
    }

    /// The temporary file's path, while there is one.
    #[cfg(test)]
    pub fn temp_path(&self) -> Option<&Path> {
        self.file.as_ref().map(|f| f.path.as_path())
    }

    /// Adds a block of rows; returns its index.
    pub fn push(&mut self, raw: Vec<u8>) -> Result<u32, Error> {
        let i = self.blocks.len() as u32;
        if self.in_memory + raw.len() <= self.budget {
            self.in_memory += raw.len();
            self.blocks.push(Place::Memory(raw));
            return Ok(i);
        }
        if self.file.is_none() {
            let path = self.dir.join(format!(
                "morbus-rows-{}-{}.tmp",
                std::process::id(),
                SERIAL.fetch_add(1, Ordering::Relaxed)
            ));
            let file = crate::io::atomic::create_working_file(&path).map_err(|e| {
                Error::io(
                    format!("cannot create a temporary file in {}", self.dir.display()),
                    e,
                )
            })?;
            self.file = Some(TempFile { file, path, len: 0 });
        }
        let t = self.file.as_mut().expect("created above");
        t.file
            .write_all(&raw)
            .map_err(|e| Error::io(format!("cannot write {}", t.path.display()), e))?;
        self.blocks.push(Place::Disk(t.len, raw.len()));
        t.len += raw.len() as u64;
        Ok(i)
    }

    /// No blocks (the long layout keeps no rows).
    pub fn none(&self) -> Loaded<'_> {
        Loaded {
            store: self,
            buf: Vec::new(),
            offsets: Vec::new(),
        }
    }

    /// Blocks `first..=last` readable as slices: those in memory borrowed,
    /// those on disk read back (in one read: they are consecutive).
    pub fn load(&self, first: u32, last: u32) -> Result<Loaded<'_>, Error> {
        let range = first as usize..last as usize + 1;
        let disk: Vec<(usize, u64, usize)> = self.blocks[range.clone()]
            .iter()
            .enumerate()
            .filter_map(|(k, p)| match p {
                Place::Disk(o, n) => Some((first as usize + k, *o, *n)),
                Place::Memory(_) => None,
            })
            .collect();
        let mut buf = Vec::new();
        let mut offsets = Vec::new();
        if let (Some(&(_, start, _)), Some(t)) = (disk.first(), self.file.as_ref()) {
            let total: usize = disk.iter().map(|d| d.2).sum();
            buf.resize(total, 0);
            let read_err = |e| Error::io(format!("cannot read {}", t.path.display()), e);
            let mut f = &t.file;
            f.seek(SeekFrom::Start(start)).map_err(read_err)?;
            f.read_exact(&mut buf).map_err(read_err)?;
            let mut at = 0;
            for &(b, _, n) in &disk {
                offsets.push((b, at, n));
                at += n;
            }
        }
        Ok(Loaded {
            store: self,
            buf,
            offsets,
        })
    }
}

/// Blocks of a [`RowStore`] ready to be sliced.
pub(crate) struct Loaded<'a> {
    store: &'a RowStore,
    buf: Vec<u8>,
    /// (block, start in `buf`, length) of the blocks read from disk.
    offsets: Vec<(usize, usize, usize)>,
}

impl Loaded<'_> {
    /// Bytes `start..end` of block `b` (one of the loaded blocks).
    pub fn slice(&self, b: u32, start: u32, end: u32) -> &[u8] {
        let (s, e) = (start as usize, end as usize);
        match &self.store.blocks[b as usize] {
            Place::Memory(v) => &v[s..e],
            Place::Disk(..) => {
                let &(_, at, _) = self
                    .offsets
                    .iter()
                    .find(|o| o.0 == b as usize)
                    .expect("block loaded");
                &self.buf[at + s..at + e]
            }
        }
    }
}

/// Reads a memory size: bytes, or a number with `K`, `M`, `G` (`KiB`,
/// `MiB`, `GiB`: powers of 1024; `KB`, `MB`, `GB`: of 1000).
pub fn parse_memory(text: &str) -> Option<u64> {
    let t = text.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let num: f64 = num.parse().ok()?;
    let factor: f64 = match unit.trim().to_ascii_lowercase().as_str() {
        "" | "b" => 1.0,
        "k" | "kib" => 1024.0,
        "m" | "mib" => 1024.0 * 1024.0,
        "g" | "gib" => 1024.0 * 1024.0 * 1024.0,
        "kb" => 1e3,
        "mb" => 1e6,
        "gb" => 1e9,
        _ => return None,
    };
    let v = num * factor;
    (0.0..1e18).contains(&v).then_some(v as u64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn memory_sizes() {
        assert_eq!(parse_memory("1GiB"), Some(1 << 30));
        assert_eq!(parse_memory("512M"), Some(512 << 20));
        assert_eq!(parse_memory("2 MB"), Some(2_000_000));
        assert_eq!(parse_memory("4096"), Some(4096));
        assert_eq!(parse_memory("0.5g"), Some(1 << 29));
        assert_eq!(parse_memory("lots"), None);
        assert_eq!(parse_memory("1TB"), None);
    }

    #[test]
    fn spilled_blocks_read_back_and_the_file_goes_away() {
        let dir = std::env::temp_dir();
        let mut s = RowStore::new(10, &dir);
        let blocks: Vec<Vec<u8>> = (0..6u8).map(|i| vec![b'a' + i; 4 + i as usize]).collect();
        for b in &blocks {
            s.push(b.clone()).unwrap();
        }
        assert!(s.spilled());
        let path = s.temp_path().unwrap().to_path_buf();
        assert!(path.exists());
        for first in 0..6u32 {
            for last in first..6u32 {
                let l = s.load(first, last).unwrap();
                for b in first..=last {
                    let want = &blocks[b as usize];
                    assert_eq!(l.slice(b, 1, want.len() as u32), &want[1..]);
                }
            }
        }
        drop(s);
        assert!(!path.exists());
    }
}
