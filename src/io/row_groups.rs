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

use std::collections::VecDeque;
use std::io::Write;
use std::thread::JoinHandle;

use arrow_array::RecordBatch;
use arrow_schema::SchemaRef;
use parquet::arrow::arrow_writer::{
    compute_leaves, ArrowColumnChunk, ArrowColumnWriter, ArrowRowGroupWriterFactory,
};
use parquet::arrow::ArrowWriter;
use parquet::errors::ParquetError;
use parquet::file::properties::WriterProperties;
use parquet::file::writer::SerializedFileWriter;

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
        let mut leaves_to = writers.iter_mut();
        for (field, column) in schema.fields().iter().zip(batch.columns()) {
            for leaf in compute_leaves(field, column)? {
                let writer = leaves_to.next().ok_or_else(|| {
                    ParquetError::General("more leaf columns than writers".to_string())
                })?;
                writer.write(&leaf)?;
            }
        }
    }
    writers.into_iter().map(ArrowColumnWriter::close).collect()
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
