//! Cutting a stream into blocks of whole records.
//!
//! A block ends just after a line feed that lies outside any quoted field, so
//! every block can be parsed (and, later, scored on another thread) on its
//! own. Without quotes in a block the cut is the last line feed; with quotes
//! the block is scanned with the same quoting rules as the record parser
//! (a quote opens a quoted field only at the start of a field, `""` inside a
//! quoted field is a literal quote).

use std::io::{self, Read};

/// A run of whole records.
pub struct Block {
    pub data: Vec<u8>,
    /// 1-based line number of the block's first byte.
    pub first_line: u64,
    /// Whether this is the end of the input (the last record may lack its
    /// line end).
    pub last: bool,
    /// Sequence number, from 0.
    pub index: u64,
}

pub struct BlockReader<R: Read> {
    inner: R,
    carry: Vec<u8>,
    next_line: u64,
    eof: bool,
    target: usize,
    delimiter: u8,
    bytes_read: u64,
    index: u64,
    max_record: usize,
}

/// Longest record the reader accepts ([`BlockReader::with_max_record`]).
pub const MAX_RECORD_BYTES: usize = 256 << 20;

/// A byte count as messages show it: `256 MiB`, or `4096 bytes`.
fn size_text(bytes: usize) -> String {
    if bytes >= 1 << 20 && bytes % (1 << 20) == 0 {
        format!("{} MiB", bytes >> 20)
    } else {
        format!("{bytes} bytes")
    }
}

#[derive(Clone, Copy, PartialEq)]
enum Q {
    FieldStart,
    Unquoted,
    Quoted,
    QuoteInQuoted,
}

/// One step of the quoting state machine; `true` in the result: `b` ends a
/// record.
#[inline]
fn step(state: Q, b: u8, delimiter: u8) -> (Q, bool) {
    match state {
        Q::FieldStart | Q::Unquoted => {
            if b == b'\n' {
                (Q::FieldStart, true)
            } else if b == delimiter || b == b'\r' {
                (Q::FieldStart, false)
            } else if b == b'"' && state == Q::FieldStart {
                (Q::Quoted, false)
            } else {
                (Q::Unquoted, false)
            }
        }
        Q::Quoted => {
            if b == b'"' {
                (Q::QuoteInQuoted, false)
            } else {
                (Q::Quoted, false)
            }
        }
        Q::QuoteInQuoted => {
            if b == b'"' {
                (Q::Quoted, false)
            } else if b == b'\n' {
                (Q::FieldStart, true)
            } else if b == delimiter || b == b'\r' {
                (Q::FieldStart, false)
            } else {
                (Q::Unquoted, false)
            }
        }
    }
}

/// Line ends in `data[..end]`: line feeds, and carriage returns not
/// followed by a line feed (old Mac files, or a lone CR among LF lines,
/// which the record parser also takes as a line end). The byte at `end`, if
/// any, is looked at to tell a lone CR from half a CRLF; a CR that ends
/// `data` is a line end.
pub fn line_ends(data: &[u8], end: usize) -> u64 {
    let head = &data[..end];
    let lf = memchr::memchr_iter(b'\n', head).count() as u64;
    let lone_cr = memchr::memchr_iter(b'\r', head)
        .filter(|&i| data.get(i + 1) != Some(&b'\n'))
        .count() as u64;
    lf + lone_cr
}

/// Offset just after the last record boundary in `buf`, if any: the last
/// line feed outside quotes or, in text without line feeds, the last lone
/// carriage return (one with a byte after it that is not a line feed, so
/// that a CRLF is never cut in two).
fn last_boundary(buf: &[u8], delimiter: u8) -> Option<usize> {
    if memchr::memchr(b'"', buf).is_none() {
        return memchr::memrchr(b'\n', buf).map(|p| p + 1).or_else(|| {
            memchr::memrchr(b'\r', &buf[..buf.len().saturating_sub(1)]).map(|p| p + 1)
        });
    }
    let mut state = Q::FieldStart;
    let mut last = None;
    let mut last_cr = None;
    for (i, &b) in buf.iter().enumerate() {
        let (next, ends) = step(state, b, delimiter);
        if ends {
            last = Some(i + 1);
        } else if b == b'\r' && next == Q::FieldStart && buf.get(i + 1).is_some_and(|&c| c != b'\n')
        {
            last_cr = Some(i + 1);
        }
        state = next;
    }
    last.or(last_cr)
}

/// Whether text starting at a record boundary ends inside a quoted field
/// (a quote opened and never closed).
pub(crate) fn ends_inside_quotes(buf: &[u8], delimiter: u8) -> bool {
    if memchr::memchr(b'"', buf).is_none() {
        return false;
    }
    let state = buf
        .iter()
        .fold(Q::FieldStart, |s, &b| step(s, b, delimiter).0);
    state == Q::Quoted
}

impl<R: Read> BlockReader<R> {
    /// `target`: preferred block size in bytes (a block grows past it to
    /// hold a record longer than that).
    pub fn new(inner: R, delimiter: u8, target: usize) -> Self {
        BlockReader {
            inner,
            carry: Vec::new(),
            next_line: 1,
            eof: false,
            target: target.max(1024),
            delimiter,
            bytes_read: 0,
            index: 0,
            max_record: MAX_RECORD_BYTES,
        }
    }

    /// Sets the longest record accepted (default [`MAX_RECORD_BYTES`]): a
    /// record that runs past it, which is nearly always a quote left open,
    /// fails with its line number instead of filling the memory.
    pub fn with_max_record(mut self, bytes: usize) -> Self {
        self.max_record = bytes.max(1);
        self
    }

    /// Bytes read from the underlying reader so far.
    pub fn bytes_read(&self) -> u64 {
        self.bytes_read
    }

    fn fill(&mut self, buf: &mut Vec<u8>, want: usize) -> io::Result<()> {
        if self.eof || buf.len() >= want {
            return Ok(());
        }
        let asked = (want - buf.len()) as u64;
        // `read_to_end` on a `Take` fills spare capacity without zeroing it
        // first, and stops at the limit or at the end of the input.
        let n = (&mut self.inner).take(asked).read_to_end(buf)? as u64;
        self.bytes_read += n;
        if n < asked {
            self.eof = true;
        }
        Ok(())
    }

    /// The next block, or `None` at the end of the input.
    pub fn next_block(&mut self) -> io::Result<Option<Block>> {
        if self.eof && self.carry.is_empty() {
            return Ok(None);
        }
        let mut buf = Vec::with_capacity(self.target + self.carry.len());
        buf.append(&mut self.carry);
        let mut want = self.target.max(buf.len() + 1);
        loop {
            self.fill(&mut buf, want)?;
            if self.eof {
                if buf.is_empty() {
                    return Ok(None);
                }
                return Ok(Some(self.emit(buf, true)));
            }
            // A byte-order mark starting the input is not part of the first
            // field (a quote after it opens a quoted field).
            let skip = if self.index == 0 && buf.starts_with(b"\xef\xbb\xbf") {
                3
            } else {
                0
            };
            if let Some(cut) = last_boundary(&buf[skip..], self.delimiter).map(|c| c + skip) {
                self.carry = buf[cut..].to_vec();
                buf.truncate(cut);
                return Ok(Some(self.emit(buf, false)));
            }
            if buf.len() > self.max_record {
                // Suggest an open quote only where one is open.
                let why = if ends_inside_quotes(&buf[skip..], self.delimiter) {
                    "a quoted field opened in it is never closed"
                } else {
                    "no line break in it"
                };
                return Err(io::Error::new(
                    io::ErrorKind::InvalidData,
                    format!(
                        "line {}: a record runs past {} without ending ({why}); {} is the limit \
                         for one record",
                        self.next_line,
                        size_text(self.max_record),
                        size_text(self.max_record)
                    ),
                ));
            }
            want = (buf.len() * 2).min(self.max_record + 1).max(buf.len() + 1);
        }
    }

    fn emit(&mut self, data: Vec<u8>, last: bool) -> Block {
        let first_line = self.next_line;
        self.next_line += line_ends(&data, data.len());
        let index = self.index;
        self.index += 1;
        Block {
            data,
            first_line,
            last,
            index,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn blocks(input: &[u8], target: usize) -> Vec<(Vec<u8>, u64, bool)> {
        let mut r = BlockReader::new(input, b',', target);
        r.target = target; // allow tiny blocks in tests
        let mut v = Vec::new();
        while let Some(b) = r.next_block().unwrap() {
            v.push((b.data, b.first_line, b.last));
        }
        v
    }

    #[test]
    fn cuts_outside_quotes_only() {
        let text = b"a,b\n1,\"x\ny\"\n2,\"q\"\"\n\"\n3,z";
        for target in 1..text.len() + 2 {
            let bs = blocks(text, target);
            let joined: Vec<u8> = bs.iter().flat_map(|b| b.0.clone()).collect();
            assert_eq!(joined, text.to_vec());
            for (data, _, last) in &bs {
                if !last {
                    assert!(data.ends_with(b"\n"));
                    // never cut inside a quoted field: even number of quotes
                    assert_eq!(data.iter().filter(|&&c| c == b'"').count() % 2, 0);
                }
            }
        }
    }

    #[test]
    fn a_record_past_the_limit_fails_with_its_line() {
        let mut text = b"h\n1\n2,\"open\n".to_vec();
        text.extend(std::iter::repeat_n(b'x', 10_000));
        let mut r = BlockReader::new(&text[..], b',', 1024).with_max_record(4096);
        let mut err = None;
        loop {
            match r.next_block() {
                Ok(Some(_)) => {}
                Ok(None) => break,
                Err(e) => {
                    err = Some(e);
                    break;
                }
            }
        }
        let e = err.expect("the open quote runs past the limit");
        assert_eq!(e.kind(), io::ErrorKind::InvalidData);
        assert_eq!(
            e.to_string(),
            "line 3: a record runs past 4096 bytes without ending (a quoted field opened in it is \
             never closed); 4096 bytes is the limit for one record"
        );
        // Without a quote the message does not suggest one.
        let long = [b"a,b\n1,".as_slice(), &[b'x'; 10_000]].concat();
        let mut r = BlockReader::new(&long[..], b',', 1024).with_max_record(4096);
        let e = loop {
            match r.next_block() {
                Ok(Some(_)) => {}
                Ok(None) => panic!("the long record runs past the limit"),
                Err(e) => break e,
            }
        };
        assert_eq!(
            e.to_string(),
            "line 2: a record runs past 4096 bytes without ending (no line break in it); \
             4096 bytes is the limit for one record"
        );
        // The same text under the default limit reads to the end.
        let mut r = BlockReader::new(&text[..], b',', 1024);
        let mut n = 0;
        while let Some(b) = r.next_block().unwrap() {
            n += b.data.len();
        }
        assert_eq!(n, text.len());
    }

    #[test]
    fn carriage_returns_alone_end_lines_and_blocks() {
        assert_eq!(line_ends(b"a\rb\r\nc\nd\r", 9), 4);
        assert_eq!(line_ends(b"a\rb", 2), 1);
        // Half a CRLF at the end of what is counted is not a line end.
        assert_eq!(line_ends(b"a\r\nb", 2), 0);
        let mut text = b"id,dx\r".to_vec();
        for i in 0..500 {
            text.extend_from_slice(format!("{i},\"I{}\"\r", i % 100).as_bytes());
        }
        for target in [1024, 1500, 4000] {
            let bs = blocks(&text, target);
            assert!(bs.len() > 1, "cut at lone carriage returns");
            let joined: Vec<u8> = bs.iter().flat_map(|b| b.0.clone()).collect();
            assert_eq!(joined, text);
            let mut line = 1;
            for (data, first, _) in &bs {
                assert_eq!(*first, line);
                line += line_ends(data, data.len());
            }
            assert_eq!(line, 502);
        }
        // CRLF text is never cut between CR and LF.
        let crlf: Vec<u8> = b"a,b\r\n".repeat(1000);
        for (data, _, last) in blocks(&crlf, 1024) {
            assert!(last || data.ends_with(b"\r\n"));
        }
    }

    #[test]
    fn open_quote_at_the_end() {
        assert!(ends_inside_quotes(b"1,\"abc", b','));
        assert!(ends_inside_quotes(b"1,\"a\"\"bc\n", b','));
        assert!(!ends_inside_quotes(b"1,\"a\"\"b\"c", b','));
        assert!(!ends_inside_quotes(b"1,a\"bc", b','));
        assert!(!ends_inside_quotes(b"1,abc", b','));
    }

    #[test]
    fn a_quote_after_a_byte_order_mark_opens_a_field() {
        let text = b"\xef\xbb\xbf\"a\nb\",dx\n1,x\n2,y\n3,z\n";
        for target in 1..text.len() + 2 {
            let bs = blocks(text, target);
            let joined: Vec<u8> = bs.iter().flat_map(|b| b.0.clone()).collect();
            assert_eq!(joined, text.to_vec());
            // The first block holds the whole header.
            assert!(bs[0].0.len() >= 12, "target {target}: {:?}", bs[0].0);
        }
    }

    #[test]
    fn line_numbers() {
        let text = b"h\n1\n2\n3\n4\n";
        let mut r = BlockReader::new(&text[..], b',', 1);
        r.target = 4;
        let mut lines = vec![];
        while let Some(b) = r.next_block().unwrap() {
            lines.push(b.first_line);
        }
        assert_eq!(lines[0], 1);
        assert!(lines.windows(2).all(|w| w[0] < w[1]));
    }
}
