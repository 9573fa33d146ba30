//! A list as a flat table of prefixes: every code entry expanded (ranges into
//! their codes) exactly as the matcher expands it, one row per (condition,
//! prefix). This is what SQL needs to match codes with an equality join:
//! `morbus sql` loads it into a table, and `morbus lists export NAME
//! --format prefixes DIR` writes it as CSV for people writing their own SQL.

use std::path::{Path, PathBuf};

use super::{format_scaled, CodeEntry, CodeList};
use crate::code::{expand_range, Code};
use crate::lists::parse::MAX_RANGE_CODES;
use crate::Error;

/// One prefix of a condition: a code claims the condition when it starts
/// with `prefix`.
#[derive(Clone, Debug)]
pub struct PrefixRow<'a> {
    /// Index into [`CodeList::conditions`].
    pub condition: usize,
    pub prefix: Code,
    /// The first code entry (in file order) giving this prefix.
    pub entry: &'a CodeEntry,
}

/// Every (condition, prefix) of a list, by condition (in the list's order)
/// then prefix; a prefix given by several entries of one condition comes
/// once, with the first entry.
pub fn prefix_rows(list: &CodeList) -> Vec<PrefixRow<'_>> {
    let mut rows: Vec<(usize, Code, usize)> = Vec::new();
    for (i, entry) in list.codes.iter().enumerate() {
        let last = entry.last.unwrap_or(entry.first);
        expand_range(&entry.first, &last, MAX_RANGE_CODES, |c| {
            rows.push((entry.condition, c, i));
        });
    }
    rows.sort_by(|a, b| (a.0, a.1.as_bytes(), a.2).cmp(&(b.0, b.1.as_bytes(), b.2)));
    rows.dedup_by(|b, a| a.0 == b.0 && a.1 == b.1);
    rows.into_iter()
        .map(|(condition, prefix, i)| PrefixRow {
            condition,
            prefix,
            entry: &list.codes[i],
        })
        .collect()
}

/// A decimal in its shortest exact form (`1`, `0.5`, `7.1`).
pub fn points_text(scaled: i64) -> String {
    let mut out = Vec::new();
    format_scaled(scaled, super::SCALE_DECIMALS, &mut out);
    let mut s = String::from_utf8(out).unwrap_or_default();
    if s.contains('.') {
        while s.ends_with('0') {
            s.pop();
        }
        if s.ends_with('.') {
            s.pop();
        }
    }
    s
}

fn csv_field(text: &str, out: &mut String) {
    if text.contains([',', '"', '\n', '\r']) {
        out.push('"');
        out.push_str(&text.replace('"', "\"\""));
        out.push('"');
    } else {
        out.push_str(text);
    }
}

/// The flat table as CSV: `list,version,condition,label,prefix,entry`, then
/// one `points_<weighting>` column per weighting of the list.
///
/// ```
/// let cat = morbus::lists::Catalogue::builtin();
/// let csv = morbus::lists::prefixes_csv(cat.get("hfrs").unwrap());
/// let header = csv.lines().next().unwrap();
/// assert_eq!(header, "list,version,condition,label,prefix,entry,points_gilbert2018");
/// ```
pub fn prefixes_csv(list: &CodeList) -> String {
    let mut out = String::from("list,version,condition,label,prefix,entry");
    for w in &list.weightings {
        out.push_str(",points_");
        out.push_str(&w.name);
    }
    out.push('\n');
    for row in prefix_rows(list) {
        let c = &list.conditions[row.condition];
        for (i, f) in [
            list.name.as_str(),
            list.version.as_str(),
            c.key.as_str(),
            c.label.as_str(),
            row.prefix.as_str(),
            row.entry.text.as_str(),
        ]
        .iter()
        .enumerate()
        {
            if i > 0 {
                out.push(',');
            }
            csv_field(f, &mut out);
        }
        for w in &list.weightings {
            out.push(',');
            out.push_str(&points_text(w.weights[row.condition]));
        }
        out.push('\n');
    }
    out
}

/// Writes `DIR/NAME-prefixes.csv` (atomically: a temporary file renamed
/// into place). An existing file is replaced only with `force`.
pub fn export_prefixes_to_dir(list: &CodeList, dir: &Path, force: bool) -> Result<PathBuf, Error> {
    std::fs::create_dir_all(dir)
        .map_err(|e| Error::io(format!("cannot create {}", dir.display()), e))?;
    let path = dir.join(format!("{}-prefixes.csv", list.name));
    if path.exists() && !force {
        return Err(Error::Usage(format!(
            "{} exists; use --force to replace it",
            path.display()
        )));
    }
    let tmp = dir.join(format!(".{}-prefixes.csv.tmp", list.name));
    std::fs::write(&tmp, prefixes_csv(list))
        .map_err(|e| Error::io(format!("cannot write {}", tmp.display()), e))?;
    std::fs::rename(&tmp, &path).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::io(format!("cannot write {}", path.display()), e)
    })?;
    Ok(path)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::code::{read_code, Reading};
    use crate::lists::Catalogue;

    /// The flat table claims exactly what the list's entries claim: for a
    /// sample of codes, the conditions found by prefix equality equal
    /// `CodeList::conditions_of`.
    #[test]
    fn prefixes_claim_what_the_entries_claim() {
        let cat = Catalogue::builtin();
        for list in cat.lists() {
            let rows = prefix_rows(list);
            for raw in [
                "I21", "I219", "C787", "E112", "E119", "K703", "F000", "C4A9", "N185", "Z992",
                "I10", "I110", "G309", "R54", "W19", "Z740",
            ] {
                let Reading::Valid(code) = read_code(raw.as_bytes()) else {
                    panic!("{raw}")
                };
                let mut by_prefix: Vec<usize> = rows
                    .iter()
                    .filter(|r| code.as_bytes().starts_with(r.prefix.as_bytes()))
                    .map(|r| r.condition)
                    .collect();
                by_prefix.sort_unstable();
                by_prefix.dedup();
                assert_eq!(by_prefix, list.conditions_of(&code), "{} {raw}", list.name);
            }
        }
    }

    #[test]
    fn points_are_written_exactly() {
        assert_eq!(points_text(0), "0");
        assert_eq!(points_text(71_000), "7.1");
        assert_eq!(points_text(-10_000), "-1");
        assert_eq!(points_text(5), "0.0005");
    }
}
