//! The practical floor for scoring: read every record of a file and write it
//! back unchanged, single-threaded, with the libraries morbus uses:
//!
//! - a CSV file with the `csv` crate (built on the same `csv-core` parser);
//! - a Parquet file (recognised by its magic bytes) with the `parquet`
//!   crate's Arrow reader and writer, with the writer settings of morbus.
//!
//! `rewrite --typed-parquet INPUT.csv OUTPUT.parquet` makes the Parquet
//! extracts of the benchmarks: the CSV with column types inferred by
//! `arrow-csv` (dates as dates, whole numbers as integers), as a pipeline
//! that wrote Parquet would hold them.
//!
//! Usage: rewrite [--typed-parquet] INPUT OUTPUT

use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Seek};
use std::process::ExitCode;
use std::sync::Arc;

use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ArrowWriter;

type Result<T> = std::result::Result<T, Box<dyn std::error::Error>>;

fn rewrite_csv(input: File, output: &str) -> Result<u64> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(input);
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
}

/// A Parquet writer with the settings morbus writes with.
fn parquet_writer(
    output: &str,
    schema: arrow_schema::SchemaRef,
) -> Result<ArrowWriter<BufWriter<File>>> {
    Ok(ArrowWriter::try_new(
        BufWriter::with_capacity(1 << 17, File::create(output)?),
        schema,
        Some(morbus::io::parquet::writer_properties()),
    )?)
}

fn rewrite_parquet(input: File, output: &str) -> Result<u64> {
    let builder = ParquetRecordBatchReaderBuilder::try_new(input)?.with_batch_size(8192);
    let mut writer = parquet_writer(output, builder.schema().clone())?;
    let mut n = 0u64;
    for batch in builder.build()? {
        let batch = batch?;
        n += batch.num_rows() as u64;
        writer.write(&batch)?;
    }
    writer.close()?;
    Ok(n)
}

fn typed_parquet(input: &str, output: &str) -> Result<u64> {
    let format = arrow_csv::reader::Format::default().with_header(true);
    let mut f = File::open(input)?;
    let (schema, _) = format.infer_schema(BufReader::new(&mut f), Some(100_000))?;
    f.rewind()?;
    let schema = Arc::new(schema);
    let reader = arrow_csv::ReaderBuilder::new(schema.clone())
        .with_format(format)
        .with_batch_size(65_536)
        .build(BufReader::new(f))?;
    let mut writer = parquet_writer(output, schema)?;
    let mut n = 0u64;
    for batch in reader {
        let batch = batch?;
        n += batch.num_rows() as u64;
        writer.write(&batch)?;
    }
    writer.close()?;
    Ok(n)
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let run = || -> Result<u64> {
        match args.as_slice() {
            [flag, input, output] if flag == "--typed-parquet" => typed_parquet(input, output),
            [input, output] => {
                let mut f = File::open(input)?;
                let mut magic = [0u8; 4];
                let parquet = f.read_exact(&mut magic).is_ok() && &magic == b"PAR1";
                f.rewind()?;
                if parquet {
                    rewrite_parquet(f, output)
                } else {
                    rewrite_csv(f, output)
                }
            }
            _ => Err("usage: rewrite [--typed-parquet] INPUT OUTPUT".into()),
        }
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
