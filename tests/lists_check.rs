//! `morbus lists check`: one test per check, each driving the binary on an
//! invented list with one planted problem and looking for `file:line:`.

mod common;

use common::TempDir;

/// A valid invented list of 13 lines; a line appended as the k-th extra
/// line is line 13 + k.
const BASE: &str = "# invented list for tests
list\ttiny
version\t1.0
title\tTiny invented list
source\tInvented for tests
default_weighting\tpoints
condition\talpha\tAlpha\tInvented
condition\tbeta\tBeta\tInvented
code\tI50\talpha\tInvented
code\tJ40-J44\tbeta\tInvented
weighting\tpoints\tPoints\tInvented
weight\tpoints\talpha\t1
weight\tpoints\tbeta\t2
";

fn with(extra: &[&str]) -> String {
    let mut s = BASE.to_string();
    for l in extra {
        s.push_str(l);
        s.push('\n');
    }
    s
}

/// Checks a list and returns (exit code, stdout, file path).
fn check(text: &str) -> (i32, String, String, TempDir) {
    let dir = TempDir::new("check");
    let path = dir.write("tiny.tsv", text);
    let r = common::run("lists check {}", &[&path]);
    (r.code, r.stdout, path, dir)
}

fn assert_error(text: &str, line: usize, needle: &str) {
    let (code, out, path, _d) = check(text);
    let prefix = format!("{path}:{line}: error: ");
    assert_eq!(code, 2, "exit code; output:\n{out}");
    assert!(
        out.lines()
            .any(|l| l.starts_with(&prefix) && l.contains(needle)),
        "expected a line starting '{prefix}' containing '{needle}'; output:\n{out}"
    );
}

#[test]
fn a_valid_list_passes() {
    let (code, out, path, _d) = check(BASE);
    assert_eq!(code, 0, "{out}");
    assert!(
        out.contains(&format!("{path}: ok: list 'tiny' version 1.0")),
        "{out}"
    );
    assert!(out.contains("0 error(s), 0 warning(s)"), "{out}");
}

#[test]
fn unparsable_lines_are_errors() {
    // Spaces instead of TABs.
    assert_error(&with(&["code I21 alpha Invented"]), 14, "no TAB");
    // Unknown record kind.
    assert_error(&with(&["cod\tI21\talpha"]), 14, "unknown record kind 'cod'");
    // Too many fields.
    assert_error(
        &with(&["code\tI21\talpha\tInvented\textra"]),
        14,
        "at most 3 fields",
    );
    // A record before 'list'.
    assert_error(&format!("version\t1\n{}", &BASE[26..]), 1, "first record");
}

#[test]
fn malformed_codes_are_errors() {
    assert_error(
        &with(&["code\t1234\talpha\tInvented"]),
        14,
        "'1234' is not an ICD-10 code",
    );
    assert_error(
        &with(&["code\tI5\talpha\tInvented"]),
        14,
        "not an ICD-10 code",
    );
    assert_error(
        &with(&["code\tI50-J\talpha\tInvented"]),
        14,
        "range end 'J' is not an ICD-10 code",
    );
    assert_error(
        &with(&["code\tI50-I51-I52\talpha\tInvented"]),
        14,
        "neither a code nor a range",
    );
}

#[test]
fn reversed_ranges_are_errors() {
    assert_error(
        &with(&["code\tK75-K70\talpha\tInvented"]),
        14,
        "is reversed",
    );
}

#[test]
fn mixed_length_ranges_are_errors() {
    assert_error(
        &with(&["code\tK70-K75.9\talpha\tInvented"]),
        14,
        "mixes lengths",
    );
}

#[test]
fn a_code_of_two_conditions_is_a_warning() {
    // J44.1 is in J40-J44 (beta) and is added to alpha.
    let (code, out, path, _d) = check(&with(&["code\tJ44.1\talpha\tInvented"]));
    assert_eq!(code, 0, "a warning must not fail the check:\n{out}");
    let prefix = format!("{path}:14: warning: ");
    assert!(
        out.lines().any(|l| l.starts_with(&prefix)
            && l.contains("'J44.1' of 'alpha' is also claimed by line 10 ('J40-J44') of 'beta'")),
        "{out}"
    );
    assert!(out.contains("0 error(s), 1 warning(s)"), "{out}");
}

#[test]
fn weights_for_unknown_conditions_are_errors() {
    assert_error(
        &with(&["weight\tpoints\tgamma\t1"]),
        14,
        "weight in 'points' for unknown condition 'gamma'",
    );
    assert_error(
        &with(&["weight\tother\talpha\t1"]),
        14,
        "weight for unknown weighting 'other'",
    );
}

#[test]
fn conditions_without_a_weight_are_errors() {
    // gamma has codes but no weight in 'points' (declared on line 11).
    assert_error(
        &with(&[
            "condition\tgamma\tGamma\tInvented",
            "code\tK70\tgamma\tInvented",
        ]),
        11,
        "weighting 'points' has no weight for condition 'gamma'",
    );
}

#[test]
fn hierarchy_cycles_are_errors() {
    assert_error(
        &with(&[
            "supersedes\talpha\tbeta\tInvented",
            "supersedes\tbeta\talpha\tInvented",
        ]),
        14,
        "hierarchy has a cycle: alpha > beta > alpha",
    );
    // A longer cycle, and a condition superseding itself.
    assert_error(
        &with(&[
            "condition\tgamma\tGamma\tInvented",
            "code\tK70\tgamma\tInvented",
            "weight\tpoints\tgamma\t1",
            "supersedes\talpha\tbeta\tInvented",
            "supersedes\tbeta\tgamma\tInvented",
            "supersedes\tgamma\talpha\tInvented",
        ]),
        17,
        "alpha > beta > gamma > alpha",
    );
    assert_error(
        &with(&["supersedes\talpha\talpha\tInvented"]),
        14,
        "cannot supersede itself",
    );
}

#[test]
fn every_problem_is_reported_at_once() {
    let (code, out, path, _d) = check(&with(&[
        "code\tK75-K70\talpha\tInvented",
        "code\tI50-I509\tbeta\tInvented",
        "weight\tpoints\tgamma\t1",
    ]));
    assert_eq!(code, 2);
    for line in [14, 15, 16] {
        assert!(out.contains(&format!("{path}:{line}: error: ")), "{out}");
    }
    assert!(out.contains("3 error(s)"), "{out}");
}

#[test]
fn a_directory_is_checked_file_by_file() {
    let dir = TempDir::new("checkdir");
    let good = dir.write("tiny.tsv", BASE);
    let bad = dir.write("other.tsv", &with(&["code\tK75-K70\talpha\tInvented"]));
    dir.write("VERSIONS.tsv", "not a list\n");
    let r = common::run("lists check {}", &[&dir.path().display().to_string()]);
    assert_eq!(r.code, 2, "{}", r.stdout);
    assert!(
        r.stdout.contains(&format!("{bad}:14: error: ")),
        "{}",
        r.stdout
    );
    // other.tsv holds list 'tiny': a name mismatch warning, and two lists
    // with one name.
    assert!(r.stdout.contains(&format!("{good}: ok:")), "{}", r.stdout);
    assert!(
        r.stdout.contains("VERSIONS.tsv: note: skipped"),
        "{}",
        r.stdout
    );
}

#[test]
fn two_lists_with_one_name_and_a_misnamed_file() {
    let dir = TempDir::new("dupes");
    dir.write("tiny.tsv", BASE);
    let copy = dir.write("copy.tsv", BASE);
    let r = common::run("lists check {}", &[&dir.path().display().to_string()]);
    assert_eq!(r.code, 2, "{}", r.stdout);
    assert!(
        r.stdout
            .contains(&format!("{copy}:2: warning: the file is named 'copy.tsv'")),
        "{}",
        r.stdout
    );
    assert!(
        r.stdout.contains("list name 'tiny' is also used by"),
        "{}",
        r.stdout
    );
}

#[test]
fn a_missing_path_is_an_error() {
    let r = common::run("lists check no/such/list.tsv", &[]);
    assert_eq!(r.code, 2);
    assert!(
        r.stdout.contains("no/such/list.tsv: error: cannot read"),
        "{}",
        r.stdout
    );
}

#[test]
fn the_builtin_lists_check_without_errors() {
    let r = common::run("lists check code-lists", &[]);
    assert_eq!(r.code, 0, "{}", r.stdout);
    for name in morbus::lists::builtin::names() {
        assert!(
            r.stdout.contains(&format!("code-lists/{name}.tsv: ok:")),
            "{}",
            r.stdout
        );
    }
}

#[test]
fn untraceable_entries_are_warnings() {
    // A code without a source, and a condition without codes.
    let (code, out, path, _d) = check(&with(&[
        "code\tK70\talpha",
        "condition\tgamma\tGamma\tInvented",
        "weight\tpoints\tgamma\t0",
    ]));
    assert_eq!(code, 0, "{out}");
    assert!(
        out.contains(&format!("{path}:14: warning: code 'K70' has no source")),
        "{out}"
    );
    assert!(
        out.contains(&format!(
            "{path}:15: warning: condition 'gamma' has no codes"
        )),
        "{out}"
    );
}

#[test]
fn a_file_that_is_not_text_is_an_error() {
    let dir = TempDir::new("binary");
    let path = dir.path().join("tiny.tsv");
    std::fs::write(&path, b"list\ttiny\n\xff\xfe\n").unwrap();
    let r = common::run("lists check {}", &[&path.display().to_string()]);
    assert_eq!(r.code, 2);
    assert!(r.stdout.contains("error: not UTF-8 text"), "{}", r.stdout);
}

#[test]
fn ranges_around_icd10cm_letter_categories_are_warnings() {
    // ICD-10-CM has the letter categories C7A, C7B (between C77 and C80) and
    // C4A (between C45 and C58): ICD-10-CM tabular list, from memory; the
    // compiled ICD-10-CM set is checked against simple-icd-10-cm in
    // python/tests/test_editions.py. A list that names no edition may be
    // used on ICD-10-CM data: its author decides explicitly.
    let text = with(&[
        "code\tC77-C80\talpha\tInvented",
        "code\tC45-C58\tbeta\tInvented",
        "code\tC4A\tbeta\tInvented",
    ]);
    let (code, out, path, _d) = check(&text);
    assert_eq!(code, 0, "{out}");
    assert!(
        out.contains(&format!(
            "{path}:14: warning: range 'C77-C80' lies around the ICD-10-CM letter categories C7A, C7B but does not claim them (letter rule, FORMAT.md); name each that belongs to 'alpha' as an entry of its own"
        )),
        "{out}"
    );
    // C4A is named by line 16: no warning for C45-C58.
    assert!(!out.contains(&format!("{path}:15:")), "{out}");
    assert!(out.contains("0 error(s), 1 warning(s)"), "{out}");
    // A range with a letter end claims its letters: nothing to warn about.
    let (_, out, path, _d) = check(&with(&["code\tC7A-C80\talpha\tInvented"]));
    assert!(!out.contains(&format!("{path}:14:")), "{out}");
    // A list for ICD-10-CM is warned; one for WHO ICD-10 only is not (WHO
    // has no letter categories).
    let cm = with(&["code\tC77-C80\talpha\tInvented"]).replace(
        "source\tInvented for tests",
        "edition\tICD-10-CM\nsource\tInvented for tests",
    );
    let (_, out, _, _d) = check(&cm);
    assert!(
        out.contains("lies around the ICD-10-CM letter categories C7A, C7B"),
        "{out}"
    );
    let who = cm.replace("edition\tICD-10-CM", "edition\tICD-10 (WHO)");
    let (_, out, _, _d) = check(&who);
    assert!(out.contains("0 error(s), 0 warning(s)"), "{out}");
}
