//! Scoring without lookback. Wide: one block at a time, constant memory, each
//! record's raw bytes out unchanged with the score columns appended. Long:
//! code rows grouped by id, one output row per id in order of first
//! appearance.

use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::io::{Read, Write};

use super::{check_collisions, Header, Layout, Plan, ScoreConfig, Summary};
use crate::io::{write_field, BlockReader, RecordScanner};
use crate::matcher::KeyHasher;
use crate::score::{Engine, Value};
use crate::Error;

pub(super) fn score_plain(
    engine: &Engine,
    cfg: &ScoreConfig,
    input: impl Read,
    output: &mut dyn Write,
) -> Result<Summary, Error> {
    let mut blocks = BlockReader::new(input, cfg.delimiter, cfg.block_size);
    let mut scanner = RecordScanner::new(cfg.delimiter);
    let mut summary = Summary::default();
    let mut plan: Option<Plan> = None;
    let mut out = Vec::with_capacity(cfg.block_size + cfg.block_size / 2);
    let mut unit = engine.unit();
    let mut values: Vec<Value> = Vec::with_capacity(engine.columns().len());
    let mut long = LongUnits::default();
    let d = cfg.delimiter;
    let write_err = |e| Error::io("cannot write output", e);

    while let Some(block) = blocks
        .next_block()
        .map_err(|e| Error::io("cannot read input", e))?
    {
        out.clear();
        scanner.scan(&block.data, block.last, |rec| -> Result<(), Error> {
            let Some(p) = plan.as_ref() else {
                let p = Plan::new(cfg, Header::from_fields(&rec.fields), rec.crlf)?;
                summary.dx_columns = p.dx_names();
                match cfg.layout {
                    Layout::Wide => {
                        let names: Vec<&str> = p.header.names.iter().map(String::as_str).collect();
                        check_collisions(&names, engine)?;
                        out.extend_from_slice(rec.raw);
                    }
                    Layout::Long => {
                        let idc = p.id.unwrap_or(0);
                        check_collisions(&[p.header.names[idc].as_str()], engine)?;
                        write_field(rec.fields.get(idc), d, &mut out);
                    }
                }
                for c in engine.columns() {
                    out.push(d);
                    write_field(c.name.as_bytes(), d, &mut out);
                }
                out.extend_from_slice(if rec.crlf { b"\r\n" } else { b"\n" });
                plan = Some(p);
                return Ok(());
            };
            summary.rows_read += 1;
            p.check_width(&block, &rec)?;
            let bits: &mut [u64] = match cfg.layout {
                Layout::Wide => {
                    unit.clear();
                    &mut unit.bits
                }
                Layout::Long => {
                    let u = long.unit(rec.fields.get(p.id.unwrap_or(0)), engine.words());
                    let w = engine.words();
                    if p.age.is_some() {
                        let age = p
                            .read_age(cfg, &rec.fields, &mut summary)
                            .map_err(|i| p.issue(i, &block, &rec))?;
                        if long.ages[u].is_none() {
                            long.ages[u] = age;
                        }
                    }
                    &mut long.bits[u * w..(u + 1) * w]
                }
            };
            let mut excluded = (0u64, 0u64);
            p.read_codes(cfg, &rec.fields, &mut summary, |_, code, excl| match excl {
                None => engine.add_code(bits, &code),
                Some(super::Exclusion::Primary) => excluded.0 += 1,
                Some(super::Exclusion::NotPresentOnAdmission) => excluded.1 += 1,
            })
            .map_err(|i| p.issue(i, &block, &rec))?;
            summary.excluded_primary += excluded.0;
            summary.excluded_not_on_admission += excluded.1;
            if cfg.layout == Layout::Wide {
                let age = p
                    .read_age(cfg, &rec.fields, &mut summary)
                    .map_err(|i| p.issue(i, &block, &rec))?;
                engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
                engine.values(&unit.bits, age, &mut values);
                out.extend_from_slice(rec.raw);
                engine.write_values(&values, d, &mut out);
                out.extend_from_slice(if p.crlf { b"\r\n" } else { b"\n" });
                summary.rows_written += 1;
                summary.units += 1;
            }
            Ok(())
        })?;
        output.write_all(&out).map_err(write_err)?;
    }
    let Some(p) = plan else {
        return Err(Error::data(
            None,
            "the input is empty: expected a header line naming the columns",
        ));
    };
    if cfg.layout == Layout::Long {
        let words = engine.words();
        let mut scratch = vec![0u64; words];
        out.clear();
        for (u, id) in long.ids.iter().enumerate() {
            let bits = &mut long.bits[u * words..(u + 1) * words];
            engine.apply_hierarchy(bits, &mut scratch);
            engine.values(bits, long.ages[u], &mut values);
            write_field(id, d, &mut out);
            engine.write_values(&values, d, &mut out);
            out.extend_from_slice(if p.crlf { b"\r\n" } else { b"\n" });
            summary.rows_written += 1;
            summary.units += 1;
            if out.len() > cfg.block_size {
                output.write_all(&out).map_err(write_err)?;
                out.clear();
            }
        }
        output.write_all(&out).map_err(write_err)?;
    }
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
        u
    }
}
