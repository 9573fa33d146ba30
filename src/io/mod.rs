//! Streaming delimited text: opening inputs and outputs (plain or gzip),
//! cutting the input into blocks of whole records, and reading the fields of
//! each record while keeping its raw bytes for byte-identical pass-through;
//! Parquet in and out ([`parquet`]); the value records a run hands a typed
//! output ([`value_records`]).

#[cfg(feature = "arrow")]
pub mod arrow_rows;
pub mod atomic;
mod blocks;
mod extract;
mod files;
#[cfg(feature = "parquet")]
pub mod parquet;
mod records;
#[cfg(feature = "parquet")]
mod row_groups;
pub mod value_records;

pub use atomic::{check_distinct, write_atomically, AtomicFile, End};
pub use blocks::{line_ends, Block, BlockReader};
pub use extract::{Extract, Table};
#[cfg(feature = "parquet")]
pub use files::open_parquet_output;
pub use files::{is_parquet_path, open_input, open_output, Input, Output, Writer};
pub use records::{Fields, RecordRef, RecordScanner};

/// Appends one field as delimited text, quoting it only when it holds the
/// delimiter, a quote, or a line break.
pub fn write_field(value: &[u8], delimiter: u8, out: &mut Vec<u8>) {
    let needs = value
        .iter()
        .any(|&b| b == delimiter || b == b'"' || b == b'\n' || b == b'\r');
    if !needs {
        out.extend_from_slice(value);
        return;
    }
    out.push(b'"');
    for &b in value {
        if b == b'"' {
            out.push(b'"');
        }
        out.push(b);
    }
    out.push(b'"');
}
