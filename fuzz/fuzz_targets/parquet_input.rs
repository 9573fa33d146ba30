//! Parquet input over arbitrary bytes (seeded with small valid files in
//! `seeds/parquet_input/`): opening and reading a damaged file as text
//! gives an error or text, never a panic that escapes (the decoder's own
//! panics are caught and reported as a damaged file; the command line's
//! hook keeps them quiet, and so does this target, so that libFuzzer's
//! abort-on-panic hook sees only the others); text that comes out has a
//! header and records of the header's width.
#![no_main]

use std::io::Read;

use libfuzzer_sys::fuzz_target;
use morbus::io::parquet::{ParquetText, Source};
use morbus::io::RecordScanner;

fuzz_target!(|data: &[u8]| {
    morbus::io::parquet::quiet_decoder_panics();
    let source = Source::Memory(data.to_vec().into());
    let Ok(mut text) = ParquetText::from_source(source, b',', None) else {
        return;
    };
    let mut out = Vec::new();
    if text.read_to_end(&mut out).is_err() {
        return;
    }
    let mut width = None;
    RecordScanner::new(b',')
        .scan::<()>(&out, true, |rec| {
            let n = rec.fields.len();
            assert_eq!(*width.get_or_insert(n), n, "a record of another width");
            Ok(())
        })
        .unwrap();
});
