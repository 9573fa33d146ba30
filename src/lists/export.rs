//! An editable copy of a list: `morbus lists export`.
//!
//! The copy is the list's canonical text (see [`canonical_text`]) under a
//! comment header that names the list, its version, where it came from and
//! its checksum, followed by the comments that opened the original file
//! (cautions, citations). Loading the copy gives the same checksum as the
//! original: comments are not content.

use std::path::{Path, PathBuf};

use super::{builtin, canonical_text, CodeList, Origin};
use crate::Error;

/// Header lines written by an export start with this, so that exporting an
/// exported list does not stack headers.
pub const EXPORT_MARK: &str = "# morbus export:";

/// The comment lines that open a list file, before its first record
/// (without lines of an earlier export header).
pub fn leading_comments(text: &str) -> Vec<&str> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    text.lines()
        .map(str::trim_end)
        .take_while(|l| l.trim().is_empty() || l.trim_start().starts_with('#'))
        .filter(|l| !l.trim().is_empty() && !l.starts_with(EXPORT_MARK))
        .collect()
}

/// The text the list was loaded from: the embedded text of a built-in, or
/// the file's current text (`None` if it cannot be read).
pub fn original_text(list: &CodeList) -> Option<String> {
    match &list.origin {
        Origin::Builtin(_) => builtin::text(&list.name).map(str::to_string),
        Origin::File(p) => super::read_list_bytes(p)
            .ok()
            .and_then(|b| String::from_utf8(b).ok()),
    }
}

/// The text of an exported copy. `original` is the text the list was loaded
/// from, whose opening comments are carried over.
pub fn export_text(list: &CodeList, original: Option<&str>) -> String {
    let mut out = String::new();
    let m = EXPORT_MARK;
    out.push_str(&format!(
        "{m} list '{}' version {} from {}, exported by morbus {}\n",
        list.name,
        list.version,
        list.origin,
        crate::VERSION
    ));
    out.push_str(&format!(
        "{m} checksum {} (of the content as exported; comments do not count)\n",
        list.checksum
    ));
    out.push_str(&format!(
        "{m} bump 'version' whenever the content changes; 'morbus lists check' validates, 'morbus lists diff {} FILE' compares\n",
        list.name
    ));
    if let Some(text) = original {
        let comments = leading_comments(text);
        if !comments.is_empty() {
            for c in comments {
                out.push_str(c);
                out.push('\n');
            }
        }
    }
    out.push('\n');
    out.push_str(&canonical_text(list));
    out
}

/// Writes `DIR/NAME.tsv` (creating `DIR` if needed) and returns its path.
/// An existing file, or a symbolic link of that name (even one to nothing),
/// is only replaced when `overwrite` is set; a link to a file then has that
/// file replaced, a link to nothing is replaced by the file. The file is
/// written atomically (see [`crate::io::atomic`]).
pub fn export_to_dir(list: &CodeList, dir: &Path, overwrite: bool) -> Result<PathBuf, Error> {
    let path = dir.join(format!("{}.tsv", list.name));
    let existing = std::fs::symlink_metadata(&path).ok();
    if existing.is_some() && !overwrite {
        let what = if path.exists() {
            "already exists"
        } else {
            "is a symbolic link to a file that does not exist"
        };
        return Err(Error::Usage(format!(
            "{} {what}; remove it or use --force to replace it",
            path.display()
        )));
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| Error::io(format!("cannot create {}", dir.display()), e))?;
    if existing.is_some_and(|m| m.file_type().is_symlink()) && !path.exists() {
        std::fs::remove_file(&path)
            .map_err(|e| Error::io(format!("cannot replace {}", path.display()), e))?;
    }
    let text = export_text(list, original_text(list).as_deref());
    crate::io::write_atomically(&path, text.as_bytes())?;
    Ok(path)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lists::parse;

    #[test]
    fn export_round_trips_every_builtin() {
        for l in builtin::all() {
            let text = export_text(l, builtin::text(&l.name));
            let back = parse(&text, Origin::File("x.tsv".into())).unwrap().list;
            assert_eq!(back.checksum, l.checksum, "{}", l.name);
            assert!(text.contains(&l.checksum));
            // A re-export carries one header only.
            let again = export_text(&back, Some(&text));
            assert_eq!(again.matches("exported by morbus").count(), 1);
            assert_eq!(again, text.replace(&l.origin.to_string(), "x.tsv"));
        }
    }

    #[test]
    fn opening_comments_are_kept() {
        let src = "# Caution: invented\n\n# second\nlist\tt\n# inside\nversion\t1\n";
        assert_eq!(leading_comments(src), ["# Caution: invented", "# second"]);
    }
}
