//! Scoring without lookback. Wide: one block at a time, constant memory, each
//! record's raw bytes out unchanged with the score columns appended. Long:
//! code rows grouped by id, one output row per id in order of first
//! appearance.

use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::io::{Read, Write};

use super::parallel::run_blocks;
use super::{
    check_collisions, end_header, end_row, Exclusion, Layout, Plan, Progress, ScoreConfig, Summary,
};
use crate::io::{write_field, Block, BlockReader, RecordScanner};
use crate::matcher::KeyHasher;
use crate::score::{Engine, Value};
use crate::Error;

pub(super) fn score_plain(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Read + Send,
    output: &mut dyn Write,
    progress: &mut dyn FnMut(Progress),
) -> Result<Summary, Error> {
    match cfg.layout {
        Layout::Wide => score_wide_parallel(engine, cfg, input, output, progress),
        Layout::Long => score_long(engine, cfg, input, output),
    }
}

/// Long layout: code rows grouped by id, one output row per id in order of
/// first appearance.
fn score_long(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Read,
    output: &mut dyn Write,
) -> Result<Summary, Error> {
    let mut blocks = BlockReader::new(input, cfg.delimiter, cfg.block_size);
    let mut scanner = RecordScanner::new(cfg.delimiter);
    let mut summary = Summary::default();
    let mut plan: Option<Plan> = None;
    let mut long = LongUnits::default();
    let words = engine.words();
    let d = cfg.delimiter;
    let write_err = |e| Error::io("cannot write output", e);
    let mut out = Vec::new();

    while let Some(block) = blocks
        .next_block()
        .map_err(|e| Error::io("cannot read input", e))?
    {
        scanner.scan_block(&block, |rec| -> Result<(), Error> {
            let Some(p) = plan.as_ref() else {
                let p = Plan::from_header(cfg, &block, &rec)?;
                summary.dx_columns = p.dx_names();
                let idc = p.id.unwrap_or(0);
                check_collisions(&[p.header.names[idc].as_str()], engine)?;
                write_field(rec.fields.get(idc), d, &mut out);
                for c in engine.columns() {
                    out.push(d);
                    write_field(c.name.as_bytes(), d, &mut out);
                }
                end_header(
                    cfg.output_form,
                    if rec.crlf { b"\r\n" } else { b"\n" },
                    &mut out,
                    0,
                    crate::rows::Keys::Text,
                );
                plan = Some(p);
                return Ok(());
            };
            summary.rows_read += 1;
            p.check_width(&block, &rec)?;
            let id = rec.fields.get(p.id.unwrap_or(0));
            if id.trim_ascii().is_empty() {
                if cfg.strict {
                    return Err(p.missing_id(super::line_of(&block, rec.offset)));
                }
                summary.missing_ids += 1;
            }
            let u = long.unit(id, words);
            let age = p
                .read_age(cfg, &rec.fields, &mut summary)
                .map_err(|i| p.issue(i, &block, &rec))?;
            if let Some((first, a)) = super::keep_first(&mut long.ages[u], age) {
                let message = super::disagreement("age", a, first);
                if cfg.strict {
                    return Err(Error::Strict {
                        line: Some(super::line_of(&block, rec.offset)),
                        message,
                    });
                }
                summary.count_disagreeing(&mut long.disagrees[u]);
            }
            let bits = &mut long.bits[u * words..(u + 1) * words];
            let mut excluded = (0u64, 0u64);
            p.read_codes(cfg, &rec.fields, &mut summary, |_, code, excl| match excl {
                None => engine.add_code(bits, &code),
                Some(Exclusion::Primary) => excluded.0 += 1,
                Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
            })
            .map_err(|i| p.issue(i, &block, &rec))?;
            summary.excluded_primary += excluded.0;
            summary.excluded_not_on_admission += excluded.1;
            Ok(())
        })?;
    }
    let Some(p) = plan else {
        return Err(Error::data(
            None,
            "the input is empty: expected a header line naming the columns",
        ));
    };
    let mut scratch = vec![0u64; words];
    let mut values: Vec<Value> = Vec::with_capacity(engine.columns().len());
    for (u, id) in long.ids.iter().enumerate() {
        let bits = &mut long.bits[u * words..(u + 1) * words];
        engine.apply_hierarchy(bits, &mut scratch);
        engine.values(bits, long.ages[u], &mut values);
        let start = out.len();
        write_field(id, d, &mut out);
        let eol: &[u8] = if p.crlf { b"\r\n" } else { b"\n" };
        end_row(
            engine,
            cfg.output_form,
            (d, eol),
            &values,
            true,
            &mut out,
            start,
        );
        summary.rows_written += 1;
        summary.units += 1;
        if out.len() > cfg.block_size {
            output.write_all(&out).map_err(write_err)?;
            out.clear();
        }
    }
    output.write_all(&out).map_err(write_err)?;
    output.flush().map_err(write_err)?;
    Ok(summary)
}

/// Units of a long-layout run, in order of first appearance.
#[derive(Default)]
pub(super) struct LongUnits {
    index: HashMap<Box<[u8]>, usize, BuildHasherDefault<KeyHasher>>,
    pub ids: Vec<Box<[u8]>>,
    pub bits: Vec<u64>,
    pub ages: Vec<Option<u32>>,
    /// Whether a later row gave another age than the first readable one.
    pub disagrees: Vec<bool>,
}

impl LongUnits {
    pub fn unit(&mut self, id: &[u8], words: usize) -> usize {
        if let Some(&u) = self.index.get(id) {
            return u;
        }
        let u = self.ids.len();
        let key: Box<[u8]> = id.into();
        self.index.insert(key.clone(), u);
        self.ids.push(key);
        self.bits.resize(self.bits.len() + words, 0);
        self.ages.push(None);
        self.disagrees.push(false);
        u
    }
}

/// Scores the data records of one block (from byte `start`) into `out`.
fn score_wide_block(
    engine: &Engine,
    cfg: &ScoreConfig,
    p: &Plan,
    block: &Block,
    start: usize,
    scanner: &mut RecordScanner,
    out: &mut Vec<u8>,
) -> (Summary, Option<Error>) {
    let mut summary = Summary::default();
    let mut unit = engine.unit();
    let mut values: Vec<Value> = Vec::with_capacity(engine.columns().len());
    let d = cfg.delimiter;
    let eol: &[u8] = if p.crlf { b"\r\n" } else { b"\n" };
    let r = scanner.scan_from(&block.data, start, block.last, |rec| -> Result<(), Error> {
        summary.rows_read += 1;
        p.check_width(block, &rec)?;
        unit.clear();
        let bits = &mut unit.bits;
        let mut excluded = (0u64, 0u64);
        p.read_codes(cfg, &rec.fields, &mut summary, |_, code, excl| match excl {
            None => engine.add_code(bits, &code),
            Some(Exclusion::Primary) => excluded.0 += 1,
            Some(Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
        })
        .map_err(|i| p.issue(i, block, &rec))?;
        summary.excluded_primary += excluded.0;
        summary.excluded_not_on_admission += excluded.1;
        let age = p
            .read_age(cfg, &rec.fields, &mut summary)
            .map_err(|i| p.issue(i, block, &rec))?;
        engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
        engine.values(&unit.bits, age, &mut values);
        let start = out.len();
        out.extend_from_slice(rec.raw);
        end_row(engine, cfg.output_form, (d, eol), &values, true, out, start);
        summary.rows_written += 1;
        summary.units += 1;
        Ok(())
    });
    (summary, r.err())
}

/// Wide scoring on every core: a reader thread cuts blocks, workers score
/// them, and the calling thread writes their output in input order.
fn score_wide_parallel(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Read + Send,
    output: &mut dyn Write,
    progress: &mut dyn FnMut(Progress),
) -> Result<Summary, Error> {
    let write_err = |e| Error::io("cannot write output", e);
    let mut summary = Summary::default();
    let mut header_written = false;
    let write_header = |h: &(Plan, Vec<u8>), out: &mut dyn Write| -> Result<(), Error> {
        out.write_all(&h.1).map_err(write_err)
    };
    let head = run_blocks(
        cfg,
        input,
        |block, rec| {
            let p = Plan::from_header(cfg, block, rec)?;
            let names: Vec<&str> = p.header.names.iter().map(String::as_str).collect();
            check_collisions(&names, engine)?;
            let mut header_out = rec.raw.to_vec();
            for c in engine.columns() {
                header_out.push(cfg.delimiter);
                write_field(c.name.as_bytes(), cfg.delimiter, &mut header_out);
            }
            let eol: &[u8] = if rec.crlf { b"\r\n" } else { b"\n" };
            end_header(
                cfg.output_form,
                eol,
                &mut header_out,
                0,
                crate::rows::Keys::Text,
            );
            Ok((p, header_out))
        },
        |h, block, start, scanner| {
            let mut out = Vec::with_capacity(block.data.len() + block.data.len() / 2);
            let (s, err) = score_wide_block(engine, cfg, &h.0, block, start, scanner, &mut out);
            (out, s, err)
        },
        |h, (out, s, err): Scored, mut p| {
            if !header_written {
                write_header(h, output)?;
                header_written = true;
            }
            output.write_all(&out).map_err(write_err)?;
            summary.merge(s);
            p.rows = summary.rows_read;
            progress(p);
            err.map_or(Ok(()), Err)
        },
    )?;
    if !header_written {
        write_header(&head, output)?;
    }
    summary.dx_columns = head.0.dx_names();
    output.flush().map_err(write_err)?;
    Ok(summary)
}

/// A scored block: its output up to the first failing record, its counts,
/// and the failure if any.
type Scored = (Vec<u8>, Summary, Option<Error>);
