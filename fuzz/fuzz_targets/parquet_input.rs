//! Parquet input over arbitrary bytes (seeded with small valid files in
//! `seeds/parquet_input/`): opening a damaged file and reading its rows
//! typed gives an error or rows, never a panic that escapes (the decoder's
//! own panics are caught and reported as a damaged file; the command line's
//! hook keeps them quiet, and so does this target, so that libFuzzer's
//! abort-on-panic hook sees only the others); every row of a batch that
//! comes out has a value (possibly missing) in every column of the header,
//! and its text form, when it has one, is what the row model gives.
#![no_main]

use libfuzzer_sys::fuzz_target;
use morbus::io::parquet::{ParquetRows, Source};
use morbus::rows::RowSource;

fuzz_target!(|data: &[u8]| {
    morbus::io::parquet::quiet_decoder_panics();
    let source = Source::Memory(data.to_vec().into());
    let Ok(mut rows) = ParquetRows::from_source(source, None, "fuzz.parquet") else {
        return;
    };
    let width = rows.header().names.len();
    while let Ok(Some(batch)) = rows.next_batch() {
        for r in 0..batch.len() {
            for c in 0..width {
                let _ = batch.field(c, r).text();
            }
        }
    }
});
