//! Reading the records of a block with `csv-core`, keeping each record's raw
//! bytes (for pass-through) next to its unescaped fields.

use csv_core::{ReadRecordResult, Reader, ReaderBuilder};

/// The unescaped fields of one record.
pub struct Fields<'a> {
    out: &'a [u8],
    ends: &'a [usize],
}

impl<'a> Fields<'a> {
    pub fn len(&self) -> usize {
        self.ends.len()
    }
    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }
    /// Field `i` (empty if out of range).
    #[inline]
    pub fn get(&self, i: usize) -> &'a [u8] {
        if i >= self.ends.len() {
            return &[];
        }
        let start = if i == 0 { 0 } else { self.ends[i - 1] };
        &self.out[start..self.ends[i]]
    }
}

/// One record of a block.
pub struct RecordRef<'a> {
    /// The record's bytes as written, without its line end.
    pub raw: &'a [u8],
    /// Offset of the record in the block.
    pub offset: usize,
    /// Whether the record ended with `\r\n` (or `\r`).
    pub crlf: bool,
    /// The input ends inside a quoted field of this record (a quote opened
    /// and never closed): the record and its fields are what was there.
    pub unclosed_quote: bool,
    pub fields: Fields<'a>,
}

/// A reusable record reader.
pub struct RecordScanner {
    core: Reader,
    delimiter: u8,
    out: Vec<u8>,
    ends: Vec<usize>,
}

impl RecordScanner {
    pub fn new(delimiter: u8) -> RecordScanner {
        RecordScanner {
            core: ReaderBuilder::new().delimiter(delimiter).build(),
            delimiter,
            out: vec![0; 1 << 12],
            ends: vec![0; 64],
        }
    }

    /// Calls `f` for every record of `data`, in order. `last`: `data` ends
    /// the input (a final record without line end is still a record).
    /// Stops at the first error `f` returns.
    pub fn scan<E>(
        &mut self,
        data: &[u8],
        last: bool,
        f: impl FnMut(RecordRef<'_>) -> Result<(), E>,
    ) -> Result<(), E> {
        self.scan_from(data, 0, last, f)
    }

    /// Like [`RecordScanner::scan`], starting at byte `start` (a record
    /// boundary).
    pub fn scan_from<E>(
        &mut self,
        data: &[u8],
        start: usize,
        last: bool,
        mut f: impl FnMut(RecordRef<'_>) -> Result<(), E>,
    ) -> Result<(), E> {
        self.core.reset();
        let mut pos = start;
        loop {
            while pos < data.len() && (data[pos] == b'\n' || data[pos] == b'\r') {
                pos += 1;
            }
            if pos >= data.len() && !last {
                return Ok(());
            }
            if pos >= data.len() {
                return Ok(());
            }
            let start = pos;
            let mut outlen = 0usize;
            let mut endlen = 0usize;
            loop {
                let (res, nin, nout, nend) = self.core.read_record(
                    &data[pos..],
                    &mut self.out[outlen..],
                    &mut self.ends[endlen..],
                );
                pos += nin;
                outlen += nout;
                endlen += nend;
                match res {
                    ReadRecordResult::InputEmpty => {
                        if pos >= data.len() {
                            // End of the data: flush the final record.
                            let (res, _, nout, nend) = self.core.read_record(
                                &[],
                                &mut self.out[outlen..],
                                &mut self.ends[endlen..],
                            );
                            outlen += nout;
                            endlen += nend;
                            match res {
                                ReadRecordResult::OutputFull => {
                                    let n = self.out.len();
                                    self.out.resize(n * 2, 0);
                                    continue;
                                }
                                ReadRecordResult::OutputEndsFull => {
                                    let n = self.ends.len();
                                    self.ends.resize(n * 2, 0);
                                    continue;
                                }
                                _ => break,
                            }
                        }
                    }
                    ReadRecordResult::OutputFull => {
                        let n = self.out.len();
                        self.out.resize(n * 2, 0);
                    }
                    ReadRecordResult::OutputEndsFull => {
                        let n = self.ends.len();
                        self.ends.resize(n * 2, 0);
                    }
                    ReadRecordResult::Record | ReadRecordResult::End => break,
                }
            }
            let mut end = pos;
            let mut crlf = false;
            while end > start && (data[end - 1] == b'\n' || data[end - 1] == b'\r') {
                if data[end - 1] == b'\r' {
                    crlf = true;
                }
                end -= 1;
            }
            if end == start && endlen <= 1 && outlen == 0 {
                // Only line ends: not a record.
                self.core.reset();
                continue;
            }
            let unclosed_quote = last
                && pos >= data.len()
                && super::blocks::ends_inside_quotes(&data[start..], self.delimiter);
            let rec = RecordRef {
                raw: &data[start..end],
                offset: start,
                crlf,
                unclosed_quote,
                fields: Fields {
                    out: &self.out[..outlen],
                    ends: &self.ends[..endlen],
                },
            };
            f(rec)?;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scan(data: &[u8]) -> Vec<(String, Vec<String>, bool)> {
        let mut s = RecordScanner::new(b',');
        let mut v = Vec::new();
        s.scan::<()>(data, true, |r| {
            let fields = (0..r.fields.len())
                .map(|i| String::from_utf8_lossy(r.fields.get(i)).into_owned())
                .collect();
            v.push((String::from_utf8_lossy(r.raw).into_owned(), fields, r.crlf));
            Ok(())
        })
        .unwrap();
        v
    }

    #[test]
    fn raw_and_fields() {
        let v = scan(b"a,b\r\n\"x,1\",\"q\"\"\"\n\nlast,\n1,2");
        assert_eq!(v.len(), 4);
        assert_eq!(v[0].0, "a,b");
        assert!(v[0].2);
        assert_eq!(v[1].0, "\"x,1\",\"q\"\"\"");
        assert_eq!(v[1].1, ["x,1", "q\""]);
        assert_eq!(v[2].1, ["last", ""]);
        assert_eq!(v[3].0, "1,2");
        assert_eq!(v[3].1, ["1", "2"]);
    }

    #[test]
    fn an_open_quote_at_the_end_is_marked() {
        let mut s = RecordScanner::new(b',');
        let mut marks = Vec::new();
        s.scan::<()>(b"a,b\n1,\"x\n\"\n2,\"open\n", true, |r| {
            marks.push(r.unclosed_quote);
            Ok(())
        })
        .unwrap();
        assert_eq!(marks, [false, false, true]);
        // Not at the end of the input: the record is not finished yet.
        let mut marks = Vec::new();
        s.scan::<()>(b"2,\"open\n", false, |r| {
            marks.push(r.unclosed_quote);
            Ok(())
        })
        .unwrap();
        assert!(marks.iter().all(|m| !m));
    }

    #[test]
    fn long_fields_grow_buffers() {
        let big = "x".repeat(100_000);
        let many = vec!["y"; 1000].join(",");
        let data = format!("{big},{many}\n");
        let v = scan(data.as_bytes());
        assert_eq!(v.len(), 1);
        assert_eq!(v[0].1.len(), 1001);
        assert_eq!(v[0].1[0].len(), 100_000);
    }
}
