//! A one-line progress display on standard error (only when it is a
//! terminal): rows read (of the total, for a Parquet input, whose footer
//! says), rows per second, and for text inputs bytes read (of the total,
//! for a plain file).

use std::io::Write;
use std::time::{Duration, Instant};

use morbus::pipeline::Progress;

pub struct ProgressLine {
    total: Option<u64>,
    total_rows: Option<u64>,
    started: Instant,
    last: Instant,
    shown: bool,
}

fn megabytes(b: u64) -> String {
    format!("{:.1} MB", b as f64 / 1e6)
}

impl ProgressLine {
    pub fn new(total: Option<u64>) -> Self {
        let now = Instant::now();
        ProgressLine {
            total,
            total_rows: None,
            started: now,
            last: now,
            shown: false,
        }
    }

    /// Shows the rows read out of `rows` (known up front for Parquet).
    pub fn with_rows(mut self, rows: Option<u64>) -> Self {
        self.total_rows = rows;
        self
    }

    pub fn update(&mut self, p: Progress) {
        let now = Instant::now();
        if now.duration_since(self.last) < Duration::from_millis(250) {
            return;
        }
        self.last = now;
        let secs = now.duration_since(self.started).as_secs_f64().max(1e-3);
        let rate = p.rows as f64 / secs;
        let bytes = match self.total {
            Some(t) if t > 0 => format!(
                "{} of {} ({:.0}%)",
                megabytes(p.bytes_read),
                megabytes(t),
                100.0 * p.bytes_read as f64 / t as f64
            ),
            _ => megabytes(p.bytes_read),
        };
        let rows = match self.total_rows {
            Some(t) if t > 0 => format!(
                "{} of {t} rows ({:.0}%)",
                p.rows,
                100.0 * p.rows as f64 / t as f64
            ),
            _ => format!("{} rows", p.rows),
        };
        let mut err = std::io::stderr().lock();
        let _ = if self.total_rows.is_some() {
            // A Parquet input: the bytes are those of its text form, which
            // say nothing to the user.
            write!(err, "\r\x1b[2Kmorbus: {rows}, {rate:.0} rows/s")
        } else {
            write!(err, "\r\x1b[2Kmorbus: {rows}, {rate:.0} rows/s, {bytes}")
        };
        let _ = err.flush();
        self.shown = true;
    }

    pub fn finish(&mut self) {
        if self.shown {
            let _ = write!(std::io::stderr(), "\r\x1b[2K");
        }
    }
}
