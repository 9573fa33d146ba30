//! The CSV scoring path (`score_stream`) over arbitrary bytes, wide and
//! long, with and without a lookback over dated patient histories. Never
//! panics; a run that succeeds wrote exactly one output record
//! per unit after the header, and wide output does not depend on the
//! number of threads or the block size.
#![no_main]

use libfuzzer_sys::fuzz_target;
use morbus::io::RecordScanner;
use morbus::lists::Catalogue;
use morbus::pipeline::{score_stream, Layout, ScoreConfig};
use morbus::score::{Engine, IndexSpec, ScoreOptions};
use std::sync::OnceLock;

fn engine(age: bool) -> &'static Engine {
    static PLAIN: OnceLock<Engine> = OnceLock::new();
    static AGE: OnceLock<Engine> = OnceLock::new();
    let cell = if age { &AGE } else { &PLAIN };
    cell.get_or_init(|| {
        let specs = IndexSpec::parse_many(morbus::score::DEFAULT_INDICES).unwrap();
        let options = ScoreOptions {
            flags: true,
            age,
            ..ScoreOptions::default()
        };
        Engine::new(&Catalogue::builtin(), &specs, options).unwrap()
    })
}

/// Records in `out` (the scanner skips blank lines, as the scorer does).
fn records(out: &[u8], delimiter: u8) -> u64 {
    let mut n = 0u64;
    let mut s = RecordScanner::new(delimiter);
    s.scan::<()>(out, true, |_| {
        n += 1;
        Ok(())
    })
    .unwrap();
    n
}

fuzz_target!(|data: &[u8]| {
    let Some((&opts, body)) = data.split_first() else {
        return;
    };
    let delimiter = [b',', b';', b'\t', b'|'][(opts & 3) as usize];
    let long = opts & 4 != 0;
    let strict = opts & 8 != 0;
    let sep = opts & 16 != 0;
    let fixed_header = opts & 32 != 0 || long;
    let with_age = opts & 64 != 0 && fixed_header;
    // Lookback over the patient history (wide or long, by `long`).
    let lookback = (opts & 128 != 0 && fixed_header).then_some(if sep { u32::MAX } else { 30 });
    let d = delimiter as char;
    let mut input = Vec::new();
    if fixed_header {
        input.extend_from_slice(format!("id{d}date{d}age{d}dx1{d}dx2\n").as_bytes());
    }
    input.extend_from_slice(body);
    let cfg = ScoreConfig {
        dx: vec![if fixed_header { "dx*".into() } else { "*".into() }],
        dx_sep: sep.then_some(b' '),
        layout: if long { Layout::Long } else { Layout::Wide },
        id: (long || lookback.is_some()).then(|| "id".into()),
        date: lookback.map(|_| "date".into()),
        lookback,
        age: with_age.then(|| "age".into()),
        delimiter,
        strict,
        block_size: 1024,
        threads: 1,
        ..ScoreConfig::default()
    };
    let engine = engine(with_age);
    let mut out = Vec::new();
    let Ok(summary) = score_stream(engine, &cfg, &input[..], &mut out) else {
        return;
    };
    assert_eq!(summary.rows_written, summary.units);
    assert_eq!(
        records(&out, delimiter),
        summary.rows_written + 1,
        "output records do not match the rows written"
    );
    if !long {
        assert_eq!(summary.rows_read, summary.rows_written);
    }
    if !long && lookback.is_none() {
        for (threads, block_size) in [(2, 1024), (3, 4096)] {
            let cfg = ScoreConfig {
                threads,
                block_size,
                ..cfg.clone()
            };
            let mut again = Vec::new();
            let s = score_stream(engine, &cfg, &input[..], &mut again).expect("same input");
            assert_eq!(s, summary);
            assert_eq!(again, out, "threads {threads}, block size {block_size}");
        }
    }
});
