//! The built-in lists, embedded at build time from `code-lists/*.tsv` and
//! parsed at first use by the same parser as user lists.

use std::sync::OnceLock;

use super::{parse, CodeList, Diagnostic, Origin};

mod generated {
    include!(concat!(env!("OUT_DIR"), "/builtin_lists.rs"));
}

struct Builtins {
    lists: Vec<CodeList>,
    problems: Vec<Diagnostic>,
}

fn load() -> &'static Builtins {
    static CELL: OnceLock<Builtins> = OnceLock::new();
    CELL.get_or_init(|| {
        let mut lists = Vec::new();
        let mut problems = Vec::new();
        for name in generated::NAMES {
            let Some(&(file, text)) = generated::FILES.get(name) else {
                continue;
            };
            match parse(text, Origin::Builtin(file)) {
                Ok(l) => {
                    problems.extend(l.warnings);
                    lists.push(l.list);
                }
                Err(e) => problems.extend(e.diagnostics),
            }
        }
        Builtins { lists, problems }
    })
}

/// Every built-in list, sorted by name.
pub fn all() -> &'static [CodeList] {
    &load().lists
}

/// Errors and warnings met while parsing the built-in lists. The test suite
/// keeps this to the published lists' known overlaps only.
pub fn problems() -> &'static [Diagnostic] {
    &load().problems
}

/// The embedded text of a built-in list.
pub fn text(name: &str) -> Option<&'static str> {
    generated::FILES.get(name).map(|&(_, t)| t)
}

/// Names of the built-in lists.
pub fn names() -> &'static [&'static str] {
    generated::NAMES
}
