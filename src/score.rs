//! The scorer: which conditions a unit (an episode, a patient) has, after
//! hierarchies, and what each index specification makes of them.
//!
//! A unit's conditions are a bit set over the global condition ids of the
//! selected lists (see [`crate::matcher`]). The scorer never allocates per
//! code or per unit: callers keep one bit set per unit and reuse it.

use std::fmt;

use crate::code::{read_code, Code, Reading};
use crate::lists::{format_scaled, Catalogue, CodeList, SCALE};
use crate::matcher::Matcher;

/// `LIST[:WEIGHTING]`, e.g. `charlson:quan2011` or `hfrs`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct IndexSpec {
    pub list: String,
    /// `None`: the list's default weighting.
    pub weighting: Option<String>,
}

/// The indices scored when none are named.
pub const DEFAULT_INDICES: &str = "charlson:quan2011,elixhauser:vanwalraven2009,hfrs:gilbert2018";

impl IndexSpec {
    /// Parses a comma-separated list of specifications.
    ///
    /// ```
    /// let v = morbus::score::IndexSpec::parse_many("charlson:charlson1987, hfrs").unwrap();
    /// assert_eq!(v[0].weighting.as_deref(), Some("charlson1987"));
    /// assert_eq!(v[1].weighting, None);
    /// ```
    pub fn parse_many(text: &str) -> Result<Vec<IndexSpec>, ScoreError> {
        let mut out = Vec::new();
        for part in text.split(',') {
            let part = part.trim();
            if part.is_empty() {
                continue;
            }
            let (list, weighting) = match part.split_once(':') {
                Some((l, w)) => (l.trim(), Some(w.trim().to_string())),
                None => (part, None),
            };
            if list.is_empty() || weighting.as_deref() == Some("") {
                return Err(ScoreError::Usage(format!(
                    "index specification '{part}' must be LIST or LIST:WEIGHTING"
                )));
            }
            out.push(IndexSpec {
                list: list.to_string(),
                weighting,
            });
        }
        if out.is_empty() {
            return Err(ScoreError::Usage("no index specification given".into()));
        }
        Ok(out)
    }
}

impl fmt::Display for IndexSpec {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.weighting {
            Some(w) => write!(f, "{}:{w}", self.list),
            None => f.write_str(&self.list),
        }
    }
}

/// Errors of engine set-up.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ScoreError {
    /// A bad option or specification (the message says which and lists the
    /// valid choices).
    Usage(String),
}

impl fmt::Display for ScoreError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ScoreError::Usage(m) => f.write_str(m),
        }
    }
}

impl std::error::Error for ScoreError {}

/// What to compute besides the scores.
#[derive(Clone, Copy, Debug)]
pub struct ScoreOptions {
    /// Apply each list's hierarchy (default true).
    pub hierarchy: bool,
    /// Add a 0/1 column per condition.
    pub flags: bool,
    /// Add `_age` columns for lists with age points.
    pub age: bool,
}

impl Default for ScoreOptions {
    fn default() -> Self {
        ScoreOptions {
            hierarchy: true,
            flags: false,
            age: false,
        }
    }
}

/// What an output column holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ColumnKind {
    /// The score of specification `spec`.
    Score { spec: usize },
    /// Score plus age points (empty when age is unknown).
    ScoreWithAge { spec: usize },
    /// Name of the band the score falls in.
    Band { spec: usize },
    /// 0/1 flag of a condition (global condition id).
    Flag { list: usize, condition: usize },
}

/// One output column.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Column {
    pub name: String,
    pub kind: ColumnKind,
}

/// A list taking part in a run.
#[derive(Clone, Debug)]
pub struct SelectedList {
    pub list: CodeList,
    /// Global id of the list's first condition.
    pub offset: usize,
    /// Hierarchy pairs in global ids.
    hierarchy: Vec<(usize, usize)>,
}

/// A resolved index specification.
#[derive(Clone, Debug)]
pub struct SelectedSpec {
    /// Index into [`Engine::lists`].
    pub list: usize,
    /// Index into the list's weightings.
    pub weighting: usize,
    /// `<list>_<weighting>`.
    pub name: String,
}

/// The scoring engine for a set of index specifications.
#[derive(Clone, Debug)]
pub struct Engine {
    lists: Vec<SelectedList>,
    specs: Vec<SelectedSpec>,
    matcher: Matcher,
    columns: Vec<Column>,
    conditions: usize,
    words: usize,
    options: ScoreOptions,
}

/// The oldest age read, in whole years: a larger value is unreadable (an
/// entry error or an overflowing number, not an age). Common practice: the
/// oldest documented human lifespan is under 123 years.
pub const MAX_AGE: u32 = 130;

/// Age in whole years read from a field: `None` when empty or unreadable.
///
/// Accepts whole or decimal non-negative numbers up to [`MAX_AGE`] (130;
/// decimals are truncated: 79.9 is 79). The digits are read with checked
/// arithmetic, so a value past the range of any integer type is unreadable,
/// never wrapped.
///
/// ```
/// use morbus::score::read_age;
/// assert_eq!(read_age(b"79.9"), Some(79));
/// assert_eq!(read_age(b"130"), Some(130));
/// assert_eq!(read_age(b"131"), None);
/// assert_eq!(read_age(b"4294967366"), None); // 2^32 + 70, not 70
/// ```
pub fn read_age(raw: &[u8]) -> Option<u32> {
    let t = raw.trim_ascii();
    if t.is_empty() || t.len() > 12 {
        return None;
    }
    let (int, frac) = match t.iter().position(|&b| b == b'.') {
        Some(p) => (&t[..p], &t[p + 1..]),
        None => (t, &t[..0]),
    };
    if int.is_empty() || !int.iter().all(u8::is_ascii_digit) || !frac.iter().all(u8::is_ascii_digit)
    {
        return None;
    }
    let mut v: u32 = 0;
    for &b in int {
        v = v.checked_mul(10)?.checked_add((b - b'0') as u32)?;
    }
    (v <= MAX_AGE).then_some(v)
}

impl Engine {
    /// Resolves specifications against a catalogue and builds the matcher.
    pub fn new(
        catalogue: &Catalogue,
        specs: &[IndexSpec],
        options: ScoreOptions,
    ) -> Result<Engine, ScoreError> {
        let mut lists: Vec<SelectedList> = Vec::new();
        let mut selected = Vec::new();
        let mut offset = 0;
        for spec in specs {
            let Some(list) = catalogue.get(&spec.list) else {
                return Err(ScoreError::Usage(format!(
                    "unknown list '{}'; available lists: {}",
                    spec.list,
                    catalogue.names().join(", ")
                )));
            };
            let wname = spec
                .weighting
                .clone()
                .unwrap_or_else(|| list.default_weighting.clone());
            let Some(wi) = list.weightings.iter().position(|w| w.name == wname) else {
                let valid: Vec<&str> = list.weightings.iter().map(|w| w.name.as_str()).collect();
                return Err(ScoreError::Usage(format!(
                    "unknown weighting '{wname}' for list '{}'; its weightings: {}",
                    list.name,
                    valid.join(", ")
                )));
            };
            let li = match lists.iter().position(|l| l.list.name == list.name) {
                Some(i) => i,
                None => {
                    let hierarchy = list
                        .hierarchy
                        .iter()
                        .map(|h| (offset + h.superior, offset + h.inferior))
                        .collect();
                    lists.push(SelectedList {
                        list: list.clone(),
                        offset,
                        hierarchy,
                    });
                    offset += list.conditions.len();
                    lists.len() - 1
                }
            };
            let name = format!("{}_{}", list.name, wname);
            if selected.iter().any(|s: &SelectedSpec| s.name == name) {
                return Err(ScoreError::Usage(format!(
                    "index '{}:{wname}' is named twice",
                    list.name
                )));
            }
            selected.push(SelectedSpec {
                list: li,
                weighting: wi,
                name,
            });
        }
        if offset > u16::MAX as usize {
            return Err(ScoreError::Usage(format!(
                "the selected lists have {offset} conditions; at most {} are supported",
                u16::MAX
            )));
        }
        let refs: Vec<&CodeList> = lists.iter().map(|l| &l.list).collect();
        let matcher = Matcher::new(&refs);
        let mut columns = Vec::new();
        for (si, s) in selected.iter().enumerate() {
            let l = &lists[s.list].list;
            columns.push(Column {
                name: s.name.clone(),
                kind: ColumnKind::Score { spec: si },
            });
            if options.age && !l.age_points.is_empty() {
                columns.push(Column {
                    name: format!("{}_age", s.name),
                    kind: ColumnKind::ScoreWithAge { spec: si },
                });
            }
            if !l.weightings[s.weighting].bands.is_empty() {
                columns.push(Column {
                    name: format!("{}_band", s.name),
                    kind: ColumnKind::Band { spec: si },
                });
            }
        }
        if options.flags {
            for (li, l) in lists.iter().enumerate() {
                for (ci, c) in l.list.conditions.iter().enumerate() {
                    columns.push(Column {
                        name: format!("{}_{}", l.list.name, c.key),
                        kind: ColumnKind::Flag {
                            list: li,
                            condition: l.offset + ci,
                        },
                    });
                }
            }
        }
        Ok(Engine {
            lists,
            specs: selected,
            matcher,
            columns,
            conditions: offset,
            words: offset.div_ceil(64).max(1),
            options,
        })
    }

    /// The output columns, in order.
    pub fn columns(&self) -> &[Column] {
        &self.columns
    }

    pub fn lists(&self) -> &[SelectedList] {
        &self.lists
    }

    pub fn specs(&self) -> &[SelectedSpec] {
        &self.specs
    }

    pub fn options(&self) -> ScoreOptions {
        self.options
    }

    pub fn matcher(&self) -> &Matcher {
        &self.matcher
    }

    /// Number of `u64` words in a unit's condition set.
    pub fn words(&self) -> usize {
        self.words
    }

    /// Total conditions over the selected lists.
    pub fn conditions(&self) -> usize {
        self.conditions
    }

    /// The list and condition of a global condition id.
    pub fn condition(&self, id: usize) -> (&CodeList, usize) {
        let l = self
            .lists
            .iter()
            .rev()
            .find(|l| l.offset <= id)
            .unwrap_or(&self.lists[0]);
        (&l.list, id - l.offset)
    }

    /// A fresh, empty unit.
    pub fn unit(&self) -> Unit {
        Unit {
            bits: vec![0; self.words],
            scratch: vec![0; self.words],
        }
    }

    /// Marks the conditions a normalised code claims.
    #[inline]
    pub fn add_code(&self, bits: &mut [u64], code: &Code) {
        self.matcher.for_each_hit(code, |id| {
            bits[id as usize >> 6] |= 1u64 << (id & 63);
        });
    }

    /// Reads a raw diagnosis value and marks what it claims.
    #[inline]
    pub fn add_raw(&self, bits: &mut [u64], raw: &[u8]) -> Reading {
        let r = read_code(raw);
        if let Reading::Valid(c) = &r {
            self.add_code(bits, c);
        }
        r
    }

    /// Applies the hierarchies (when enabled): for every pair whose superior
    /// condition is present, the inferior is removed. Presence is judged on
    /// the coded conditions before any removal, so in a chain A > B > C with
    /// all three coded, both B and C go.
    pub fn apply_hierarchy(&self, bits: &mut [u64], scratch: &mut [u64]) {
        if !self.options.hierarchy {
            return;
        }
        scratch.fill(0);
        for l in &self.lists {
            for &(sup, inf) in &l.hierarchy {
                if bits[sup >> 6] & (1 << (sup & 63)) != 0 {
                    scratch[inf >> 6] |= 1 << (inf & 63);
                }
            }
        }
        for (b, s) in bits.iter_mut().zip(scratch.iter()) {
            *b &= !s;
        }
    }

    /// Whether a global condition is set.
    #[inline]
    pub fn has(bits: &[u64], id: usize) -> bool {
        bits[id >> 6] & (1 << (id & 63)) != 0
    }

    /// The score (in units of `1/SCALE`) of specification `spec` for a unit
    /// whose hierarchy has been applied.
    #[inline]
    pub fn score(&self, bits: &[u64], spec: usize) -> i64 {
        let s = &self.specs[spec];
        let l = &self.lists[s.list];
        let weights = &l.list.weightings[s.weighting].weights;
        let start = l.offset;
        let end = start + l.list.conditions.len();
        let mut total = 0i64;
        let (w0, w1) = (start >> 6, (end - 1) >> 6);
        for (w, &word) in bits.iter().enumerate().take(w1 + 1).skip(w0) {
            let mut word = word;
            while word != 0 {
                let id = w * 64 + word.trailing_zeros() as usize;
                word &= word - 1;
                if id >= start && id < end {
                    total += weights[id - start];
                }
            }
        }
        total
    }

    /// Age points of a spec's list for an age.
    pub fn age_points(&self, spec: usize, age: u32) -> i64 {
        self.lists[self.specs[spec].list].list.points_for_age(age)
    }

    /// Decimals a specification prints with.
    pub fn decimals(&self, spec: usize) -> u32 {
        let s = &self.specs[spec];
        self.lists[s.list].list.weightings[s.weighting].decimals
    }

    /// Computes every output value of a finished unit.
    pub fn values(&self, bits: &[u64], age: Option<u32>, out: &mut Vec<Value>) {
        out.clear();
        let mut last_score = (usize::MAX, 0i64);
        for c in &self.columns {
            let v = match c.kind {
                ColumnKind::Score { spec } => {
                    let s = self.score(bits, spec);
                    last_score = (spec, s);
                    Value::Score {
                        scaled: s,
                        decimals: self.decimals(spec),
                    }
                }
                ColumnKind::ScoreWithAge { spec } => {
                    let s = if last_score.0 == spec {
                        last_score.1
                    } else {
                        self.score(bits, spec)
                    };
                    match age {
                        Some(a) => Value::Score {
                            scaled: s + self.age_points(spec, a),
                            decimals: self.decimals(spec),
                        },
                        None => Value::Missing,
                    }
                }
                ColumnKind::Band { spec } => {
                    let s = if last_score.0 == spec {
                        last_score.1
                    } else {
                        self.score(bits, spec)
                    };
                    let sp = &self.specs[spec];
                    let w = &self.lists[sp.list].list.weightings[sp.weighting];
                    match w.bands.iter().position(|b| b.contains(s)) {
                        Some(i) => Value::Band {
                            spec,
                            band: i as u16,
                        },
                        None => Value::Missing,
                    }
                }
                ColumnKind::Flag { condition, .. } => Value::Flag(Self::has(bits, condition)),
            };
            out.push(v);
        }
    }

    /// Name of a band value.
    pub fn band_name(&self, spec: usize, band: u16) -> &str {
        let sp = &self.specs[spec];
        &self.lists[sp.list].list.weightings[sp.weighting].bands[band as usize].name
    }

    /// Appends the output values of a finished unit as delimited text, each
    /// preceded by `delimiter`.
    pub fn write_values(&self, values: &[Value], delimiter: u8, out: &mut Vec<u8>) {
        for v in values {
            out.push(delimiter);
            match *v {
                Value::Score { scaled, decimals } => format_scaled(scaled, decimals, out),
                Value::Missing => {}
                Value::Band { spec, band } => {
                    out.extend_from_slice(self.band_name(spec, band).as_bytes())
                }
                Value::Flag(f) => out.push(if f { b'1' } else { b'0' }),
            }
        }
    }
}

/// One output value.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Value {
    /// A score in units of `1/SCALE`, printed with `decimals` decimals.
    Score {
        scaled: i64,
        decimals: u32,
    },
    /// Empty (age unknown, or a score outside every band).
    Missing,
    /// A band of a specification.
    Band {
        spec: usize,
        band: u16,
    },
    Flag(bool),
}

impl Value {
    /// The number a value stands for (scores in points, flags 0/1).
    pub fn as_f64(&self) -> Option<f64> {
        match *self {
            Value::Score { scaled, .. } => Some(scaled as f64 / SCALE as f64),
            Value::Flag(f) => Some(if f { 1.0 } else { 0.0 }),
            _ => None,
        }
    }
}

/// A unit's condition set with its scratch space.
#[derive(Clone, Debug)]
pub struct Unit {
    pub bits: Vec<u64>,
    pub scratch: Vec<u64>,
}

impl Unit {
    pub fn clear(&mut self) {
        self.bits.fill(0);
    }
}
