//! Nothing lost at the edges: outputs written atomically, an input never an
//! output, standard streams checked.
//!
//! - [`create_output`] opens a file output as a temporary file in the same
//!   directory; [`OutputGuard::commit`] renames it into place when the run
//!   succeeded. Dropped without a commit (a failed run), the guard removes
//!   the temporary file; an existing file of the output's name is never
//!   touched before the commit. A FIFO or a device (`/dev/null`) is written
//!   directly: it is a stream, not a file that could be replaced.
//! - [`remove_temporaries_on_signals`] (installed by the command line)
//!   removes every pending temporary file on SIGINT, SIGTERM and SIGHUP,
//!   then ends the process as the signal would have.
//! - [`check_distinct`] refuses (exit 2) an output that is the same file as
//!   an input or as another output: same device and inode (through symbolic
//!   links), or, for an output that does not exist yet, the same canonical
//!   directory and file name.
//! - [`stdout_closed_by_reader`] says whether a write to standard output
//!   failed because its reader went away (a broken pipe, as `| head` does):
//!   the command line then ends quietly with status 0.
//!   [`check_stdout_open`] refuses a standard output that was closed before
//!   the run (`>&-`).

use std::fs::{File, OpenOptions};
use std::io::{self, Write};
#[cfg(unix)]
use std::os::unix::fs::MetadataExt;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Mutex, MutexGuard};

use crate::Error;

/// Temporary files of the outputs being written, and working files of a run
/// (the spilled rows of a long lookback), removed on a signal.
static PENDING: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());
static SERIAL: AtomicU64 = AtomicU64::new(0);
static STDOUT_BROKEN: AtomicBool = AtomicBool::new(false);

fn pending() -> MutexGuard<'static, Vec<PathBuf>> {
    PENDING.lock().unwrap_or_else(|e| e.into_inner())
}

/// A file output being written to a temporary file: [`commit`] renames it
/// into place; dropping the guard uncommitted removes it.
///
/// [`commit`]: OutputGuard::commit
#[derive(Debug)]
pub struct OutputGuard {
    temp: PathBuf,
    /// The file the output replaces (a symbolic link resolved).
    target: PathBuf,
    /// The name the user gave, for messages.
    shown: String,
    /// A handle on the temporary file, to sync it before the rename.
    file: File,
    done: bool,
}

impl OutputGuard {
    /// Syncs the temporary file and renames it over the target. Call after
    /// every byte was written and flushed.
    pub fn commit(mut self) -> Result<(), Error> {
        let fail = |e| Error::io(format!("cannot write {}", self.shown), e);
        self.file.sync_all().map_err(fail)?;
        // Under the lock: a signal either sees the temporary file pending
        // (and removes it, the rename not done) or sees it renamed.
        let mut list = pending();
        std::fs::rename(&self.temp, &self.target).map_err(fail)?;
        list.retain(|p| p != &self.temp);
        self.done = true;
        Ok(())
    }

    /// The temporary file being written.
    pub fn temp_path(&self) -> &Path {
        &self.temp
    }
}

impl Drop for OutputGuard {
    fn drop(&mut self) {
        if !self.done {
            let mut list = pending();
            let _ = std::fs::remove_file(&self.temp);
            list.retain(|p| p != &self.temp);
        }
    }
}

/// Creates a new working file of the run (not an output; read and write)
/// and registers it, under the lock, so that a signal removes it like an
/// output's temporary file: the signal either finds it registered or comes
/// before it exists. [`remove_working_file`] removes it and forgets it.
pub(crate) fn create_working_file(path: &Path) -> io::Result<File> {
    let mut list = pending();
    let file = OpenOptions::new()
        .read(true)
        .write(true)
        .create_new(true)
        .open(path)?;
    list.push(path.to_path_buf());
    Ok(file)
}

/// Removes a working file registered with [`create_working_file`].
pub(crate) fn remove_working_file(path: &Path) {
    let mut list = pending();
    let _ = std::fs::remove_file(path);
    list.retain(|p| p != path);
}

/// Opens `path` for writing: a temporary file beside it with its guard, or
/// for a FIFO or device the path itself and no guard. A directory, or a
/// symbolic link to nothing, is refused (exit 2).
pub fn create_output(path: &Path) -> Result<(File, Option<OutputGuard>), Error> {
    let shown = path.display().to_string();
    let target = match std::fs::symlink_metadata(path) {
        Err(e) if e.kind() == io::ErrorKind::NotFound => path.to_path_buf(),
        Err(e) => return Err(Error::io(format!("cannot create {shown}"), e)),
        Ok(m) if m.file_type().is_symlink() => match std::fs::canonicalize(path) {
            Ok(real) => real,
            Err(_) => {
                let to = std::fs::read_link(path)
                    .map(|t| t.display().to_string())
                    .unwrap_or_default();
                return Err(Error::Usage(format!(
                    "{shown} is a symbolic link to '{to}', which does not exist; name the \
                     file itself or remove the link"
                )));
            }
        },
        Ok(_) => path.to_path_buf(),
    };
    let existing = std::fs::metadata(&target).ok();
    if let Some(m) = &existing {
        if m.is_dir() {
            return Err(Error::Usage(format!("{shown} is a directory, not a file")));
        }
        if !m.is_file() {
            // A FIFO, a terminal, /dev/null: a stream, written directly.
            let f = OpenOptions::new()
                .write(true)
                .open(&target)
                .map_err(|e| Error::io(format!("cannot create {shown}"), e))?;
            return Ok((f, None));
        }
    }
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let dir = match target.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut list = pending();
    let (temp, file) = loop {
        let temp = dir.join(format!(
            ".{name}.morbus-{}-{}.tmp",
            std::process::id(),
            SERIAL.fetch_add(1, Ordering::Relaxed)
        ));
        match OpenOptions::new().write(true).create_new(true).open(&temp) {
            Ok(f) => break (temp, f),
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
            Err(e) => return Err(Error::io(format!("cannot create {shown}"), e)),
        }
    };
    list.push(temp.clone());
    drop(list);
    let guard = OutputGuard {
        temp,
        target,
        shown,
        file: file
            .try_clone()
            .map_err(|e| Error::io("cannot create a temporary file", e))?,
        done: false,
    };
    // The replacement keeps the permissions of the file it replaces.
    if let Some(m) = existing {
        let _ = file.set_permissions(m.permissions());
    }
    Ok((file, Some(guard)))
}

/// A small file output written whole and committed (provenance, JSON, an
/// HTML report, an exported list): nothing of it exists under its name
/// before [`AtomicFile::commit`].
pub struct AtomicFile {
    file: io::BufWriter<File>,
    guard: Option<OutputGuard>,
    shown: String,
}

impl AtomicFile {
    pub fn create(path: &Path) -> Result<AtomicFile, Error> {
        let (file, guard) = create_output(path)?;
        Ok(AtomicFile {
            file: io::BufWriter::new(file),
            guard,
            shown: path.display().to_string(),
        })
    }

    /// Writes `bytes`, then renames the file into place.
    pub fn write_and_commit(mut self, bytes: &[u8]) -> Result<(), Error> {
        let fail = |e| Error::io(format!("cannot write {}", self.shown), e);
        self.file
            .write_all(bytes)
            .and_then(|()| self.file.flush())
            .map_err(fail)?;
        match self.guard.take() {
            Some(g) => g.commit(),
            None => Ok(()),
        }
    }
}

/// Writes `bytes` to `path` atomically (see [`AtomicFile`]).
pub fn write_atomically(path: &Path, bytes: &[u8]) -> Result<(), Error> {
    AtomicFile::create(path)?.write_and_commit(bytes)
}

/// Removes every pending temporary output on SIGINT, SIGTERM or SIGHUP,
/// then ends the process as the signal would have (a thread of its own
/// waits for the signals). Call once, early; the command line does.
#[cfg(unix)]
pub fn remove_temporaries_on_signals() -> io::Result<()> {
    use signal_hook::consts::{SIGHUP, SIGINT, SIGTERM};
    let mut signals = signal_hook::iterator::Signals::new([SIGINT, SIGTERM, SIGHUP])?;
    std::thread::Builder::new()
        .name("signals".into())
        .spawn(move || {
            if let Some(signal) = signals.forever().next() {
                // The lock stays held until the process ends: no output is
                // committed or created after this point.
                let list = pending();
                for p in list.iter() {
                    let _ = std::fs::remove_file(p);
                }
                let _ = signal_hook::low_level::emulate_default_handler(signal);
                std::process::exit(128 + signal);
            }
        })?;
    Ok(())
}

/// One end of a run for [`check_distinct`]: what it is called in messages
/// (`input`, `--output`, ...) and its path (`None` or `-`: the standard
/// stream).
#[derive(Clone, Copy, Debug)]
pub struct End<'a> {
    pub role: &'a str,
    pub path: Option<&'a Path>,
}

impl<'a> End<'a> {
    pub fn new(role: &'a str, path: Option<&'a Path>) -> End<'a> {
        End { role, path }
    }
}

#[derive(PartialEq, Eq, Debug)]
enum Identity {
    Inode(u64, u64),
    Path(PathBuf),
}

#[cfg(unix)]
fn file_identity(m: &std::fs::Metadata) -> Option<Identity> {
    // Only regular files can be lost; a device or FIFO is a stream.
    m.is_file().then(|| Identity::Inode(m.dev(), m.ino()))
}

#[cfg(not(unix))]
fn file_identity(_m: &std::fs::Metadata) -> Option<Identity> {
    None
}

/// The identity of a standard stream (0 or 1) that is a regular file.
#[cfg(unix)]
fn stream_identity(fd: i32) -> Option<Identity> {
    use std::os::fd::BorrowedFd;
    // SAFETY: 0 and 1 stay open for the life of the process (the runtime
    // opens /dev/null on them when they are closed at start).
    let fd = unsafe { BorrowedFd::borrow_raw(fd) };
    let owned = fd.try_clone_to_owned().ok()?;
    let m = File::from(owned).metadata().ok()?;
    file_identity(&m)
}

#[cfg(not(unix))]
fn stream_identity(_fd: i32) -> Option<Identity> {
    None
}

fn is_stream(path: Option<&Path>) -> bool {
    path.is_none_or(|p| p.as_os_str() == "-")
}

fn identity(end: &End, output: bool) -> Option<Identity> {
    match end.path {
        p if is_stream(p) => stream_identity(if output { 1 } else { 0 }),
        Some(p) => match std::fs::metadata(p) {
            Ok(m) => file_identity(&m),
            // Not there yet: its directory (symbolic links resolved) and name.
            Err(_) => {
                let dir = match p.parent() {
                    Some(d) if !d.as_os_str().is_empty() => d,
                    _ => Path::new("."),
                };
                let dir = std::fs::canonicalize(dir).ok()?;
                Some(Identity::Path(dir.join(p.file_name()?)))
            }
        },
        None => None,
    }
}

fn shown(end: &End) -> String {
    match end.path {
        p if is_stream(p) => "standard stream".into(),
        Some(p) => format!("'{}'", p.display()),
        None => String::new(),
    }
}

/// Refuses (exit 2, naming both) an output that is the same file as an
/// input or as another output. Standard input and output count when they
/// are regular files (`< in.csv`, `>> in.csv`).
pub fn check_distinct(inputs: &[End], outputs: &[End]) -> Result<(), Error> {
    let ins: Vec<(&End, Option<Identity>)> =
        inputs.iter().map(|e| (e, identity(e, false))).collect();
    let outs: Vec<(&End, Option<Identity>)> =
        outputs.iter().map(|e| (e, identity(e, true))).collect();
    for (i, (o, oid)) in outs.iter().enumerate() {
        let Some(oid) = oid else { continue };
        for (inp, iid) in &ins {
            if iid.as_ref() == Some(oid) {
                let stream = if is_stream(o.path) {
                    "standard output".to_string()
                } else {
                    format!("{} {}", o.role, shown(o))
                };
                let source = if is_stream(inp.path) {
                    "standard input".to_string()
                } else {
                    format!("the {} {}", inp.role, shown(inp))
                };
                return Err(Error::Usage(format!(
                    "{stream} is the same file as {source}; an output never replaces an \
                     input: name another output"
                )));
            }
        }
        for (o2, oid2) in &outs[..i] {
            if oid2.as_ref() == Some(oid) {
                let a = if is_stream(o2.path) {
                    "standard output".to_string()
                } else {
                    format!("{} {}", o2.role, shown(o2))
                };
                let b = if is_stream(o.path) {
                    "standard output".to_string()
                } else {
                    format!("{} {}", o.role, shown(o))
                };
                return Err(Error::Usage(format!(
                    "{a} and {b} are the same file; give each output its own file"
                )));
            }
        }
    }
    Ok(())
}

/// Records that standard output's reader went away (a broken pipe) when
/// `e` says so; returns `e`.
pub fn note_stdout_error(e: io::Error) -> io::Error {
    if e.kind() == io::ErrorKind::BrokenPipe {
        STDOUT_BROKEN.store(true, Ordering::SeqCst);
    }
    e
}

/// Whether a write to standard output failed because its reader closed it
/// (`| head`): the run then ends quietly, the reader having chosen to stop.
pub fn stdout_closed_by_reader() -> bool {
    STDOUT_BROKEN.load(Ordering::SeqCst)
}

/// Standard output as a writer that notes a broken pipe (see
/// [`stdout_closed_by_reader`]).
pub struct Stdout(io::Stdout);

/// Standard output, noting a broken pipe.
pub fn stdout() -> Stdout {
    Stdout(io::stdout())
}

impl Write for Stdout {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        self.0.write(buf).map_err(note_stdout_error)
    }
    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        self.0.write_all(buf).map_err(note_stdout_error)
    }
    fn flush(&mut self) -> io::Result<()> {
        self.0.flush().map_err(note_stdout_error)
    }
}

/// Refuses a standard output that was closed before the run (`>&-`): the
/// process then starts with `/dev/null` opened read-write in its place
/// (Rust's runtime does that, so that writes do not land in a file opened
/// later), and the run's output would vanish with exit 0.
#[cfg(unix)]
pub fn check_stdout_open() -> Result<(), Error> {
    use std::os::fd::BorrowedFd;
    // SAFETY: fd 1 is open for the life of the process (see above).
    let fd = unsafe { BorrowedFd::borrow_raw(1) };
    let closed = || {
        Error::io(
            "cannot write output",
            io::Error::other("standard output is closed (give -o FILE, or redirect it)"),
        )
    };
    let Ok(owned) = fd.try_clone_to_owned() else {
        return Err(closed());
    };
    let file = File::from(owned);
    let (Ok(m), Ok(null)) = (file.metadata(), std::fs::metadata("/dev/null")) else {
        return Ok(());
    };
    if m.rdev() != null.rdev() || m.file_type().is_file() {
        return Ok(());
    }
    // SAFETY: F_GETFL reads the flags of an open descriptor.
    let flags = unsafe { libc::fcntl(1, libc::F_GETFL) };
    if flags >= 0 && flags & libc::O_ACCMODE == libc::O_RDWR {
        return Err(closed());
    }
    Ok(())
}

#[cfg(not(unix))]
pub fn check_stdout_open() -> Result<(), Error> {
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dir(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("morbus-atomic-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    fn entries(d: &Path) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(d)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn uncommitted_output_leaves_the_old_file() {
        let d = dir("drop");
        let out = d.join("out.csv");
        std::fs::write(&out, "old\n").unwrap();
        {
            let (mut f, guard) = create_output(&out).unwrap();
            f.write_all(b"new, partial").unwrap();
            assert_eq!(entries(&d).len(), 2, "a temporary file beside the output");
            drop(guard);
        }
        assert_eq!(std::fs::read(&out).unwrap(), b"old\n");
        assert_eq!(entries(&d), ["out.csv"]);
        assert!(!pending().iter().any(|p| p.starts_with(&d)));
    }

    #[test]
    fn committed_output_replaces_the_old_file() {
        let d = dir("commit");
        let out = d.join("out.csv");
        std::fs::write(&out, "old\n").unwrap();
        write_atomically(&out, b"new\n").unwrap();
        assert_eq!(std::fs::read(&out).unwrap(), b"new\n");
        assert_eq!(entries(&d), ["out.csv"]);
    }

    #[test]
    fn a_link_is_followed_and_kept() {
        let d = dir("link");
        let real = d.join("real.csv");
        std::fs::write(&real, "old\n").unwrap();
        std::os::unix::fs::symlink(&real, d.join("link.csv")).unwrap();
        write_atomically(&d.join("link.csv"), b"new\n").unwrap();
        assert_eq!(std::fs::read(&real).unwrap(), b"new\n");
        assert!(std::fs::symlink_metadata(d.join("link.csv"))
            .unwrap()
            .file_type()
            .is_symlink());
        std::os::unix::fs::symlink(d.join("nothing"), d.join("dangling.csv")).unwrap();
        let e = write_atomically(&d.join("dangling.csv"), b"x").unwrap_err();
        assert_eq!(e.exit_code(), 2);
        assert!(!d.join("nothing").exists());
    }

    #[test]
    fn same_files_are_found() {
        let d = dir("same");
        let input = d.join("in.csv");
        std::fs::write(&input, "a\n").unwrap();
        std::os::unix::fs::symlink(&input, d.join("alias.csv")).unwrap();
        let alias = d.join("alias.csv");
        let inputs = [End::new("input", Some(&input))];
        let e = check_distinct(&inputs, &[End::new("--output", Some(&alias))]).unwrap_err();
        assert_eq!(e.exit_code(), 2);
        assert!(e.to_string().contains("alias.csv") && e.to_string().contains("in.csv"));
        let new = d.join("new.csv");
        let other = d.join(".").join("new.csv");
        let e = check_distinct(
            &inputs,
            &[
                End::new("--output", Some(&new)),
                End::new("--provenance", Some(&other)),
            ],
        )
        .unwrap_err();
        assert!(e.to_string().contains("--output") && e.to_string().contains("--provenance"));
        check_distinct(&inputs, &[End::new("--output", Some(&new))]).unwrap();
    }
}
