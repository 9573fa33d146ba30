//! Validating list files: `morbus lists check`.
//!
//! [`check_path`] loads one file, or every list file of a directory, and
//! collects every error and warning with its file and line. The checks
//! themselves are those of the parser ([`super::parse`]) and of
//! [`super::load_file`] (file name and list name agree), plus, for a
//! directory, that no two lists share a name.

use std::path::{Path, PathBuf};

use super::{duplicate_names, list_files, load_file, CodeList, Diagnostic, Severity};

/// One checked file.
#[derive(Clone, Debug)]
pub struct FileCheck {
    pub path: PathBuf,
    /// The list, when it loaded (possibly with warnings).
    pub list: Option<CodeList>,
    pub diagnostics: Vec<Diagnostic>,
}

/// Everything found under a path.
#[derive(Clone, Debug, Default)]
pub struct CheckReport {
    pub files: Vec<FileCheck>,
    /// `*.tsv` files of a directory that are not lists (upper-case names).
    pub skipped: Vec<PathBuf>,
    /// Problems not tied to one file (an unreadable path, an empty
    /// directory, two files holding lists of the same name).
    pub general: Vec<Diagnostic>,
}

impl CheckReport {
    /// Every diagnostic, file by file, then the general ones.
    pub fn diagnostics(&self) -> impl Iterator<Item = &Diagnostic> {
        self.files
            .iter()
            .flat_map(|f| f.diagnostics.iter())
            .chain(self.general.iter())
    }

    pub fn errors(&self) -> usize {
        self.diagnostics()
            .filter(|d| d.severity == Severity::Error)
            .count()
    }

    pub fn warnings(&self) -> usize {
        self.diagnostics()
            .filter(|d| d.severity == Severity::Warning)
            .count()
    }

    /// Lists that loaded.
    pub fn lists(&self) -> impl Iterator<Item = &CodeList> {
        self.files.iter().filter_map(|f| f.list.as_ref())
    }
}

/// Whether a list is (also) written for ICD-10-CM: it names no edition, or
/// an `edition` record has the word `CM` (`ICD-10-CM`).
fn targets_cm(list: &CodeList) -> bool {
    list.editions.is_empty()
        || list.editions.iter().any(|e| {
            e.split(|c: char| !c.is_ascii_alphanumeric())
                .any(|w| w == "CM")
        })
}

/// Warnings for ranges that lie around ICD-10-CM letter categories (`C7A`
/// between `C77` and `C80`) without claiming them (the letter rule of
/// FORMAT.md), when no entry of the list names them either: the author of
/// a list for ICD-10-CM decides explicitly. Lists that name only other
/// editions (WHO ICD-10 has no letter categories) get none.
pub fn letter_category_warnings(list: &CodeList) -> Vec<Diagnostic> {
    let mut out = Vec::new();
    if !targets_cm(list) {
        return out;
    }
    let letters = crate::editions::letter_categories(crate::editions::Edition::Cm);
    let named = |cat: &[u8]| {
        list.codes.iter().any(|e| {
            let last = e.last.unwrap_or(e.first);
            if e.first.len() <= 3 {
                crate::code::range_claims(&e.first, &last, &cat[..e.first.len()])
            } else {
                crate::code::range_claims(&e.first, &last, cat)
            }
        })
    };
    for e in &list.codes {
        let Some(last) = e.last else { continue };
        let (lo, hi) = (&e.first.as_bytes()[..3], &last.as_bytes()[..3]);
        let around: Vec<String> = letters
            .iter()
            .filter(|c| lo <= &c[..] && &c[..] <= hi)
            .filter(|c| !crate::code::range_claims(&e.first, &last, &c[..]) && !named(&c[..]))
            .map(|c| String::from_utf8_lossy(c).into_owned())
            .collect();
        if around.is_empty() {
            continue;
        }
        let condition = list
            .conditions
            .get(e.condition)
            .map_or("", |c| c.key.as_str());
        out.push(Diagnostic::warning(
            &list.origin.to_string(),
            e.line,
            format!(
                "range '{}' lies around the ICD-10-CM letter categories {} but does not claim them (letter rule, FORMAT.md); name each that belongs to '{condition}' as an entry of its own",
                e.text,
                around.join(", "),
            ),
        ));
    }
    out
}

fn check_file(path: &Path) -> FileCheck {
    match load_file(path) {
        Ok(mut l) => {
            let extra = letter_category_warnings(&l.list);
            l.warnings.extend(extra);
            FileCheck {
                path: path.to_path_buf(),
                list: Some(l.list),
                diagnostics: l.warnings,
            }
        }
        Err(e) => FileCheck {
            path: path.to_path_buf(),
            list: None,
            diagnostics: e.diagnostics,
        },
    }
}

/// Checks a list file, or every list file of a directory.
pub fn check_path(path: &Path) -> CheckReport {
    let mut report = CheckReport::default();
    let shown = path.display().to_string();
    match std::fs::metadata(path) {
        Err(e) => report
            .general
            .push(Diagnostic::error(&shown, 0, format!("cannot read: {e}"))),
        Ok(m) if m.is_dir() => match list_files(path) {
            Err(e) => report.general.extend(e.diagnostics),
            Ok((files, skipped)) => {
                report.skipped = skipped;
                if files.is_empty() {
                    report.general.push(Diagnostic::error(
                        &shown,
                        0,
                        "no code lists (*.tsv files) in this directory".into(),
                    ));
                }
                report.files = files.iter().map(|p| check_file(p)).collect();
                let loaded: Vec<&CodeList> = report.lists().collect();
                let dups = duplicate_names(&loaded);
                report.general.extend(dups);
            }
        },
        Ok(_) => report.files.push(check_file(path)),
    }
    report
}
