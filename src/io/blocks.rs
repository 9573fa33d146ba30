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

/// Offset just after the last record boundary in `buf`, if any.
fn last_boundary(buf: &[u8], delimiter: u8) -> Option<usize> {
    if memchr::memchr(b'"', buf).is_none() {
        return memchr::memrchr(b'\n', buf).map(|p| p + 1);
    }
    let mut state = Q::FieldStart;
    let mut last = None;
    for (i, &b) in buf.iter().enumerate() {
        let (next, ends) = step(state, b, delimiter);
        if ends {
            last = Some(i + 1);
        }
        state = next;
    }
    last
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
            if let Some(cut) = last_boundary(&buf, self.delimiter) {
                self.carry = buf[cut..].to_vec();
                buf.truncate(cut);
                return Ok(Some(self.emit(buf, false)));
            }
            if buf.len() > self.max_record {
                return Err(io::Error::new(
                    io::ErrorKind::InvalidData,
                    format!(
                        "line {}: a record runs past {} bytes without ending; is a quote left open?",
                        self.next_line, self.max_record
                    ),
                ));
            }
            want = (buf.len() * 2).min(self.max_record + 1).max(buf.len() + 1);
        }
    }

    fn emit(&mut self, data: Vec<u8>, last: bool) -> Block {
        let first_line = self.next_line;
        self.next_line += memchr::memchr_iter(b'\n', &data).count() as u64;
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
        assert!(e.to_string().starts_with("line 3: "), "{e}");
        // The same text under the default limit reads to the end.
        let mut r = BlockReader::new(&text[..], b',', 1024);
        let mut n = 0;
        while let Some(b) = r.next_block().unwrap() {
            n += b.data.len();
        }
        assert_eq!(n, text.len());
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
