//! Parser and validator for the code-list format (`code-lists/FORMAT.md`).
//!
//! Parsing never stops at the first problem: every error and warning is
//! collected with its file and line, so that `morbus lists check` can show
//! them all at once. A list with any error is not returned.

use std::collections::HashMap;
use std::fmt;

use super::canonical::checksum;
use super::{
    parse_scaled, AgePoints, Band, Bound, CodeEntry, CodeList, Condition, ListError, Loaded,
    Origin, Supersedes, Weighting, SCALE,
};
use crate::code::{read_list_code, Code};

/// Codes one range may expand to before it is refused as a likely mistake.
pub const MAX_RANGE_CODES: usize = 200_000;

#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Severity {
    Warning,
    Error,
}

/// A problem found in a list, with file and line (line 0: the whole file).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Diagnostic {
    pub file: String,
    pub line: usize,
    pub severity: Severity,
    pub message: String,
}

impl Diagnostic {
    pub fn error(file: &str, line: usize, message: String) -> Diagnostic {
        Diagnostic {
            file: file.to_string(),
            line,
            severity: Severity::Error,
            message,
        }
    }
    pub fn warning(file: &str, line: usize, message: String) -> Diagnostic {
        Diagnostic {
            file: file.to_string(),
            line,
            severity: Severity::Warning,
            message,
        }
    }
}

impl fmt::Display for Diagnostic {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let sev = match self.severity {
            Severity::Warning => "warning",
            Severity::Error => "error",
        };
        if self.line > 0 {
            write!(f, "{}:{}: {sev}: {}", self.file, self.line, self.message)
        } else {
            write!(f, "{}: {sev}: {}", self.file, self.message)
        }
    }
}

fn is_key(s: &str) -> bool {
    let b = s.as_bytes();
    !b.is_empty()
        && b.len() <= 48
        && b[0].is_ascii_lowercase()
        && b.iter()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || *c == b'_')
}

struct Ctx {
    file: String,
    diags: Vec<Diagnostic>,
}

impl Ctx {
    fn err(&mut self, line: usize, msg: impl Into<String>) {
        self.diags
            .push(Diagnostic::error(&self.file, line, msg.into()));
    }
    fn warn(&mut self, line: usize, msg: impl Into<String>) {
        self.diags
            .push(Diagnostic::warning(&self.file, line, msg.into()));
    }
}

struct RawWeighting {
    name: String,
    label: String,
    source: String,
    line: usize,
    weights: Vec<Option<(i64, u32, String, usize)>>,
    bands: Vec<Band>,
}

fn parse_bound(text: &str, lower: bool) -> Option<Bound> {
    let t = text.trim();
    if t == "*" || t.is_empty() {
        return Some(Bound::Open);
    }
    let (inclusive, rest) = if lower {
        if let Some(r) = t.strip_prefix(">=") {
            (true, r)
        } else {
            (false, t.strip_prefix('>')?)
        }
    } else if let Some(r) = t.strip_prefix("<=") {
        (true, r)
    } else {
        (false, t.strip_prefix('<')?)
    };
    let (v, _) = parse_scaled(rest)?;
    Some(if inclusive {
        Bound::Inclusive(v)
    } else {
        Bound::Exclusive(v)
    })
}

fn parse_code_field(text: &str) -> Result<(Code, Option<Code>), String> {
    let t = text.trim();
    let parts: Vec<&str> = t.split(['-', '\u{2013}']).collect();
    match parts.as_slice() {
        [one] => read_list_code(one)
            .map(|c| (c, None))
            .ok_or_else(|| format!("'{t}' is not an ICD-10 code")),
        [a, b] => {
            let first = read_list_code(a)
                .ok_or_else(|| format!("range start '{a}' is not an ICD-10 code"))?;
            let last = read_list_code(b)
                .ok_or_else(|| format!("range end '{b}' is not an ICD-10 code"))?;
            if first.len() != last.len() {
                return Err(format!(
                    "range '{t}' mixes lengths ({first} has {}, {last} has {} characters); write both ends at the same length",
                    first.len(),
                    last.len()
                ));
            }
            if first > last {
                return Err(format!(
                    "range '{t}' is reversed ({first} comes after {last})"
                ));
            }
            let mut n = 0usize;
            if !crate::code::expand_range(&first, &last, MAX_RANGE_CODES, |_| n += 1) {
                return Err(format!(
                    "range '{t}' spans more than {MAX_RANGE_CODES} codes; split it"
                ));
            }
            Ok((first, if first == last { None } else { Some(last) }))
        }
        _ => Err(format!("'{t}' is neither a code nor a range FIRST-LAST")),
    }
}

/// Whether two code entries claim at least one common code (the letter rule
/// of [`crate::code::range_claims`] included: `C7A` and `C77-C80` do not
/// overlap).
fn overlaps(a: &CodeEntry, b: &CodeEntry) -> bool {
    let (short, long) = if a.first.len() <= b.first.len() {
        (a, b)
    } else {
        (b, a)
    };
    let n = short.first.len();
    let s_hi = short.last.unwrap_or(short.first);
    let l_hi = long.last.unwrap_or(long.first);
    let claims_short = |p: &[u8]| crate::code::range_claims(&short.first, &s_hi, p);
    let claims_long = |p: &[u8]| crate::code::range_claims(&long.first, &l_hi, p);
    // A code shared by both has a prefix of `n` characters that both claim.
    // When one side is a single code that prefix is known; for two ranges,
    // the ends of the shared stretch are ends of the two ranges.
    claims_long(short.first.as_bytes())
        || claims_long(s_hi.as_bytes())
        || claims_short(&long.first.as_bytes()[..n])
        || claims_short(&l_hi.as_bytes()[..n])
}

/// Parses and validates a list. Warnings come back with the list; any error
/// fails the whole list.
pub fn parse(text: &str, origin: Origin) -> Result<Loaded, ListError> {
    let mut cx = Ctx {
        file: origin.to_string(),
        diags: Vec::new(),
    };
    let mut name: Option<String> = None;
    let mut name_line = 0;
    let mut version: Option<String> = None;
    let mut title = String::new();
    let mut editions = Vec::new();
    let mut source = String::new();
    let mut default_weighting: Option<(String, usize)> = None;
    let mut conditions: Vec<Condition> = Vec::new();
    let mut cond_index: HashMap<String, usize> = HashMap::new();
    let mut raw_codes: Vec<(String, String, String, usize)> = Vec::new();
    let mut raw_hier: Vec<(String, String, String, usize)> = Vec::new();
    let mut raw_notes: Vec<(String, String, String, usize)> = Vec::new();
    let mut raw_weights: Vec<(String, String, String, String, usize)> = Vec::new();
    let mut raw_bands: Vec<(String, String, String, String, String, usize)> = Vec::new();
    let mut weightings: Vec<RawWeighting> = Vec::new();
    let mut age_points: Vec<AgePoints> = Vec::new();

    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    for (i, raw_line) in text.lines().enumerate() {
        let line = i + 1;
        let trimmed = raw_line.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        let fields: Vec<&str> = raw_line.split('\t').map(str::trim).collect();
        let kind = fields[0];
        let f = |k: usize| fields.get(k).copied().unwrap_or("");
        let n = fields.len();
        if n == 1 && kind.contains(' ') {
            cx.err(
                line,
                "no TAB found: fields must be separated by TAB characters",
            );
            continue;
        }
        if name.is_none() && kind != "list" {
            cx.err(line, "the first record must be 'list\tNAME'");
            name = Some(String::new());
        }
        let max_fields = |cx: &mut Ctx, max: usize| {
            if n > max {
                cx.err(
                    line,
                    format!(
                        "'{kind}' takes at most {} fields after the kind, found {}",
                        max - 1,
                        n - 1
                    ),
                );
            }
        };
        match kind {
            "list" => {
                max_fields(&mut cx, 2);
                if name.as_deref().is_some_and(|s| !s.is_empty()) {
                    cx.err(line, "'list' given twice");
                } else if !is_key(f(1)) {
                    cx.err(
                        line,
                        format!("list name '{}' must be lower-case snake_case", f(1)),
                    );
                    name = Some(String::new());
                } else {
                    name = Some(f(1).to_string());
                    name_line = line;
                }
            }
            "version" => {
                max_fields(&mut cx, 2);
                if f(1).is_empty() {
                    cx.err(line, "empty version");
                } else if version.is_some() {
                    cx.err(line, "'version' given twice");
                } else {
                    version = Some(f(1).to_string());
                }
            }
            "title" => {
                max_fields(&mut cx, 2);
                title = f(1).to_string();
            }
            "edition" => {
                max_fields(&mut cx, 2);
                editions.push(f(1).to_string());
            }
            "source" => {
                max_fields(&mut cx, 2);
                source = f(1).to_string();
            }
            "default_weighting" => {
                max_fields(&mut cx, 2);
                default_weighting = Some((f(1).to_string(), line));
            }
            "condition" => {
                max_fields(&mut cx, 4);
                let key = f(1);
                if !is_key(key) {
                    cx.err(
                        line,
                        format!("condition key '{key}' must be lower-case snake_case"),
                    );
                } else if cond_index.contains_key(key) {
                    cx.err(line, format!("condition '{key}' declared twice"));
                } else {
                    if f(2).is_empty() {
                        cx.warn(line, format!("condition '{key}' has no label"));
                    }
                    cond_index.insert(key.to_string(), conditions.len());
                    conditions.push(Condition {
                        key: key.to_string(),
                        label: f(2).to_string(),
                        source: f(3).to_string(),
                        line,
                        notes: Vec::new(),
                    });
                }
            }
            "condition_note" => {
                max_fields(&mut cx, 4);
                raw_notes.push((f(1).to_string(), f(2).to_string(), f(3).to_string(), line));
            }
            "code" => {
                max_fields(&mut cx, 4);
                raw_codes.push((f(1).to_string(), f(2).to_string(), f(3).to_string(), line));
            }
            "supersedes" => {
                max_fields(&mut cx, 4);
                raw_hier.push((f(1).to_string(), f(2).to_string(), f(3).to_string(), line));
            }
            "weighting" => {
                max_fields(&mut cx, 4);
                let wname = f(1);
                if !is_key(wname) {
                    cx.err(
                        line,
                        format!("weighting name '{wname}' must be lower-case snake_case"),
                    );
                } else if weightings.iter().any(|w| w.name == wname) {
                    cx.err(line, format!("weighting '{wname}' declared twice"));
                } else {
                    weightings.push(RawWeighting {
                        name: wname.to_string(),
                        label: f(2).to_string(),
                        source: f(3).to_string(),
                        line,
                        weights: Vec::new(),
                        bands: Vec::new(),
                    });
                }
            }
            "weight" => {
                max_fields(&mut cx, 5);
                raw_weights.push((
                    f(1).to_string(),
                    f(2).to_string(),
                    f(3).to_string(),
                    f(4).to_string(),
                    line,
                ));
            }
            "band" => {
                max_fields(&mut cx, 6);
                raw_bands.push((
                    f(1).to_string(),
                    f(2).to_string(),
                    f(3).to_string(),
                    f(4).to_string(),
                    f(5).to_string(),
                    line,
                ));
            }
            "age_points" => {
                max_fields(&mut cx, 5);
                let from = f(1).parse::<u32>();
                let to = if f(2) == "*" {
                    Ok(None)
                } else {
                    f(2).parse::<u32>().map(Some)
                };
                let points = parse_scaled(f(3));
                match (from, to, points) {
                    (Ok(from), Ok(to), Some((points, _))) => {
                        if to.is_some_and(|t| t < from) {
                            cx.err(line, format!("age range {from}-{} is reversed", f(2)));
                        } else {
                            age_points.push(AgePoints {
                                from,
                                to,
                                points,
                                source: f(4).to_string(),
                                line,
                            });
                        }
                    }
                    _ => cx.err(
                        line,
                        "age_points needs FROM (whole years), TO (whole years or *), POINTS (a number)",
                    ),
                }
            }
            other => cx.err(
                line,
                format!(
                    "unknown record kind '{other}' (expected list, version, title, edition, source, default_weighting, condition, code, supersedes, weighting, weight, age_points or band)"
                ),
            ),
        }
    }

    // Codes.
    let mut codes: Vec<CodeEntry> = Vec::new();
    for (text, cond, src, line) in raw_codes {
        let Some(&ci) = cond_index.get(&cond) else {
            cx.err(
                line,
                format!("code '{text}' names unknown condition '{cond}'"),
            );
            continue;
        };
        match parse_code_field(&text) {
            Ok((first, last)) => {
                if src.is_empty() {
                    cx.warn(line, format!("code '{text}' has no source"));
                }
                codes.push(CodeEntry {
                    text,
                    first,
                    last,
                    condition: ci,
                    source: src,
                    line,
                });
            }
            Err(msg) => cx.err(line, msg),
        }
    }
    for (i, a) in codes.iter().enumerate() {
        for b in &codes[i + 1..] {
            if a.first.as_bytes()[0] != b.first.as_bytes()[0] || !overlaps(a, b) {
                continue;
            }
            if a.condition == b.condition {
                cx.warn(
                    b.line,
                    format!(
                        "code '{}' overlaps line {} ('{}') of the same condition '{}'",
                        b.text, a.line, a.text, conditions[a.condition].key
                    ),
                );
            } else {
                cx.warn(
                    b.line,
                    format!(
                        "code '{}' of '{}' is also claimed by line {} ('{}') of '{}'",
                        b.text,
                        conditions[b.condition].key,
                        a.line,
                        a.text,
                        conditions[a.condition].key
                    ),
                );
            }
        }
    }
    let mut has_codes = vec![false; conditions.len()];
    for c in &codes {
        has_codes[c.condition] = true;
    }
    for (c, has) in conditions.iter().zip(&has_codes) {
        if !has {
            cx.warn(c.line, format!("condition '{}' has no codes", c.key));
        }
    }

    // Notes on conditions.
    for (key, text, src, line) in raw_notes {
        match cond_index.get(&key) {
            None => cx.err(
                line,
                format!("condition_note for undeclared condition '{key}'"),
            ),
            Some(_) if text.is_empty() => cx.err(line, "condition_note without text"),
            Some(&ci) => {
                if src.is_empty() {
                    cx.warn(line, format!("condition_note of '{key}' has no source"));
                }
                conditions[ci].notes.push(super::ConditionNote {
                    text,
                    source: src,
                    line,
                });
            }
        }
    }

    // Hierarchy.
    let mut hierarchy = Vec::new();
    for (sup, inf, src, line) in raw_hier {
        match (cond_index.get(&sup), cond_index.get(&inf)) {
            (Some(&s), Some(&i)) if s == i => {
                cx.err(line, format!("'{sup}' cannot supersede itself"))
            }
            (Some(&s), Some(&i)) => {
                if hierarchy
                    .iter()
                    .any(|h: &Supersedes| h.superior == s && h.inferior == i)
                {
                    cx.warn(line, format!("'{sup}' supersedes '{inf}' given twice"));
                } else {
                    hierarchy.push(Supersedes {
                        superior: s,
                        inferior: i,
                        source: src,
                        line,
                    });
                }
            }
            (s, i) => {
                for (k, found) in [(&sup, s), (&inf, i)] {
                    if found.is_none() {
                        cx.err(line, format!("supersedes names unknown condition '{k}'"));
                    }
                }
            }
        }
    }
    if let Some(cycle) = find_cycle(conditions.len(), &hierarchy) {
        let names: Vec<&str> = cycle.iter().map(|&c| conditions[c].key.as_str()).collect();
        let line = hierarchy
            .iter()
            .find(|h| h.superior == cycle[0] && cycle.get(1) == Some(&h.inferior))
            .map_or(0, |h| h.line);
        cx.err(
            line,
            format!("hierarchy has a cycle: {}", names.join(" > ")),
        );
    }

    // Weights.
    for w in weightings.iter_mut() {
        w.weights = vec![None; conditions.len()];
    }
    for (wname, cond, value, src, line) in raw_weights {
        let Some(w) = weightings.iter_mut().find(|w| w.name == wname) else {
            cx.err(line, format!("weight for unknown weighting '{wname}'"));
            continue;
        };
        let Some(&ci) = cond_index.get(&cond) else {
            cx.err(
                line,
                format!("weight in '{wname}' for unknown condition '{cond}'"),
            );
            continue;
        };
        let Some((v, dec)) = parse_scaled(&value) else {
            cx.err(
                line,
                format!("weight '{value}' is not a number with at most 4 decimals"),
            );
            continue;
        };
        if w.weights[ci].is_some() {
            cx.err(line, format!("weight of '{cond}' in '{wname}' given twice"));
            continue;
        }
        w.weights[ci] = Some((v, dec, src, line));
    }
    for (wname, bname, lo, hi, src, line) in raw_bands {
        let Some(w) = weightings.iter_mut().find(|w| w.name == wname) else {
            cx.err(line, format!("band for unknown weighting '{wname}'"));
            continue;
        };
        if !is_key(&bname) {
            cx.err(
                line,
                format!("band name '{bname}' must be lower-case snake_case"),
            );
            continue;
        }
        match (parse_bound(&lo, true), parse_bound(&hi, false)) {
            (Some(lower), Some(upper)) => w.bands.push(Band {
                name: bname,
                lower,
                upper,
                source: src,
                line,
            }),
            _ => cx.err(
                line,
                format!(
                    "band bounds '{lo}' '{hi}': lower is * or >=X or >X, upper is * or <=X or <X"
                ),
            ),
        }
    }
    let mut final_weightings = Vec::new();
    for w in weightings {
        let mut weights = Vec::with_capacity(conditions.len());
        let mut sources = Vec::with_capacity(conditions.len());
        let mut decimals = 0;
        for (ci, slot) in w.weights.iter().enumerate() {
            match slot {
                Some((v, d, s, _)) => {
                    weights.push(*v);
                    sources.push(s.clone());
                    decimals = decimals.max(*d);
                }
                None => {
                    cx.err(
                        w.line,
                        format!(
                            "weighting '{}' has no weight for condition '{}'",
                            w.name, conditions[ci].key
                        ),
                    );
                    weights.push(0);
                    sources.push(String::new());
                }
            }
        }
        check_band_overlaps(&mut cx, &w.name, &w.bands);
        final_weightings.push(Weighting {
            name: w.name,
            label: w.label,
            source: w.source,
            weights,
            weight_sources: sources,
            decimals,
            bands: w.bands,
            line: w.line,
        });
    }
    for (i, a) in age_points.iter().enumerate() {
        for b in &age_points[i + 1..] {
            let a_hi = a.to.unwrap_or(u32::MAX);
            let b_hi = b.to.unwrap_or(u32::MAX);
            if a.from <= b_hi && b.from <= a_hi {
                cx.err(
                    b.line,
                    format!("age range overlaps the one on line {}", a.line),
                );
            }
        }
    }

    check_sum_range(&mut cx, &final_weightings, &age_points);

    let name = name.unwrap_or_default();
    if name.is_empty() && !cx.diags.iter().any(|d| d.severity == Severity::Error) {
        cx.err(0, "no 'list' record");
    }
    if version.is_none() {
        cx.err(0, "no 'version' record");
    }
    if conditions.is_empty() {
        cx.err(0, "no conditions");
    }
    if final_weightings.is_empty() {
        cx.err(0, "no weightings");
    }
    let default_weighting = match default_weighting {
        Some((d, line)) => {
            if !final_weightings.iter().any(|w| w.name == d) {
                cx.err(line, format!("default weighting '{d}' is not declared"));
            }
            d
        }
        None => {
            if final_weightings.len() > 1 {
                cx.err(0, "several weightings but no 'default_weighting'");
            }
            final_weightings
                .first()
                .map(|w| w.name.clone())
                .unwrap_or_default()
        }
    };

    if cx.diags.iter().any(|d| d.severity == Severity::Error) {
        cx.diags.sort_by_key(|d| (d.line, d.severity));
        return Err(ListError {
            diagnostics: cx.diags,
        });
    }
    let mut list = CodeList {
        name,
        version: version.unwrap_or_default(),
        title,
        editions,
        source,
        default_weighting,
        conditions,
        codes,
        hierarchy,
        weightings: final_weightings,
        age_points,
        origin,
        checksum: String::new(),
        line: name_line,
    };
    list.checksum = checksum(&list);
    cx.diags.sort_by_key(|d| d.line);
    Ok(Loaded {
        list,
        warnings: cx.diags,
    })
}

fn check_band_overlaps(cx: &mut Ctx, wname: &str, bands: &[Band]) {
    let lo = |b: &Band| match b.lower {
        Bound::Open => (i64::MIN, true),
        Bound::Inclusive(x) => (x, true),
        Bound::Exclusive(x) => (x, false),
    };
    let hi = |b: &Band| match b.upper {
        Bound::Open => (i64::MAX, true),
        Bound::Inclusive(x) => (x, true),
        Bound::Exclusive(x) => (x, false),
    };
    for (i, a) in bands.iter().enumerate() {
        let (alo, alo_in) = lo(a);
        let (ahi, ahi_in) = hi(a);
        if alo > ahi || (alo == ahi && !(alo_in && ahi_in)) {
            cx.err(a.line, format!("band '{}' of '{wname}' is empty", a.name));
        }
        for b in &bands[i + 1..] {
            let (blo, blo_in) = lo(b);
            let (bhi, bhi_in) = hi(b);
            // Overlap unless one ends before the other starts.
            let a_before_b = ahi < blo || (ahi == blo && !(ahi_in && blo_in));
            let b_before_a = bhi < alo || (bhi == alo && !(bhi_in && alo_in));
            if !a_before_b && !b_before_a {
                cx.err(
                    b.line,
                    format!(
                        "band '{}' of '{wname}' overlaps band '{}' (line {})",
                        b.name, a.name, a.line
                    ),
                );
            }
        }
    }
}

/// A cycle in the supersedes graph, as a list of condition indices.
fn find_cycle(n: usize, edges: &[Supersedes]) -> Option<Vec<usize>> {
    let mut adj = vec![Vec::new(); n];
    for e in edges {
        adj[e.superior].push(e.inferior);
    }
    // 0 = unvisited, 1 = on stack, 2 = done
    let mut state = vec![0u8; n];
    let mut stack: Vec<usize> = Vec::new();
    fn visit(
        v: usize,
        adj: &[Vec<usize>],
        state: &mut [u8],
        stack: &mut Vec<usize>,
    ) -> Option<Vec<usize>> {
        state[v] = 1;
        stack.push(v);
        for &w in &adj[v] {
            if state[w] == 1 {
                let start = stack.iter().position(|&x| x == w).unwrap_or(0);
                let mut cycle = stack[start..].to_vec();
                cycle.push(w);
                return Some(cycle);
            }
            if state[w] == 0 {
                if let Some(c) = visit(w, adj, state, stack) {
                    return Some(c);
                }
            }
        }
        stack.pop();
        state[v] = 2;
        None
    }
    for v in 0..n {
        if state[v] == 0 {
            if let Some(c) = visit(v, &adj, &mut state, &mut stack) {
                return Some(c);
            }
        }
    }
    None
}

/// Refuses a weighting whose score could leave the exact-decimal range:
/// every score is an `i64` count of `1/SCALE` points, so the sum of the
/// weighting's positive weights plus the largest positive age points (and
/// likewise the negative ones) must fit in it. With that checked at load
/// time no sum of a run can wrap.
fn check_sum_range(cx: &mut Ctx, weightings: &[Weighting], age_points: &[AgePoints]) {
    let max_age = age_points
        .iter()
        .map(|a| a.points)
        .max()
        .unwrap_or(0)
        .max(0) as i128;
    let min_age = age_points
        .iter()
        .map(|a| a.points)
        .min()
        .unwrap_or(0)
        .min(0) as i128;
    for w in weightings {
        let up: i128 = w
            .weights
            .iter()
            .filter(|&&v| v > 0)
            .map(|&v| v as i128)
            .sum::<i128>()
            + max_age;
        let down: i128 = w
            .weights
            .iter()
            .filter(|&&v| v < 0)
            .map(|&v| v as i128)
            .sum::<i128>()
            + min_age;
        let (side, total) = if up > i64::MAX as i128 {
            ("positive", up)
        } else if down < i64::MIN as i128 {
            ("negative", down)
        } else {
            continue;
        };
        let mut shown = Vec::new();
        let mut t = total.unsigned_abs();
        // The total in points, exactly (it may exceed the i64 range).
        let unit = SCALE as u128;
        let frac = t % unit;
        t /= unit;
        if total < 0 {
            shown.push(b'-');
        }
        shown.extend_from_slice(t.to_string().as_bytes());
        if frac > 0 {
            let f = format!(".{frac:04}");
            shown.extend_from_slice(f.trim_end_matches('0').as_bytes());
        }
        cx.err(
            w.line,
            format!(
                "weighting '{}': its {side} weights and age points can sum to {} points, past the exact-decimal range of a score (±922337203685477 points); use smaller weights",
                w.name,
                String::from_utf8_lossy(&shown)
            ),
        );
    }
}
