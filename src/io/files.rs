use std::fs::File;
use std::io::{self, BufRead, BufReader, BufWriter, Read, Write};
use std::path::Path;

use flate2::bufread::MultiGzDecoder;
use flate2::write::GzEncoder;
use flate2::Compression;

use crate::Error;

/// An opened input: a reader and, for files, the size on disk.
pub struct Input {
    pub reader: Box<dyn Read + Send>,
    /// Size on disk, for files.
    pub size: Option<u64>,
    /// Whether the input is gzip-compressed (its size then says little about
    /// the bytes the reader will give).
    pub compressed: bool,
    pub name: String,
}

/// Opens a path (`-` or `None`: standard input). Gzip is recognised by its
/// magic bytes, whatever the file is called.
pub fn open_input(path: Option<&Path>) -> Result<Input, Error> {
    let (raw, size, name): (Box<dyn Read + Send>, Option<u64>, String) = match path {
        None => (Box::new(io::stdin()), None, "standard input".into()),
        Some(p) if p.as_os_str() == "-" => (Box::new(io::stdin()), None, "standard input".into()),
        Some(p) => {
            let f =
                File::open(p).map_err(|e| Error::io(format!("cannot open {}", p.display()), e))?;
            if f.metadata().map(|m| m.is_dir()).unwrap_or(false) {
                return Err(Error::Usage(format!(
                    "{} is a directory, not a file",
                    p.display()
                )));
            }
            let size = f.metadata().ok().map(|m| m.len());
            (Box::new(f), size, p.display().to_string())
        }
    };
    let mut buffered = BufReader::with_capacity(1 << 16, raw);
    let head = buffered
        .fill_buf()
        .map_err(|e| Error::io(format!("cannot read {name}"), e))?;
    let compressed = head.starts_with(&[0x1f, 0x8b]);
    let reader: Box<dyn Read + Send> = if compressed {
        Box::new(MultiGzDecoder::new(buffered))
    } else {
        Box::new(buffered)
    };
    Ok(Input {
        reader,
        size,
        compressed,
        name,
    })
}

/// An opened output.
pub struct Output {
    pub writer: Box<dyn Write + Send>,
    pub name: String,
}

/// Opens an output path (`-` or `None`: standard output); a name ending in
/// `.gz` is written gzip-compressed.
pub fn open_output(path: Option<&Path>) -> Result<Output, Error> {
    match path {
        None => Ok(stdout()),
        Some(p) if p.as_os_str() == "-" => Ok(stdout()),
        Some(p) => {
            let f = File::create(p)
                .map_err(|e| Error::io(format!("cannot create {}", p.display()), e))?;
            let w = BufWriter::with_capacity(1 << 17, f);
            let writer: Box<dyn Write + Send> = if p.extension().is_some_and(|x| x == "gz") {
                Box::new(GzEncoder::new(w, Compression::fast()))
            } else {
                Box::new(w)
            };
            Ok(Output {
                writer,
                name: p.display().to_string(),
            })
        }
    }
}

fn stdout() -> Output {
    Output {
        writer: Box::new(BufWriter::with_capacity(1 << 17, io::stdout())),
        name: "standard output".into(),
    }
}
