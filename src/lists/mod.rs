//! Code lists: conditions, codes, hierarchies, weightings, age points and
//! bands, all as data. The format is described in `code-lists/FORMAT.md`.
//!
//! Built-in lists are embedded in the binary at build time ([`builtin`]);
//! user lists are read from files ([`load_file`], [`load_dir`]). Both go
//! through the same parser ([`parse`]) and the same matcher.
//!
//! The list commands live here too, as data for a front end to print:
//! [`describe`] (`lists show`), [`export_to_dir`] (`lists export`),
//! [`check_path`] (`lists check`) and [`diff`] (`lists diff`).

pub mod builtin;
mod canonical;
pub mod check;
mod decimal;
pub mod describe;
pub mod diff;
pub mod export;
pub mod parse;
pub mod prefixes;

use std::collections::BTreeMap;
use std::fmt;
use std::path::{Path, PathBuf};

use crate::code::Code;
pub use canonical::{canonical_text, checksum};
pub use check::{check_path, CheckReport};
pub use decimal::{format_scaled, parse_scaled, SCALE, SCALE_DECIMALS};
pub use describe::{describe, Description};
pub use diff::{diff, diff_dirs, DirDiff, ListDiff};
pub use export::{export_text, export_to_dir};
pub use parse::{parse, Diagnostic, Severity};
pub use prefixes::{export_prefixes_to_dir, prefix_rows, prefixes_csv, PrefixRow};

/// Where a list came from.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Origin {
    /// Embedded in the binary (the file name under `code-lists/`).
    Builtin(&'static str),
    /// Read from a file.
    File(PathBuf),
}

impl fmt::Display for Origin {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Origin::Builtin(name) => write!(f, "built-in ({name})"),
            Origin::File(p) => write!(f, "{}", p.display()),
        }
    }
}

/// A condition of a list (a comorbidity, or a frailty category).
#[derive(Clone, Debug, PartialEq)]
pub struct Condition {
    pub key: String,
    pub label: String,
    pub source: String,
    pub line: usize,
    /// `condition_note` records: notes on how the source applies the
    /// condition (e.g. a category counted in secondary diagnosis positions
    /// only). Recorded and shown; scoring does not use them.
    pub notes: Vec<ConditionNote>,
}

/// One `condition_note` record.
#[derive(Clone, Debug, PartialEq)]
pub struct ConditionNote {
    pub text: String,
    pub source: String,
    pub line: usize,
}

/// One `code` record: a code or an inclusive range of equal-length codes.
#[derive(Clone, Debug, PartialEq)]
pub struct CodeEntry {
    /// As written in the file.
    pub text: String,
    pub first: Code,
    /// `None` for a single code.
    pub last: Option<Code>,
    /// Index into [`CodeList::conditions`].
    pub condition: usize,
    pub source: String,
    pub line: usize,
}

impl CodeEntry {
    /// Normalised form: `I425` or `I425-I429`.
    pub fn normalised(&self) -> String {
        match &self.last {
            None => self.first.to_string(),
            Some(l) => format!("{}-{}", self.first, l),
        }
    }

    /// Whether a code is claimed by this entry (prefix match; a range
    /// follows the letter rule of [`crate::code::range_claims`]).
    pub fn claims(&self, code: &Code) -> bool {
        let n = self.first.len();
        if code.len() < n {
            return false;
        }
        let p = &code.as_bytes()[..n];
        match &self.last {
            None => p == self.first.as_bytes(),
            Some(l) => crate::code::range_claims(&self.first, l, p),
        }
    }
}

/// `superior` present in a unit removes `inferior`.
#[derive(Clone, Debug, PartialEq)]
pub struct Supersedes {
    pub superior: usize,
    pub inferior: usize,
    pub source: String,
    pub line: usize,
}

/// One end of a band.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Bound {
    Open,
    Inclusive(i64),
    Exclusive(i64),
}

/// A named score band of a weighting, e.g. `intermediate` for 5 to 15.
#[derive(Clone, Debug, PartialEq)]
pub struct Band {
    pub name: String,
    pub lower: Bound,
    pub upper: Bound,
    pub source: String,
    pub line: usize,
}

impl Band {
    /// Whether a scaled score lies in the band.
    pub fn contains(&self, scaled: i64) -> bool {
        let lo = match self.lower {
            Bound::Open => true,
            Bound::Inclusive(x) => scaled >= x,
            Bound::Exclusive(x) => scaled > x,
        };
        let hi = match self.upper {
            Bound::Open => true,
            Bound::Inclusive(x) => scaled <= x,
            Bound::Exclusive(x) => scaled < x,
        };
        lo && hi
    }
}

/// A scoring scheme: points per condition.
#[derive(Clone, Debug, PartialEq)]
pub struct Weighting {
    pub name: String,
    pub label: String,
    pub source: String,
    /// Points per condition (same order as [`CodeList::conditions`]), in
    /// units of `1/SCALE`.
    pub weights: Vec<i64>,
    /// Source written on each weight line (empty: the weighting's source).
    pub weight_sources: Vec<String>,
    /// Decimals printed: the most precise weight's.
    pub decimals: u32,
    pub bands: Vec<Band>,
    pub line: usize,
}

impl Weighting {
    /// The band a scaled score falls in, if the weighting has bands.
    pub fn band_of(&self, scaled: i64) -> Option<&str> {
        self.bands
            .iter()
            .find(|b| b.contains(scaled))
            .map(|b| b.name.as_str())
    }
}

/// Points for an age range (whole years, inclusive).
#[derive(Clone, Debug, PartialEq)]
pub struct AgePoints {
    pub from: u32,
    /// `None`: no upper limit.
    pub to: Option<u32>,
    pub points: i64,
    pub source: String,
    pub line: usize,
}

/// A complete, validated code list.
#[derive(Clone, Debug, PartialEq)]
pub struct CodeList {
    pub name: String,
    pub version: String,
    pub title: String,
    pub editions: Vec<String>,
    pub source: String,
    pub default_weighting: String,
    pub conditions: Vec<Condition>,
    pub codes: Vec<CodeEntry>,
    pub hierarchy: Vec<Supersedes>,
    pub weightings: Vec<Weighting>,
    pub age_points: Vec<AgePoints>,
    pub origin: Origin,
    /// SHA-256 of the canonical content, lower-case hex.
    pub checksum: String,
    /// Line of the `list` record.
    pub line: usize,
}

impl CodeList {
    pub fn condition_index(&self, key: &str) -> Option<usize> {
        self.conditions.iter().position(|c| c.key == key)
    }

    pub fn weighting(&self, name: &str) -> Option<&Weighting> {
        self.weightings.iter().find(|w| w.name == name)
    }

    /// Age points for a whole-year age (0 when no range covers it).
    pub fn points_for_age(&self, age: u32) -> i64 {
        self.age_points
            .iter()
            .find(|a| age >= a.from && a.to.is_none_or(|t| age <= t))
            .map_or(0, |a| a.points)
    }

    /// The conditions a code is assigned to, in declaration order.
    pub fn conditions_of(&self, code: &Code) -> Vec<usize> {
        let mut v: Vec<usize> = self
            .codes
            .iter()
            .filter(|e| e.claims(code))
            .map(|e| e.condition)
            .collect();
        v.sort_unstable();
        v.dedup();
        v
    }

    /// Number of `code` records.
    pub fn code_entries(&self) -> usize {
        self.codes.len()
    }
}

/// A failure to load a list: every error found, each with file and line.
#[derive(Debug, Clone)]
pub struct ListError {
    pub diagnostics: Vec<Diagnostic>,
}

impl fmt::Display for ListError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let errors: Vec<&Diagnostic> = self
            .diagnostics
            .iter()
            .filter(|d| d.severity == Severity::Error)
            .collect();
        write!(f, "code list has {} error(s)", errors.len())?;
        for d in errors {
            write!(f, "\n  {d}")?;
        }
        Ok(())
    }
}

impl std::error::Error for ListError {}

/// A loaded list and the warnings its loading produced.
#[derive(Debug, Clone)]
pub struct Loaded {
    pub list: CodeList,
    pub warnings: Vec<Diagnostic>,
}

/// The largest list file read (64 MiB; the built-in lists are a few
/// kilobytes): a larger file is refused rather than read without limit.
pub const MAX_LIST_BYTES: u64 = 64 << 20;

/// The bytes of a list file: a regular file (symbolic links followed) of at
/// most [`MAX_LIST_BYTES`]. A FIFO or device is refused before it is opened
/// (a FIFO would wait for a writer, `/dev/zero` never ends).
pub(crate) fn read_list_bytes(path: &Path) -> Result<Vec<u8>, String> {
    use std::io::Read;
    let meta = std::fs::metadata(path).map_err(|e| format!("cannot read: {e}"))?;
    if meta.is_dir() {
        return Err("cannot read: it is a directory, not a list file".into());
    }
    if !meta.is_file() {
        return Err(
            "cannot read: not a regular file (a FIFO, device or socket); a list is read \
             from a file"
                .into(),
        );
    }
    let too_big = || {
        format!(
            "cannot read: larger than {} MiB, the limit for a list file",
            MAX_LIST_BYTES >> 20
        )
    };
    if meta.len() > MAX_LIST_BYTES {
        return Err(too_big());
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    std::fs::File::open(path)
        .and_then(|f| f.take(MAX_LIST_BYTES + 1).read_to_end(&mut bytes))
        .map_err(|e| format!("cannot read: {e}"))?;
    if bytes.len() as u64 > MAX_LIST_BYTES {
        return Err(too_big());
    }
    Ok(bytes)
}

/// Loads one list file (a regular file, see [`MAX_LIST_BYTES`]).
pub fn load_file(path: &Path) -> Result<Loaded, ListError> {
    let text = read_list_bytes(path).map_err(|message| ListError {
        diagnostics: vec![Diagnostic::error(&path.display().to_string(), 0, message)],
    })?;
    let text = String::from_utf8(text).map_err(|e| ListError {
        diagnostics: vec![Diagnostic::error(
            &path.display().to_string(),
            0,
            format!("not UTF-8 text ({e})"),
        )],
    })?;
    let mut loaded = parse(&text, Origin::File(path.to_path_buf()))?;
    if let Some(stem) = path.file_stem().and_then(|s| s.to_str()) {
        if stem != loaded.list.name {
            loaded.warnings.insert(
                0,
                Diagnostic::warning(
                    &path.display().to_string(),
                    loaded.list.line,
                    format!(
                        "the file is named '{stem}.tsv' but holds list '{}'; name it '{}.tsv' so that the file and the list agree",
                        loaded.list.name, loaded.list.name
                    ),
                ),
            );
        }
    }
    Ok(loaded)
}

/// Whether a file in a list directory is a code list: a `*.tsv` file whose
/// name is not all upper case. Upper-case names (`VERSIONS.tsv`) are project
/// files kept beside the lists, never lists.
pub fn is_list_file(path: &Path) -> bool {
    if path.extension().is_none_or(|x| x != "tsv") {
        return false;
    }
    let Some(stem) = path.file_stem().and_then(|s| s.to_str()) else {
        return true;
    };
    let reserved =
        stem.chars().any(|c| c.is_ascii_uppercase()) && !stem.chars().any(|c| c.is_lowercase());
    !reserved
}

/// The list files of a directory (see [`is_list_file`]), sorted by name, and
/// the `*.tsv` files skipped as project files.
pub fn list_files(dir: &Path) -> Result<(Vec<PathBuf>, Vec<PathBuf>), ListError> {
    let entries = std::fs::read_dir(dir).map_err(|e| ListError {
        diagnostics: vec![Diagnostic::error(
            &dir.display().to_string(),
            0,
            format!("cannot read list directory: {e}"),
        )],
    })?;
    let mut lists = Vec::new();
    let mut skipped = Vec::new();
    for p in entries.filter_map(|e| e.ok().map(|e| e.path())) {
        if is_list_file(&p) {
            lists.push(p);
        } else if p.extension().is_some_and(|x| x == "tsv") {
            skipped.push(p);
        }
    }
    lists.sort();
    skipped.sort();
    Ok((lists, skipped))
}

/// Errors for lists of one directory that share a name.
pub fn duplicate_names(lists: &[&CodeList]) -> Vec<Diagnostic> {
    let mut seen: BTreeMap<&str, &CodeList> = BTreeMap::new();
    let mut out = Vec::new();
    for l in lists {
        if let Some(prev) = seen.insert(&l.name, l) {
            out.push(Diagnostic::error(
                &l.origin.to_string(),
                l.line,
                format!(
                    "list name '{}' is also used by {} (line {})",
                    l.name, prev.origin, prev.line
                ),
            ));
        }
    }
    out
}

/// Loads every list of a directory (see [`is_list_file`]), sorted by file
/// name. Any error in any file fails the whole directory.
pub fn load_dir(dir: &Path) -> Result<Vec<Loaded>, ListError> {
    let (paths, _) = list_files(dir)?;
    let mut out = Vec::new();
    let mut diagnostics = Vec::new();
    for p in paths {
        match load_file(&p) {
            Ok(l) => out.push(l),
            Err(e) => diagnostics.extend(e.diagnostics),
        }
    }
    diagnostics.extend(duplicate_names(
        &out.iter().map(|l| &l.list).collect::<Vec<_>>(),
    ));
    if diagnostics.iter().any(|d| d.severity == Severity::Error) {
        return Err(ListError { diagnostics });
    }
    Ok(out)
}

/// A list named on a command line: a path to a list file (when such a file
/// exists, or the text contains a `/` or ends in `.tsv`), or else the name of
/// a list of the catalogue.
pub fn resolve(arg: &str, catalogue: &Catalogue) -> Result<Loaded, crate::Error> {
    let path = Path::new(arg);
    if path.is_file() || arg.contains(['/', '\\']) || arg.ends_with(".tsv") {
        return Ok(load_file(path)?);
    }
    match catalogue.get(arg) {
        Some(l) => Ok(Loaded {
            list: l.clone(),
            warnings: Vec::new(),
        }),
        None => Err(crate::Error::Usage(format!(
            "no list named '{arg}' and no such file; available lists: {}",
            catalogue.names().join(", ")
        ))),
    }
}

/// The lists available to a run: the built-ins, replaced or extended by lists
/// loaded from files.
#[derive(Debug, Clone)]
pub struct Catalogue {
    lists: Vec<CodeList>,
}

impl Catalogue {
    /// Only the built-in lists.
    pub fn builtin() -> Catalogue {
        Catalogue {
            lists: builtin::all().to_vec(),
        }
    }

    /// Adds a list; a list of the same name is replaced. Returns the origin
    /// of the replaced list, if any.
    pub fn insert(&mut self, list: CodeList) -> Option<Origin> {
        if let Some(slot) = self.lists.iter_mut().find(|l| l.name == list.name) {
            let old = std::mem::replace(slot, list);
            Some(old.origin)
        } else {
            self.lists.push(list);
            None
        }
    }

    pub fn get(&self, name: &str) -> Option<&CodeList> {
        self.lists.iter().find(|l| l.name == name)
    }

    pub fn lists(&self) -> &[CodeList] {
        &self.lists
    }

    pub fn names(&self) -> Vec<&str> {
        self.lists.iter().map(|l| l.name.as_str()).collect()
    }

    /// The built-in lists plus every list of a directory (`*.tsv`); a loaded
    /// list replaces a built-in of the same name. Also returns the notes the
    /// command line prints for `--lists DIR`: the loaded lists' warnings and
    /// one line per replaced list.
    pub fn builtin_and_dir(dir: &Path) -> Result<(Catalogue, Vec<String>), crate::Error> {
        let mut cat = Catalogue::builtin();
        let loaded = load_dir(dir)?;
        if loaded.is_empty() {
            return Err(crate::Error::Usage(format!(
                "no code lists (*.tsv) found in {}",
                dir.display()
            )));
        }
        let mut notes = Vec::new();
        for l in loaded {
            notes.extend(l.warnings.iter().map(ToString::to_string));
            let name = l.list.name.clone();
            let origin = l.list.origin.clone();
            if let Some(old) = cat.insert(l.list) {
                notes.push(format!(
                    "list '{name}' from {origin} replaces the {old} list"
                ));
            }
        }
        Ok((cat, notes))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builtin_and_dir_adds_and_replaces() {
        let dir = std::env::temp_dir().join(format!("morbus-lists-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let empty = Catalogue::builtin_and_dir(&dir).unwrap_err();
        assert_eq!(empty.exit_code(), 2);
        assert!(empty
            .to_string()
            .starts_with("no code lists (*.tsv) found in"));
        let hfrs = builtin::text("hfrs")
            .unwrap()
            .replacen("version\t", "version\tlocal-", 1);
        std::fs::write(dir.join("hfrs.tsv"), hfrs).unwrap();
        let tiny = "list\ttiny\nversion\t1\ntitle\tt\nedition\tICD-10 (WHO)\nsource\ts\n\
                    default_weighting\tw\ncondition\tc\tC\ts\ncode\tI50\tc\ts\n\
                    weighting\tw\tW\ts\nweight\tw\tc\t1\n";
        std::fs::write(dir.join("tiny.tsv"), tiny).unwrap();
        let (cat, notes) = Catalogue::builtin_and_dir(&dir).unwrap();
        std::fs::remove_dir_all(&dir).unwrap();
        assert!(cat.get("tiny").is_some());
        assert!(cat.get("hfrs").unwrap().version.starts_with("local-"));
        assert_eq!(cat.lists().len(), builtin::all().len() + 1);
        assert!(
            notes.iter().any(|n| n.starts_with("list 'hfrs' from ")
                && n.ends_with("replaces the built-in (hfrs.tsv) list")),
            "{notes:?}"
        );
    }
}
