//! An extract opened for a run, whatever its format, and the output that
//! goes with it: what the front ends call instead of choosing between text
//! and Parquet themselves.
//!
//! - [`Extract::open`] opens the input: a delimited file's bytes (plain or
//!   gzip), or a Parquet file's [`parquet::Source`] (feature `parquet`),
//!   whose rows are only ever read typed: no text is made of them.
//! - [`Extract::open_output`] gives a text output, or a Parquet one typed
//!   for the table written ([`Table`]).
//! - [`Extract::score_plain`] scores a Parquet input without history from
//!   its record batches to a typed output; [`Extract::take_input`] gives
//!   the history reader a Parquet input's typed rows (or the text);
//!   [`Extract::joined_text`] is the text output of a wide history run over
//!   them.

use std::io::Read;
use std::path::Path;

use super::files::{open_input, open_output, Output};
use crate::pipeline::history::Input;
use crate::pipeline::ScoreConfig;
use crate::score::Engine;
use crate::Error;

#[cfg(feature = "parquet")]
use super::parquet::{self, Source};
#[cfg(feature = "parquet")]
use crate::pipeline::Layout;
#[cfg(feature = "parquet")]
use arrow_schema::SchemaRef;

/// The table a run writes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Table {
    /// `score`: the input's columns (wide) or id and episode (long), then
    /// the score columns.
    Scores,
    /// `explain`: id and episode, then the explanation's columns.
    Explain,
}

#[cfg(feature = "parquet")]
struct ParquetInput {
    source: Source,
    schema: SchemaRef,
    /// The columns decoded (`None`: all).
    columns: Option<Vec<usize>>,
    /// The columns the run reads values of, by position in the file (`None`:
    /// one of them is not in the file, and the run reports it).
    used: Option<Vec<usize>>,
}

/// An extract opened for a run.
pub struct Extract {
    reader: Box<dyn Read + Send>,
    /// Size of the text in bytes, when known (for a progress display).
    pub size: Option<u64>,
    /// Rows of the input, when known (a Parquet input's footer says).
    pub rows: Option<u64>,
    /// The input as named in messages.
    pub name: String,
    /// A Parquet input: where it is, its columns (the footer is read once
    /// here) and the columns read.
    #[cfg(feature = "parquet")]
    parquet: Option<ParquetInput>,
}

impl Extract {
    /// Opens `path` (`-` or `None`: standard input) for a run with `cfg`.
    /// For a Parquet input with `only_read`, only the columns the run reads
    /// (and `extra`, e.g. `compare`'s outcome) become text.
    pub fn open(
        path: Option<&Path>,
        cfg: &ScoreConfig,
        only_read: bool,
        extra: &[String],
    ) -> Result<Extract, Error> {
        let input = open_input(path)?;
        #[cfg(feature = "parquet")]
        if let Some(source) = input.parquet {
            let schema = source.schema()?;
            let names: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
            let used = parquet::read_columns(&names, cfg, extra);
            let columns = if only_read { used.clone() } else { None };
            // The footer's row count, for a progress display.
            let rows = Some(source.total_rows()?);
            return Ok(Extract {
                reader: Box::new(std::io::empty()),
                size: None,
                rows,
                name: input.name,
                parquet: Some(ParquetInput {
                    source,
                    schema,
                    columns,
                    used,
                }),
            });
        }
        let _ = (cfg, only_read, extra);
        Ok(Extract {
            reader: input.reader,
            size: if input.compressed { None } else { input.size },
            rows: None,
            name: input.name,
            #[cfg(feature = "parquet")]
            parquet: None,
        })
    }

    /// Scores a Parquet input without history, typed from its record
    /// batches to `output` (see [`parquet::score_plain`]): `None` for any
    /// other input or run.
    pub fn score_plain(
        &mut self,
        engine: &Engine,
        cfg: &ScoreConfig,
        output: &mut Output,
        progress: &mut dyn FnMut(crate::pipeline::Progress),
    ) -> Option<Result<crate::pipeline::Summary, Error>> {
        #[cfg(feature = "parquet")]
        if let Some(p) = self.parquet.as_ref() {
            if crate::pipeline::reads_history(cfg) {
                return None;
            }
            let out = match output.typed(cfg.delimiter) {
                Ok(o) => o,
                Err(e) => return Some(Err(e)),
            };
            return Some(parquet::score_plain(
                engine,
                cfg,
                p.source.clone(),
                &self.name,
                out,
                progress,
            ));
        }
        let _ = (engine, cfg, output, progress);
        None
    }

    /// The input for a run that reads it through the history reader
    /// (`explain`, `score` with a history): a
    /// Parquet input's typed rows ([`parquet::ParquetRows`]: no text is made
    /// of them), or the text (once; later calls give nothing).
    pub fn take_input(&mut self) -> Result<Input<'static>, Error> {
        #[cfg(feature = "parquet")]
        if let Some(p) = &self.parquet {
            let mut rows = parquet::ParquetRows::from_source(
                p.source.clone(),
                p.columns.as_deref(),
                &self.name,
            )?;
            // Every column decoded: only those the run reads are read (the
            // others, of any type, are the sink's to copy).
            if let (None, Some(u)) = (&p.columns, &p.used) {
                rows = rows.reading_only(u);
            }
            self.reader = Box::new(std::io::empty());
            return Ok(Input::Rows(Box::new(rows)));
        }
        Ok(Input::Text(std::mem::replace(
            &mut self.reader,
            Box::new(std::io::empty()),
        )))
    }

    /// For a history run in the wide layout over a Parquet input's typed
    /// rows with a text output: the writer that puts each input row,
    /// formatted from the file's record batches, in front of its scores
    /// ([`parquet::JoinedText`]); `None` for other inputs.
    #[cfg(feature = "parquet")]
    pub fn joined_text<'o>(
        &self,
        out: &'o mut dyn std::io::Write,
        delimiter: u8,
    ) -> Option<Result<parquet::JoinedText<'o>, Error>> {
        self.parquet
            .as_ref()
            .map(|p| parquet::JoinedText::new(out, p.source.clone(), delimiter))
    }

    /// Whether the input is a Parquet file.
    pub fn is_parquet(&self) -> bool {
        #[cfg(feature = "parquet")]
        return self.parquet.is_some();
        #[cfg(not(feature = "parquet"))]
        false
    }

    /// The output of a run writing `table` to `path` (`-` or `None`:
    /// standard output): text, or with `as_parquet` Parquet.
    pub fn open_output(
        &self,
        path: Option<&Path>,
        as_parquet: bool,
        table: Table,
        engine: &Engine,
        cfg: &ScoreConfig,
    ) -> Result<Output, Error> {
        if !as_parquet {
            return open_output(path);
        }
        self.parquet_output(path, table, engine, cfg)
    }

    #[cfg(feature = "parquet")]
    fn parquet_output(
        &self,
        path: Option<&Path>,
        table: Table,
        engine: &Engine,
        cfg: &ScoreConfig,
    ) -> Result<Output, Error> {
        let input = self.parquet.as_ref();
        let schema = input.map(|p| p.schema.as_ref());
        // A wide score's rows are the input's rows: its columns are copied,
        // by the run itself when it is typed from end to end (no history),
        // else by the sink from the input file.
        let typed = input.is_some() && !crate::pipeline::reads_history(cfg);
        let copies = table == Table::Scores && cfg.layout == Layout::Wide && !typed;
        let copied = input.filter(|_| copies).map(|p| p.source.clone());
        let columns = match table {
            Table::Scores => {
                if let Some(s) = schema.filter(|_| copies) {
                    // The pipeline sees only the columns it reads.
                    parquet::check_copied_names(s, engine)?;
                }
                parquet::OutputColumns::scores(engine, schema)
            }
            Table::Explain => parquet::OutputColumns::explain(engine, cfg, schema),
        };
        // Row groups are encoded on every core, their rows within an eighth
        // of --memory.
        let encoding = (
            crate::pipeline::parallel::threads(cfg),
            (cfg.memory / 8) as usize,
        );
        super::files::open_parquet_output(path, cfg.delimiter, columns, copied, encoding)
    }

    #[cfg(not(feature = "parquet"))]
    fn parquet_output(
        &self,
        _path: Option<&Path>,
        _table: Table,
        _engine: &Engine,
        _cfg: &ScoreConfig,
    ) -> Result<Output, Error> {
        Err(Error::Usage(
            "this build of morbus writes CSV only (build it with the `parquet` feature)".into(),
        ))
    }
}
