//! The practical floor for scoring: read every record of a CSV file and write
//! it back unchanged, with the `csv` crate (built on the same `csv-core`
//! parser morbus uses), single-threaded.
//!
//! Usage: rewrite INPUT OUTPUT

use std::fs::File;
use std::io::BufWriter;
use std::process::ExitCode;

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [input, output] = args.as_slice() else {
        eprintln!("usage: rewrite INPUT OUTPUT");
        return ExitCode::from(2);
    };
    let run = || -> Result<u64, Box<dyn std::error::Error>> {
        let mut rdr = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(File::open(input)?);
        let mut wtr =
            csv::Writer::from_writer(BufWriter::with_capacity(1 << 17, File::create(output)?));
        let mut rec = csv::ByteRecord::new();
        let mut n = 0u64;
        while rdr.read_byte_record(&mut rec)? {
            wtr.write_byte_record(&rec)?;
            n += 1;
        }
        wtr.flush()?;
        Ok(n)
    };
    match run() {
        Ok(n) => {
            eprintln!("rewrite: {n} records");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("rewrite: {e}");
            ExitCode::FAILURE
        }
    }
}
