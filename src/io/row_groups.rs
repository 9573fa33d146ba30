//! Parquet row groups encoded on several threads and written in order.
//!
//! Encoding (dictionary building, page compression) is most of what writing
//! Parquet costs, and the row groups of a file are encoded independently.
//! [`GroupWriter`] cuts the record batches it is given into row groups of
//! the properties' row count (the same cuts the parquet crate's own
//! `ArrowWriter` makes), encodes up to `threads` of them at once, each on a
//! thread of its own, and appends their column chunks to the file in order.
//! The file is the one `ArrowWriter` would write with the same properties,
//! byte for byte (its Arrow schema included in the footer).
//!
//! Memory: the rows of the row group being gathered, and of those being
//! encoded: at most `threads` of them, and no more than `budget` bytes of
//! rows (one row group is always let through, whatever its size).
//!
//! [`CopyWriter`] writes a Parquet input's rows with columns added after
//! its own: the input's column chunks are copied into the output as they
//! are encoded in the input (neither decoded nor encoded again), row group
//! for row group, and only the added columns are encoded.

use std::collections::VecDeque;
use std::io::Write;
use std::thread::JoinHandle;

use arrow_array::RecordBatch;
use arrow_schema::Schema;
use arrow_schema::SchemaRef;
use parquet::arrow::arrow_writer::{
    compute_leaves, ArrowColumnChunk, ArrowColumnWriter, ArrowRowGroupWriterFactory,
};
use parquet::arrow::{ArrowSchemaConverter, ArrowWriter};
use parquet::column::writer::ColumnCloseResult;
use parquet::errors::ParquetError;
use parquet::file::metadata::ParquetMetaData;
use parquet::file::properties::WriterProperties;
use parquet::file::reader::ChunkReader;
use parquet::file::writer::SerializedFileWriter;
use std::sync::Arc;

/// A row group being encoded, and the bytes its rows hold.
type Encoded = (
    JoinHandle<Result<Vec<ArrowColumnChunk>, ParquetError>>,
    usize,
);

/// Writes record batches as Parquet, encoding row groups on up to
/// `threads` threads (see the module documentation).
pub(crate) struct GroupWriter<W: Write + Send> {
    file: SerializedFileWriter<W>,
    factory: ArrowRowGroupWriterFactory,
    schema: SchemaRef,
    /// Rows per row group (`None`: one row group for everything).
    group_rows: Option<usize>,
    /// The rows of the row group being gathered.
    gathered: Vec<RecordBatch>,
    gathered_rows: usize,
    /// Row groups being encoded, in file order.
    encoding: Encoding,
    /// Row groups handed to an encoder so far.
    started: usize,
    threads: usize,
    budget: usize,
}

impl<W: Write + Send> GroupWriter<W> {
    /// A writer of batches of `schema` to `out` with `props`, encoding at
    /// most `threads` row groups holding at most `budget` bytes of rows at
    /// once.
    pub(crate) fn try_new(
        out: W,
        schema: SchemaRef,
        props: WriterProperties,
        (threads, budget): (usize, usize),
    ) -> Result<Self, ParquetError> {
        let group_rows = props.max_row_group_row_count();
        // `ArrowWriter` sets up the file (its schema, and the Arrow schema
        // kept in the footer); its row groups are then made here.
        let (file, factory) =
            ArrowWriter::try_new(out, schema.clone(), Some(props))?.into_serialized_writer()?;
        Ok(GroupWriter {
            file,
            factory,
            schema,
            group_rows,
            gathered: Vec::new(),
            gathered_rows: 0,
            encoding: Encoding(VecDeque::new()),
            started: 0,
            threads: threads.max(1),
            budget,
        })
    }

    /// Takes `batch` (of the writer's schema); full row groups go to be
    /// encoded.
    pub(crate) fn write(&mut self, batch: RecordBatch) -> Result<(), ParquetError> {
        let mut rest = batch;
        while rest.num_rows() > 0 {
            let room = self
                .group_rows
                .map_or(usize::MAX, |g| g - self.gathered_rows);
            let take = rest.num_rows().min(room);
            self.gathered.push(rest.slice(0, take));
            self.gathered_rows += take;
            rest = rest.slice(take, rest.num_rows() - take);
            if Some(self.gathered_rows) == self.group_rows {
                self.encode_gathered()?;
            }
        }
        Ok(())
    }

    /// Encodes the rows gathered so far as a row group, on a thread of its
    /// own; first writes the oldest row groups being encoded while `threads`
    /// are busy or their rows and these would be over the budget.
    fn encode_gathered(&mut self) -> Result<(), ParquetError> {
        let bytes: usize = self
            .gathered
            .iter()
            .map(RecordBatch::get_array_memory_size)
            .sum();
        loop {
            let held: usize = self.encoding.0.iter().map(|e| e.1).sum();
            let full = self.encoding.0.len() >= self.threads || held + bytes > self.budget;
            if self.encoding.0.is_empty() || !full {
                break;
            }
            self.write_oldest()?;
        }
        let writers = self.factory.create_column_writers(self.started)?;
        self.started += 1;
        let batches = std::mem::take(&mut self.gathered);
        self.gathered_rows = 0;
        let schema = self.schema.clone();
        let handle = std::thread::spawn(move || encode(&schema, writers, &batches));
        self.encoding.0.push_back((handle, bytes));
        Ok(())
    }

    /// Waits for the oldest row group being encoded and appends it to the
    /// file.
    fn write_oldest(&mut self) -> Result<(), ParquetError> {
        let Some((handle, _)) = self.encoding.0.pop_front() else {
            return Ok(());
        };
        let chunks = handle.join().map_err(|_| {
            ParquetError::General("a thread encoding a row group failed".to_string())
        })??;
        let mut group = self.file.next_row_group()?;
        for chunk in chunks {
            chunk.append_to_row_group(&mut group)?;
        }
        group.close()?;
        Ok(())
    }

    /// Encodes and writes what is left, writes the footer and returns the
    /// output.
    pub(crate) fn finish(mut self) -> Result<W, ParquetError> {
        if self.gathered_rows > 0 {
            self.encode_gathered()?;
        }
        while !self.encoding.0.is_empty() {
            self.write_oldest()?;
        }
        self.file.into_inner()
    }
}

/// Row groups being encoded. Dropped with some left (a writer dropped
/// unfinished, as by a failed run), it waits for their threads; nothing more
/// is written, so the file has no footer.
struct Encoding(VecDeque<Encoded>);

impl Drop for Encoding {
    fn drop(&mut self) {
        for (handle, _) in self.0.drain(..) {
            let _ = handle.join();
        }
    }
}

/// One row group's column chunks: `batches` through `writers`.
fn encode(
    schema: &SchemaRef,
    mut writers: Vec<ArrowColumnWriter>,
    batches: &[RecordBatch],
) -> Result<Vec<ArrowColumnChunk>, ParquetError> {
    for batch in batches {
        write_leaves(schema, &mut writers, batch)?;
    }
    writers.into_iter().map(ArrowColumnWriter::close).collect()
}

/// The leaf columns of `batch` (of `schema`) through `writers`, in order.
fn write_leaves(
    schema: &SchemaRef,
    writers: &mut [ArrowColumnWriter],
    batch: &RecordBatch,
) -> Result<(), ParquetError> {
    let mut leaves_to = writers.iter_mut();
    for (field, column) in schema.fields().iter().zip(batch.columns()) {
        for leaf in compute_leaves(field, column)? {
            let writer = leaves_to.next().ok_or_else(|| {
                ParquetError::General("more leaf columns than writers".to_string())
            })?;
            writer.write(&leaf)?;
        }
    }
    Ok(())
}

/// Writes the rows of a Parquet input with columns added after the input's
/// own: each row group of the output is the input's row group, its columns
/// copied as they are encoded in the input (encodings, compression, pages
/// and statistics kept), followed by the added columns encoded from the
/// batches given, which must hold exactly the input's rows in order.
pub(crate) struct CopyWriter<W: Write + Send, R: ChunkReader> {
    file: SerializedFileWriter<W>,
    factory: ArrowRowGroupWriterFactory,
    input: R,
    meta: Arc<ParquetMetaData>,
    /// The schema of the added columns (the batches given).
    added: SchemaRef,
    /// The input's row group being written, and its rows still to come.
    group: usize,
    left: usize,
    /// The added columns' writers for that row group.
    writers: Option<Vec<ArrowColumnWriter>>,
}

impl<W: Write + Send, R: ChunkReader> CopyWriter<W, R> {
    /// A writer of `input` (its metadata `meta`, read as Arrow with the
    /// schema `schema`) followed by the columns `added`. Gives `out` back
    /// when the input's columns cannot be copied as they are: when the
    /// output's Parquet schema would describe them otherwise than the input
    /// does (the types the input was written with are not the ones its
    /// Arrow schema is written with), or a column chunk lives in another
    /// file.
    pub(crate) fn try_new(
        out: W,
        (input, meta, schema): (R, Arc<ParquetMetaData>, &Schema),
        added: SchemaRef,
        props: WriterProperties,
    ) -> Result<Result<Self, W>, ParquetError> {
        let mut fields: Vec<_> = schema.fields().iter().cloned().collect();
        fields.extend(added.fields().iter().cloned());
        let full = Arc::new(Schema::new(fields));
        let descr = ArrowSchemaConverter::new()
            .with_coerce_types(props.coerce_types())
            .convert(&full)?;
        let theirs = meta.file_metadata().schema_descr();
        let copied = theirs.num_columns();
        let same = descr.num_columns() >= copied
            && (0..copied).all(|i| descr.column(i) == theirs.column(i))
            && meta
                .row_groups()
                .iter()
                .all(|g| g.columns().iter().all(|c| c.file_path().is_none()));
        if !same {
            return Ok(Err(out));
        }
        let (file, factory) =
            ArrowWriter::try_new(out, full, Some(props))?.into_serialized_writer()?;
        let left = meta
            .row_groups()
            .first()
            .map_or(0, |g| g.num_rows() as usize);
        Ok(Ok(CopyWriter {
            file,
            factory,
            input,
            meta,
            added,
            group: 0,
            left,
            writers: None,
        }))
    }

    /// Takes the added columns of the next rows.
    pub(crate) fn write(&mut self, batch: RecordBatch) -> Result<(), ParquetError> {
        let mut rest = batch;
        while rest.num_rows() > 0 {
            self.write_full_groups()?;
            if self.group >= self.meta.num_row_groups() {
                return Err(ParquetError::General(
                    "the output has more rows than the input".to_string(),
                ));
            }
            let take = rest.num_rows().min(self.left);
            let part = rest.slice(0, take);
            let added = self.added.clone();
            write_leaves(&added, self.writers()?, &part)?;
            self.left -= take;
            rest = rest.slice(take, rest.num_rows() - take);
        }
        Ok(())
    }

    /// The added columns' writers of the current row group.
    fn writers(&mut self) -> Result<&mut Vec<ArrowColumnWriter>, ParquetError> {
        if self.writers.is_none() {
            let mut all = self.factory.create_column_writers(self.group)?;
            let copied = self.meta.file_metadata().schema_descr().num_columns();
            self.writers = Some(all.split_off(copied));
        }
        Ok(self.writers.as_mut().expect("writers"))
    }

    /// Writes every row group whose rows have all been given.
    fn write_full_groups(&mut self) -> Result<(), ParquetError> {
        while self.left == 0 && self.group < self.meta.num_row_groups() {
            let writers = match self.writers.take() {
                Some(w) => w,
                None => {
                    self.writers()?;
                    self.writers.take().expect("writers")
                }
            };
            let added = writers
                .into_iter()
                .map(ArrowColumnWriter::close)
                .collect::<Result<Vec<_>, _>>()?;
            let theirs = self.meta.row_group(self.group);
            let mut group = self.file.next_row_group()?;
            for column in theirs.columns() {
                let close = ColumnCloseResult {
                    bytes_written: column.compressed_size() as u64,
                    rows_written: theirs.num_rows() as u64,
                    metadata: column.clone(),
                    bloom_filter: None,
                    column_index: None,
                    offset_index: None,
                };
                group.append_column(&self.input, close)?;
            }
            for chunk in added {
                chunk.append_to_row_group(&mut group)?;
            }
            group.close()?;
            self.group += 1;
            self.left = self
                .meta
                .row_groups()
                .get(self.group)
                .map_or(0, |g| g.num_rows() as usize);
        }
        Ok(())
    }

    /// Writes the last row groups and the footer and returns the output;
    /// an error when the rows given were fewer than the input's.
    pub(crate) fn finish(mut self) -> Result<W, ParquetError> {
        self.write_full_groups()?;
        if self.group < self.meta.num_row_groups() {
            return Err(ParquetError::General(
                "the output has fewer rows than the input".to_string(),
            ));
        }
        self.file.into_inner()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use arrow_array::{ArrayRef, Int64Array, StringArray};
    use arrow_schema::{DataType, Field, Schema};
    use bytes::Bytes;
    use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
    use std::sync::Arc;

    fn batch(schema: &SchemaRef, from: i64, n: usize) -> RecordBatch {
        let ids: ArrayRef = Arc::new(Int64Array::from_iter(
            (0..n as i64).map(|i| (i % 7 != 3).then_some(from + i)),
        ));
        let text: ArrayRef = Arc::new(StringArray::from_iter(
            (0..n as i64).map(|i| (i % 5 != 1).then(|| format!("I{}", (from + i) % 97))),
        ));
        RecordBatch::try_new(schema.clone(), vec![ids, text]).expect("a batch")
    }

    /// The file written by `ArrowWriter` from the same batches.
    fn reference(schema: &SchemaRef, batches: &[RecordBatch], props: WriterProperties) -> Vec<u8> {
        let mut w = ArrowWriter::try_new(Vec::new(), schema.clone(), Some(props)).expect("writer");
        for b in batches {
            w.write(b).expect("write");
        }
        w.into_inner().expect("footer")
    }

    fn read(file: Vec<u8>) -> (Vec<usize>, Vec<RecordBatch>) {
        let b = ParquetRecordBatchReaderBuilder::try_new(Bytes::from(file)).expect("a file");
        let groups = b
            .metadata()
            .row_groups()
            .iter()
            .map(|g| g.num_rows() as usize)
            .collect();
        (
            groups,
            b.build()
                .expect("a reader")
                .map(|r| r.expect("rows"))
                .collect(),
        )
    }

    #[test]
    fn row_groups_and_values_are_those_of_the_crates_own_writer() {
        let schema: SchemaRef = Arc::new(Schema::new(vec![
            Field::new("episode", DataType::Int64, true),
            Field::new("code", DataType::Utf8, true),
        ]));
        // Batch sizes that cut across row groups, fall on their ends, and
        // include empty batches; no rows at all.
        let sizes: [&[usize]; 5] = [&[], &[0], &[10], &[3, 7, 0, 25, 1, 64, 13], &[20, 20, 20]];
        for sizes in sizes {
            for group in [1, 4, 10, 20, 1000] {
                for (threads, budget) in [
                    (1, usize::MAX),
                    (2, usize::MAX),
                    (3, 0),
                    (8, 3000),
                    (8, usize::MAX),
                ] {
                    let mut from = 0i64;
                    let batches: Vec<RecordBatch> = sizes
                        .iter()
                        .map(|&n| {
                            let b = batch(&schema, from, n);
                            from += n as i64;
                            b
                        })
                        .collect();
                    let props = || {
                        WriterProperties::builder()
                            .set_max_row_group_row_count(Some(group))
                            .build()
                    };
                    let mut w = GroupWriter::try_new(
                        Vec::new(),
                        schema.clone(),
                        props(),
                        (threads, budget),
                    )
                    .expect("writer");
                    for b in &batches {
                        w.write(b.clone()).expect("write");
                    }
                    let ours = w.finish().expect("footer");
                    let theirs = reference(&schema, &batches, props());
                    let what = format!(
                        "sizes {sizes:?}, groups of {group}, {threads} threads, budget {budget}"
                    );
                    assert!(ours == theirs, "not the same bytes: {what}");
                    let (ours, theirs) = (read(ours), read(theirs));
                    assert_eq!(ours.0, theirs.0, "row groups: {what}");
                    let rows = |r: &(Vec<usize>, Vec<RecordBatch>)| {
                        arrow_select::concat::concat_batches(&schema, &r.1).expect("concat")
                    };
                    assert_eq!(rows(&ours), rows(&theirs), "values: {what}");
                    assert_eq!(rows(&ours).num_rows() as i64, from, "rows: {what}");
                }
            }
        }
    }

    #[test]
    fn an_unfinished_writer_leaves_no_footer() {
        let schema: SchemaRef = Arc::new(Schema::new(vec![
            Field::new("episode", DataType::Int64, true),
            Field::new("code", DataType::Utf8, true),
        ]));
        let out = Arc::new(std::sync::Mutex::new(Vec::new()));
        struct Shared(Arc<std::sync::Mutex<Vec<u8>>>);
        impl Write for Shared {
            fn write(&mut self, b: &[u8]) -> std::io::Result<usize> {
                self.0.lock().expect("lock").extend_from_slice(b);
                Ok(b.len())
            }
            fn flush(&mut self) -> std::io::Result<()> {
                Ok(())
            }
        }
        let props = WriterProperties::builder()
            .set_max_row_group_row_count(Some(5))
            .build();
        let mut w =
            GroupWriter::try_new(Shared(out.clone()), schema.clone(), props, (2, usize::MAX))
                .expect("writer");
        w.write(batch(&schema, 0, 23)).expect("write");
        drop(w);
        let bytes = out.lock().expect("lock").clone();
        assert!(ParquetRecordBatchReaderBuilder::try_new(Bytes::from(bytes)).is_err());
    }
}
