//! `score` over an extract: wide (one row per episode, every row out in
//! order, pass-through bytes untouched) or long (one code per row, one output
//! row per id in order of first appearance).

use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::io::{Read, Write};

use crate::code::Reading;
use crate::io::{write_field, Block, BlockReader, Fields, RecordScanner};
use crate::matcher::KeyHasher;
use crate::score::{read_age, Engine, Value};
use crate::Error;

/// How the extract is laid out.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Layout {
    /// One row per episode with several diagnosis columns.
    Wide,
    /// One code per row; rows grouped by an id column.
    Long,
}

/// Options of a scoring run over delimited text.
#[derive(Clone, Debug)]
pub struct ScoreConfig {
    /// Diagnosis columns: names and/or glob patterns.
    pub dx: Vec<String>,
    /// Splits a field holding several codes.
    pub dx_sep: Option<u8>,
    pub layout: Layout,
    /// Id column (long layout).
    pub id: Option<String>,
    /// Age column (whole years).
    pub age: Option<String>,
    /// Field delimiter (default `,`).
    pub delimiter: u8,
    /// Stop at the first warning (invalid code, unreadable age).
    pub strict: bool,
    /// Preferred block size in bytes.
    pub block_size: usize,
}

impl Default for ScoreConfig {
    fn default() -> Self {
        ScoreConfig {
            dx: Vec::new(),
            dx_sep: None,
            layout: Layout::Wide,
            id: None,
            age: None,
            delimiter: b',',
            strict: false,
            block_size: 1 << 20,
        }
    }
}

/// Distinct invalid values remembered for the summary.
const INVALID_VALUES_KEPT: usize = 10_000;

/// What a run read, wrote and could not read.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Summary {
    /// Data rows read (the header is not counted).
    pub rows_read: u64,
    /// Data rows written.
    pub rows_written: u64,
    /// Non-empty diagnosis values that were valid codes.
    pub codes_read: u64,
    /// Non-empty diagnosis values that were not ICD-10-shaped.
    pub invalid_codes: u64,
    /// Invalid values and their counts (at most 10,000 distinct kept).
    pub invalid_values: HashMap<Vec<u8>, u64>,
    /// Age fields that were empty.
    pub missing_ages: u64,
    /// Age fields that held something other than an age.
    pub unreadable_ages: u64,
    /// Units scored (episodes in wide, ids in long).
    pub units: u64,
}

impl Summary {
    /// Adds the counts of a run over later rows (e.g. another part of a
    /// frame scored on another thread). The distinct invalid values kept are
    /// those of `self`, then the new ones of `later`, up to the same limit.
    pub fn merge(&mut self, later: Summary) {
        self.rows_read += later.rows_read;
        self.rows_written += later.rows_written;
        self.codes_read += later.codes_read;
        self.invalid_codes += later.invalid_codes;
        self.missing_ages += later.missing_ages;
        self.unreadable_ages += later.unreadable_ages;
        self.units += later.units;
        for (v, n) in later.invalid_values {
            if let Some(c) = self.invalid_values.get_mut(&v) {
                *c += n;
            } else if self.invalid_values.len() < INVALID_VALUES_KEPT {
                self.invalid_values.insert(v, n);
            }
        }
    }

    pub(crate) fn invalid(&mut self, value: &[u8]) {
        self.invalid_codes += 1;
        let v = value.trim_ascii();
        if let Some(n) = self.invalid_values.get_mut(v) {
            *n += 1;
        } else if self.invalid_values.len() < INVALID_VALUES_KEPT {
            self.invalid_values.insert(v.to_vec(), 1);
        }
    }

    /// The most frequent invalid values, most frequent first (ties by value).
    pub fn top_invalid(&self, n: usize) -> Vec<(String, u64)> {
        let mut v: Vec<(String, u64)> = self
            .invalid_values
            .iter()
            .map(|(k, c)| (String::from_utf8_lossy(k).into_owned(), *c))
            .collect();
        v.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
        v.truncate(n);
        v
    }

    /// The summary as printed on standard error.
    pub fn report(&self) -> String {
        let mut s = format!(
            "morbus: {} rows read, {} rows written, {} units scored, {} codes read, {} invalid codes",
            self.rows_read, self.rows_written, self.units, self.codes_read, self.invalid_codes
        );
        if self.invalid_codes > 0 {
            let top: Vec<String> = self
                .top_invalid(5)
                .into_iter()
                .map(|(v, c)| format!("'{v}' ({c})"))
                .collect();
            s.push_str(&format!(
                "; most frequent invalid values: {}",
                top.join(", ")
            ));
        }
        if self.missing_ages + self.unreadable_ages > 0 {
            s.push_str(&format!(
                "; ages missing: {}, unreadable: {}",
                self.missing_ages, self.unreadable_ages
            ));
        }
        s
    }
}

/// The header of an extract and the columns a run uses.
pub struct Header {
    pub names: Vec<String>,
}

impl Header {
    pub fn from_fields(fields: &Fields<'_>) -> Header {
        let mut names: Vec<String> = (0..fields.len())
            .map(|i| String::from_utf8_lossy(fields.get(i)).trim().to_string())
            .collect();
        if let Some(first) = names.first_mut() {
            if let Some(rest) = first.strip_prefix('\u{feff}') {
                *first = rest.to_string();
            }
        }
        Header { names }
    }

    fn available(&self) -> String {
        self.names.join(", ")
    }

    /// One column by exact name.
    pub fn column(&self, name: &str, role: &str) -> Result<usize, Error> {
        let found: Vec<usize> = self
            .names
            .iter()
            .enumerate()
            .filter(|(_, n)| *n == name)
            .map(|(i, _)| i)
            .collect();
        match found.as_slice() {
            [i] => Ok(*i),
            [] => Err(Error::Usage(format!(
                "{role} column '{name}' not found; columns in the input: {}",
                self.available()
            ))),
            many => Err(Error::Usage(format!(
                "{role} column '{name}' appears {} times in the header; rename the duplicates",
                many.len()
            ))),
        }
    }

    /// Columns named by a list of names and globs, in the order given
    /// (header order within a glob), each once.
    pub fn columns(&self, items: &[String], role: &str) -> Result<Vec<usize>, Error> {
        let mut out = Vec::new();
        for item in items.iter().flat_map(|s| s.split(',')) {
            let item = item.trim();
            if item.is_empty() {
                continue;
            }
            if item.contains(['*', '?', '[']) {
                let pat = glob::Pattern::new(item)
                    .map_err(|e| Error::Usage(format!("bad column pattern '{item}': {e}")))?;
                let hits: Vec<usize> = self
                    .names
                    .iter()
                    .enumerate()
                    .filter(|(_, n)| pat.matches(n))
                    .map(|(i, _)| i)
                    .collect();
                if hits.is_empty() {
                    return Err(Error::Usage(format!(
                        "{role} pattern '{item}' matches no column; columns in the input: {}",
                        self.available()
                    )));
                }
                for h in hits {
                    if !out.contains(&h) {
                        out.push(h);
                    }
                }
            } else {
                let c = self.column(item, role)?;
                if !out.contains(&c) {
                    out.push(c);
                }
            }
        }
        if out.is_empty() {
            return Err(Error::Usage(format!("no {role} columns given")));
        }
        Ok(out)
    }
}

/// 1-based line of a record at `offset` in a block.
fn line_of(block: &Block, offset: usize) -> u64 {
    block.first_line + memchr::memchr_iter(b'\n', &block.data[..offset]).count() as u64
}

struct Plan {
    dx: Vec<usize>,
    age: Option<usize>,
    id: Option<usize>,
    ncols: usize,
    dx_names: Vec<String>,
    crlf: bool,
}

/// Reads every diagnosis value of a record into a unit.
#[inline]
fn read_dx(
    engine: &Engine,
    cfg: &ScoreConfig,
    plan: &Plan,
    fields: &Fields<'_>,
    bits: &mut [u64],
    summary: &mut Summary,
) -> Result<(), (usize, Vec<u8>)> {
    for (k, &c) in plan.dx.iter().enumerate() {
        let v = fields.get(c);
        if v.is_empty() {
            continue;
        }
        let mut one = |part: &[u8]| -> Result<(), (usize, Vec<u8>)> {
            match engine.add_raw(bits, part) {
                Reading::Valid(_) => summary.codes_read += 1,
                Reading::Empty => {}
                Reading::Invalid => {
                    if cfg.strict {
                        return Err((k, part.to_vec()));
                    }
                    summary.invalid(part);
                }
            }
            Ok(())
        };
        match cfg.dx_sep {
            Some(sep) => {
                for part in v.split(|&b| b == sep) {
                    one(part)?;
                }
            }
            None => one(v)?,
        }
    }
    Ok(())
}

fn read_age_field(
    cfg: &ScoreConfig,
    plan: &Plan,
    fields: &Fields<'_>,
    summary: &mut Summary,
) -> Result<Option<u32>, Vec<u8>> {
    let Some(c) = plan.age else {
        return Ok(None);
    };
    let raw = fields.get(c);
    match read_age(raw) {
        Some(a) => Ok(Some(a)),
        None => {
            if raw.trim_ascii().is_empty() {
                summary.missing_ages += 1;
            } else {
                if cfg.strict {
                    return Err(raw.to_vec());
                }
                summary.unreadable_ages += 1;
            }
            Ok(None)
        }
    }
}

pub(crate) fn check_collisions(
    header: &Header,
    engine: &Engine,
    keep: &[usize],
) -> Result<(), Error> {
    for c in engine.columns() {
        if keep.iter().any(|&i| header.names[i] == c.name) {
            return Err(Error::Usage(format!(
                "output column '{}' already exists in the input; rename that input column",
                c.name
            )));
        }
    }
    Ok(())
}

/// Scores an extract read from `input`, writing the enriched extract to
/// `output`.
pub fn score_stream(
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
    let mut long = LongState::default();
    let d = cfg.delimiter;
    let write_err = |e| Error::io("cannot write output", e);

    while let Some(block) = blocks
        .next_block()
        .map_err(|e| Error::io("cannot read input", e))?
    {
        out.clear();
        scanner.scan(&block.data, block.last, |rec| {
            let Some(p) = plan.as_ref() else {
                let header = Header::from_fields(&rec.fields);
                let dx = header.columns(&cfg.dx, "diagnosis")?;
                let age = cfg
                    .age
                    .as_deref()
                    .map(|a| header.column(a, "age"))
                    .transpose()?;
                let id = match cfg.layout {
                    Layout::Long => {
                        let name = cfg.id.as_deref().ok_or_else(|| {
                            Error::Usage("--layout long needs --id COLUMN".into())
                        })?;
                        Some(header.column(name, "id")?)
                    }
                    Layout::Wide => None,
                };
                match cfg.layout {
                    Layout::Wide => {
                        let all: Vec<usize> = (0..header.names.len()).collect();
                        check_collisions(&header, engine, &all)?;
                        out.extend_from_slice(rec.raw);
                    }
                    Layout::Long => {
                        let idc = id.unwrap_or(0);
                        check_collisions(&header, engine, &[idc])?;
                        write_field(rec.fields.get(idc), d, &mut out);
                    }
                }
                for c in engine.columns() {
                    out.push(d);
                    write_field(c.name.as_bytes(), d, &mut out);
                }
                out.extend_from_slice(if rec.crlf { b"\r\n" } else { b"\n" });
                let dx_names = dx.iter().map(|&i| header.names[i].clone()).collect();
                plan = Some(Plan {
                    dx,
                    age,
                    id,
                    ncols: header.names.len(),
                    dx_names,
                    crlf: rec.crlf,
                });
                return Ok(());
            };
            summary.rows_read += 1;
            if rec.fields.len() != p.ncols {
                return Err(Error::data(
                    Some(line_of(&block, rec.offset)),
                    format!(
                        "record has {} fields but the header has {}",
                        rec.fields.len(),
                        p.ncols
                    ),
                ));
            }
            let strict_code = |(k, v): (usize, Vec<u8>)| Error::Strict {
                line: Some(line_of(&block, rec.offset)),
                message: format!(
                    "invalid code '{}' in column '{}'",
                    String::from_utf8_lossy(&v),
                    p.dx_names[k]
                ),
            };
            let strict_age = |v: Vec<u8>| Error::Strict {
                line: Some(line_of(&block, rec.offset)),
                message: format!("unreadable age '{}'", String::from_utf8_lossy(&v)),
            };
            match cfg.layout {
                Layout::Wide => {
                    unit.clear();
                    read_dx(engine, cfg, p, &rec.fields, &mut unit.bits, &mut summary)
                        .map_err(strict_code)?;
                    let age =
                        read_age_field(cfg, p, &rec.fields, &mut summary).map_err(strict_age)?;
                    engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
                    engine.values(&unit.bits, age, &mut values);
                    out.extend_from_slice(rec.raw);
                    engine.write_values(&values, d, &mut out);
                    out.extend_from_slice(if p.crlf { b"\r\n" } else { b"\n" });
                    summary.rows_written += 1;
                    summary.units += 1;
                }
                Layout::Long => {
                    let id = rec.fields.get(p.id.unwrap_or(0));
                    let u = long.unit(id, engine.words());
                    let words = engine.words();
                    let bits = &mut long.bits[u * words..(u + 1) * words];
                    read_dx(engine, cfg, p, &rec.fields, bits, &mut summary)
                        .map_err(strict_code)?;
                    if p.age.is_some() {
                        let age = read_age_field(cfg, p, &rec.fields, &mut summary)
                            .map_err(strict_age)?;
                        if long.ages[u].is_none() {
                            long.ages[u] = age;
                        }
                    }
                }
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
struct LongState {
    index: HashMap<Box<[u8]>, usize, BuildHasherDefault<KeyHasher>>,
    ids: Vec<Box<[u8]>>,
    bits: Vec<u64>,
    ages: Vec<Option<u32>>,
}

impl LongState {
    fn unit(&mut self, id: &[u8], words: usize) -> usize {
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
