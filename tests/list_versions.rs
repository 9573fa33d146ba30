//! Every built-in list's content is pinned in `code-lists/VERSIONS.tsv` by
//! (name, version, checksum): content that changes without a version bump
//! fails here, with a message saying what to do.

use std::path::Path;

use morbus::lists::{builtin, CodeList};

/// One line of VERSIONS.tsv.
#[derive(Debug, Clone, PartialEq)]
struct Recorded {
    name: String,
    version: String,
    checksum: String,
    line: usize,
}

fn read_versions(text: &str) -> Result<Vec<Recorded>, String> {
    let mut out = Vec::new();
    for (i, l) in text.lines().enumerate() {
        let t = l.trim();
        if t.is_empty() || t.starts_with('#') {
            continue;
        }
        let f: Vec<&str> = t.split('\t').map(str::trim).collect();
        let [name, version, checksum] = f.as_slice() else {
            return Err(format!(
                "VERSIONS.tsv:{}: expected NAME<TAB>VERSION<TAB>CHECKSUM, found '{t}'",
                i + 1
            ));
        };
        out.push(Recorded {
            name: name.to_string(),
            version: version.to_string(),
            checksum: checksum.to_string(),
            line: i + 1,
        });
    }
    Ok(out)
}

fn expected_line(list: &CodeList) -> String {
    format!("{}\t{}\t{}", list.name, list.version, list.checksum)
}

/// What is wrong between a built-in list and its recorded line, if anything.
fn compare(list: &CodeList, recorded: Option<&Recorded>) -> Result<(), String> {
    let name = &list.name;
    let Some(r) = recorded else {
        return Err(format!(
            "built-in list '{name}' is not recorded in code-lists/VERSIONS.tsv: add the line\n    {}",
            expected_line(list)
        ));
    };
    match (r.version == list.version, r.checksum == list.checksum) {
        (true, true) => Ok(()),
        (true, false) => Err(format!(
            "the content of built-in list '{name}' changed (checksum {}, recorded {} on line {} of \
             code-lists/VERSIONS.tsv) but its version is still {}.\n  To fix: bump the 'version' \
             record in code-lists/{name}.tsv, describe the change under a new heading in \
             code-lists/CHANGES-{name}.md, then replace line {} of code-lists/VERSIONS.tsv with\n    \
             {name}\t<new version>\t{}\n  (if the change was an accident, revert it instead)",
            list.checksum, r.checksum, r.line, list.version, r.line, list.checksum
        )),
        (false, _) => Err(format!(
            "built-in list '{name}' is at version {} but code-lists/VERSIONS.tsv line {} records \
             version {}: check that code-lists/CHANGES-{name}.md has a '## {}' entry, then \
             replace that line with\n    {}",
            list.version,
            r.line,
            r.version,
            list.version,
            expected_line(list)
        )),
    }
}

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn builtin_lists_match_recorded_versions() {
    let text = std::fs::read_to_string(root().join("code-lists/VERSIONS.tsv"))
        .expect("code-lists/VERSIONS.tsv must exist");
    let recorded = read_versions(&text).unwrap_or_else(|e| panic!("{e}"));
    assert!(
        !builtin::all().is_empty(),
        "no built-in lists were embedded"
    );
    let mut problems = Vec::new();
    for list in builtin::all() {
        let r = recorded.iter().find(|r| r.name == list.name);
        if let Err(e) = compare(list, r) {
            problems.push(e);
        }
    }
    for r in &recorded {
        if builtin::all().iter().all(|l| l.name != r.name) {
            problems.push(format!(
                "code-lists/VERSIONS.tsv line {} records '{}', which is not a built-in list: remove the line",
                r.line, r.name
            ));
        }
    }
    assert!(problems.is_empty(), "\n{}\n", problems.join("\n\n"));
}

#[test]
fn every_builtin_version_has_a_change_log_entry() {
    for list in builtin::all() {
        let path = root().join(format!("code-lists/CHANGES-{}.md", list.name));
        let text = std::fs::read_to_string(&path).unwrap_or_else(|e| {
            panic!(
                "built-in list '{}' needs a change log {}: {e}",
                list.name,
                path.display()
            )
        });
        let heading = format!("## {} ", list.version);
        let heading_alone = format!("## {}", list.version);
        assert!(
            text.lines()
                .any(|l| l.starts_with(&heading) || l.trim_end() == heading_alone),
            "{} has no '## {}' heading for the current version of '{}'",
            path.display(),
            list.version,
            list.name
        );
    }
}

/// The comparison itself catches a content change without a version bump,
/// and accepts the recorded state.
#[test]
fn a_content_change_without_version_bump_is_caught() {
    let original = builtin::all()[0].clone();
    let rec = Recorded {
        name: original.name.clone(),
        version: original.version.clone(),
        checksum: original.checksum.clone(),
        line: 3,
    };
    assert_eq!(compare(&original, Some(&rec)), Ok(()));

    // Drop one code entry: the checksum changes, the version does not.
    let mut edited = original.clone();
    edited.codes.remove(0);
    edited.checksum = morbus::lists::checksum(&edited);
    assert_ne!(edited.checksum, original.checksum);
    let msg = compare(&edited, Some(&rec)).unwrap_err();
    assert!(msg.contains("bump the 'version'"), "{msg}");
    assert!(msg.contains(&edited.checksum), "{msg}");

    // Bumped version, VERSIONS.tsv not updated yet.
    edited.version.push_str(".1");
    let msg = compare(&edited, Some(&rec)).unwrap_err();
    assert!(msg.contains("replace that line"), "{msg}");

    // Not recorded at all.
    let msg = compare(&original, None).unwrap_err();
    assert!(msg.contains("add the line"), "{msg}");
}

#[test]
fn versions_file_parser_rejects_short_lines() {
    assert!(read_versions("# c\ncharlson\t2026.1\n").is_err());
    let v = read_versions("# c\n\ncharlson\t2026.1\tabc\n").unwrap();
    assert_eq!(v.len(), 1);
    assert_eq!(v[0].line, 3);
}
