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
    /// A Parquet input (recognised by its magic bytes): read it through
    /// [`crate::io::parquet::ParquetRows`]; `reader` is then empty.
    #[cfg(feature = "parquet")]
    pub parquet: Option<crate::io::parquet::Source>,
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
            // A FIFO or process substitution (`<(cat f.parquet)`) is a
            // stream: no size, and a Parquet one is read whole like stdin.
            let size = f.metadata().ok().filter(|m| m.is_file()).map(|m| m.len());
            (Box::new(f), size, p.display().to_string())
        }
    };
    let mut buffered = BufReader::with_capacity(1 << 16, raw);
    let head = buffered
        .fill_buf()
        .map_err(|e| Error::io(format!("cannot read {name}"), e))?;
    let compressed = head.starts_with(&[0x1f, 0x8b]);
    if head.starts_with(b"PAR1") {
        return parquet_input(path, buffered, size, name);
    }
    let reader: Box<dyn Read + Send> = if compressed {
        let mut text = BufReader::with_capacity(1 << 16, MultiGzDecoder::new(buffered));
        // The same message as a damaged stream found later in the run.
        let head = text
            .fill_buf()
            .map_err(|e| Error::io("cannot read input", e))?;
        refuse_wide_encodings(head, &name)?;
        Box::new(text)
    } else {
        refuse_wide_encodings(head, &name)?;
        Box::new(buffered)
    };
    Ok(Input {
        reader,
        size,
        compressed,
        name,
        #[cfg(feature = "parquet")]
        parquet: None,
    })
}

/// The UTF-16 or UTF-32 encoding of text starting with `head`, recognised
/// by its byte-order mark or, without one, by the NUL bytes that ASCII
/// characters carry in those encodings.
pub fn wide_encoding(head: &[u8]) -> Option<&'static str> {
    const MARKS: [(&[u8], &str); 4] = [
        (b"\xff\xfe\0\0", "UTF-32 (little-endian)"),
        (b"\0\0\xfe\xff", "UTF-32 (big-endian)"),
        (b"\xff\xfe", "UTF-16 (little-endian)"),
        (b"\xfe\xff", "UTF-16 (big-endian)"),
    ];
    if let Some((_, name)) = MARKS.iter().find(|(m, _)| head.starts_with(m)) {
        return Some(name);
    }
    // Without a mark: the first characters of a header are ASCII.
    match head {
        [a, 0, 0, 0, b, 0, 0, 0, ..] if *a != 0 && *b != 0 => Some("UTF-32 (little-endian)"),
        [0, 0, 0, a, 0, 0, 0, b, ..] if *a != 0 && *b != 0 => Some("UTF-32 (big-endian)"),
        [a, 0, b, 0, ..] if *a != 0 && *b != 0 => Some("UTF-16 (little-endian)"),
        [0, a, 0, b, ..] if *a != 0 && *b != 0 => Some("UTF-16 (big-endian)"),
        _ => None,
    }
}

fn refuse_wide_encodings(head: &[u8], name: &str) -> Result<(), Error> {
    match wide_encoding(head) {
        None => Ok(()),
        Some(encoding) => Err(Error::data(
            None,
            format!(
                "{name} is {encoding} text; morbus reads UTF-8 (or ASCII) text: convert it \
                 first (e.g. with iconv -t UTF-8)"
            ),
        )),
    }
}

#[cfg(feature = "parquet")]
fn parquet_input(
    path: Option<&Path>,
    mut buffered: BufReader<Box<dyn Read + Send>>,
    size: Option<u64>,
    name: String,
) -> Result<Input, Error> {
    use crate::io::parquet::Source;
    let source = match path {
        Some(p) if p.as_os_str() != "-" && size.is_some() => Source::File(p.to_path_buf()),
        // Parquet keeps its index at the end: a stream is read whole.
        _ => {
            let mut all = Vec::new();
            buffered
                .read_to_end(&mut all)
                .map_err(|e| Error::io(format!("cannot read {name}"), e))?;
            Source::Memory(all.into())
        }
    };
    Ok(Input {
        reader: Box::new(io::empty()),
        size,
        compressed: false,
        name,
        parquet: Some(source),
    })
}

#[cfg(not(feature = "parquet"))]
fn parquet_input(
    _path: Option<&Path>,
    _buffered: BufReader<Box<dyn Read + Send>>,
    _size: Option<u64>,
    name: String,
) -> Result<Input, Error> {
    Err(Error::Usage(format!(
        "{name} is a Parquet file; this build of morbus reads CSV only (build it with the \
         `parquet` feature)"
    )))
}

/// An opened output. Call [`Output::finish`] at the end: a Parquet output
/// writes its footer then, and write errors surface.
pub struct Output {
    pub writer: Writer,
    pub name: String,
    /// A file output's temporary file, renamed into place by
    /// [`Output::finish`]; removed when the output is dropped unfinished.
    guard: Option<super::atomic::OutputGuard>,
}

/// Where an output's bytes go: delimited text (plain or gzip), or a
/// Parquet file written from that text.
pub enum Writer {
    Text(Box<dyn Write + Send>),
    /// Gzip-compressed text: its trailer is written by [`Output::finish`].
    Gzip(GzEncoder<BufWriter<Box<dyn Write + Send>>>),
    #[cfg(feature = "parquet")]
    Parquet(Box<crate::io::parquet::ParquetSink>),
}

impl Write for Writer {
    #[inline]
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        match self {
            Writer::Text(w) => w.write(buf),
            Writer::Gzip(w) => w.write(buf),
            #[cfg(feature = "parquet")]
            Writer::Parquet(w) => w.write(buf),
        }
    }
    #[inline]
    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        match self {
            Writer::Text(w) => w.write_all(buf),
            Writer::Gzip(w) => w.write_all(buf),
            #[cfg(feature = "parquet")]
            Writer::Parquet(w) => w.write_all(buf),
        }
    }
    fn flush(&mut self) -> io::Result<()> {
        match self {
            Writer::Text(w) => w.flush(),
            Writer::Gzip(w) => w.flush(),
            #[cfg(feature = "parquet")]
            Writer::Parquet(w) => w.flush(),
        }
    }
}

impl Output {
    /// The output as a typed run writes it: text with `delimiter`, or
    /// Parquet batches.
    #[cfg(feature = "parquet")]
    pub fn typed(&mut self, delimiter: u8) -> Result<crate::io::parquet::TypedOutput<'_>, Error> {
        use crate::io::parquet::TypedOutput;
        Ok(match &mut self.writer {
            Writer::Text(w) => TypedOutput::Text {
                out: w.as_mut(),
                delimiter,
            },
            Writer::Gzip(w) => TypedOutput::Text { out: w, delimiter },
            Writer::Parquet(sink) => TypedOutput::Parquet(sink.as_mut()),
        })
    }

    /// Flushes a text output, writes a gzip output's trailer, writes the
    /// rest and the footer of a Parquet output; then renames a file output
    /// into place (until then an existing file of its name is untouched).
    pub fn finish(self) -> Result<(), Error> {
        let fail = |e| Error::io(format!("cannot write {}", self.name), e);
        match self.writer {
            Writer::Text(mut w) => w.flush().map_err(fail)?,
            Writer::Gzip(w) => w.finish().and_then(|mut w| w.flush()).map_err(fail)?,
            #[cfg(feature = "parquet")]
            Writer::Parquet(w) => w.finish()?,
        }
        match self.guard {
            Some(g) => g.commit(),
            None => Ok(()),
        }
    }
}

/// Whether a path names a Parquet file (`.parquet`, `.parq` or `.pq`).
pub fn is_parquet_path(path: &Path) -> bool {
    path.extension()
        .and_then(|x| x.to_str())
        .is_some_and(|x| matches!(x.to_ascii_lowercase().as_str(), "parquet" | "parq" | "pq"))
}

/// Opens an output path (`-` or `None`: standard output); a name ending in
/// `.gz` is written gzip-compressed. A file is written to a temporary file
/// beside it, renamed into place by [`Output::finish`] (see
/// [`super::atomic`]).
pub fn open_output(path: Option<&Path>) -> Result<Output, Error> {
    let (raw, name, guard) = raw_output(path)?;
    let writer = if path.is_some_and(|p| p.extension().is_some_and(|x| x == "gz")) {
        Writer::Gzip(GzEncoder::new(raw, Compression::fast()))
    } else {
        Writer::Text(Box::new(raw))
    };
    Ok(Output {
        writer,
        name,
        guard,
    })
}

/// Opens a Parquet output (`-` or `None`: standard output) for delimited
/// text with `delimiter` and the columns `columns`; `passthrough` copies
/// the columns of a Parquet input (see [`crate::io::parquet::ParquetSink`]);
/// up to `threads` row groups holding `bytes` of rows are encoded at once
/// ([`crate::io::parquet::ParquetSink::with_encoding`]).
#[cfg(feature = "parquet")]
pub fn open_parquet_output(
    path: Option<&Path>,
    delimiter: u8,
    columns: crate::io::parquet::OutputColumns,
    passthrough: Option<crate::io::parquet::Source>,
    (threads, bytes): (usize, usize),
) -> Result<Output, Error> {
    let (raw, name, guard) = raw_output(path)?;
    let sink = crate::io::parquet::ParquetSink::new(Box::new(raw), delimiter, columns, passthrough)
        .with_encoding(threads, bytes);
    Ok(Output {
        writer: Writer::Parquet(Box::new(sink)),
        name,
        guard,
    })
}

type RawOutput = (
    BufWriter<Box<dyn Write + Send>>,
    String,
    Option<super::atomic::OutputGuard>,
);

fn raw_output(path: Option<&Path>) -> Result<RawOutput, Error> {
    match path {
        Some(p) if p.as_os_str() != "-" => {
            let (f, guard) = super::atomic::create_output(p)?;
            Ok((
                BufWriter::with_capacity(1 << 17, Box::new(f)),
                p.display().to_string(),
                guard,
            ))
        }
        _ => {
            super::atomic::check_stdout_open()?;
            Ok((
                BufWriter::with_capacity(1 << 17, Box::new(super::atomic::stdout())),
                "standard output".into(),
                None,
            ))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::wide_encoding;

    #[test]
    fn wide_encodings_are_recognised() {
        // Byte-order marks as the Unicode Standard defines them (U+FEFF in
        // each encoding); the NUL patterns are those of ASCII letters.
        let utf16le: Vec<u8> = "id,dx1\n"
            .encode_utf16()
            .flat_map(u16::to_le_bytes)
            .collect();
        let utf16be: Vec<u8> = "id,dx1\n"
            .encode_utf16()
            .flat_map(u16::to_be_bytes)
            .collect();
        let utf32le: Vec<u8> = "id,dx1"
            .chars()
            .flat_map(|c| (c as u32).to_le_bytes())
            .collect();
        let utf32be: Vec<u8> = "id,dx1"
            .chars()
            .flat_map(|c| (c as u32).to_be_bytes())
            .collect();
        assert_eq!(wide_encoding(&utf16le), Some("UTF-16 (little-endian)"));
        assert_eq!(wide_encoding(&utf16be), Some("UTF-16 (big-endian)"));
        assert_eq!(wide_encoding(&utf32le), Some("UTF-32 (little-endian)"));
        assert_eq!(wide_encoding(&utf32be), Some("UTF-32 (big-endian)"));
        assert_eq!(wide_encoding(b"\xff\xfeid"), Some("UTF-16 (little-endian)"));
        assert_eq!(wide_encoding(b"\xfe\xffid"), Some("UTF-16 (big-endian)"));
        assert_eq!(
            wide_encoding(b"\xff\xfe\0\0i\0\0\0"),
            Some("UTF-32 (little-endian)")
        );
        assert_eq!(wide_encoding(b"\0\0\xfe\xff"), Some("UTF-32 (big-endian)"));
        assert_eq!(wide_encoding(b"\xef\xbb\xbfid,dx1\n"), None);
        assert_eq!(wide_encoding(b"id,dx1\n"), None);
        assert_eq!(wide_encoding(b""), None);
        assert_eq!(wide_encoding(b"a\0b"), None);
    }
}
