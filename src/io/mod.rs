//! Streaming delimited text: opening inputs and outputs (plain or gzip),
//! cutting the input into blocks of whole records, and reading the fields of
//! each record while keeping its raw bytes for byte-identical pass-through.

mod blocks;
mod files;
mod records;

pub use blocks::{line_ends, Block, BlockReader};
pub use files::{open_input, open_output, Input, Output};
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
