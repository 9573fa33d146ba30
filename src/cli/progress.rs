//! A one-line progress display on standard error (only when it is a
//! terminal): rows read, rows per second, bytes read of the total.

use std::io::Write;
use std::time::{Duration, Instant};

use morbus::pipeline::Progress;

pub struct ProgressLine {
    total: Option<u64>,
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
            started: now,
            last: now,
            shown: false,
        }
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
        let mut err = std::io::stderr().lock();
        let _ = write!(
            err,
            "\r\x1b[2Kmorbus: {} rows, {:.0} rows/s, {bytes}",
            p.rows, rate
        );
        let _ = err.flush();
        self.shown = true;
    }

    pub fn finish(&mut self) {
        if self.shown {
            let _ = write!(std::io::stderr(), "\r\x1b[2K");
        }
    }
}
