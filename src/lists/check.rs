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

fn check_file(path: &Path) -> FileCheck {
    match load_file(path) {
        Ok(l) => FileCheck {
            path: path.to_path_buf(),
            list: Some(l.list),
            diagnostics: l.warnings,
        },
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
