//! Hand-worked patient histories: lookback windows, primary-diagnosis and
//! present-on-admission rules, hierarchies across episodes, and `explain`.
//!
//! Weights used in the expected values: Charlson et al., J Chronic Dis
//! 1987;40:373-83 (MI 1, heart failure 1, diabetes 1, diabetes with chronic
//! complications 2, any malignancy 2, mild liver disease 1, moderate/severe
//! liver disease 3, metastatic solid tumour 6), codes per Quan et al., Med
//! Care 2005;43:1130-9, Table 1; all from memory.

use std::io::Write;
use std::process::{Command, Stdio};

fn morbus(args: &[&str], stdin: &str) -> (i32, String, String) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_morbus"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(stdin.as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8(out.stdout).unwrap(),
        String::from_utf8(out.stderr).unwrap(),
    )
}

/// Scores a wide history and returns the Charlson 1987 score column.
fn wide(input: &str, extra: &[&str]) -> Vec<String> {
    let mut args = vec![
        "score",
        "--dx",
        "dx*",
        "--id",
        "patient",
        "--date",
        "admitted",
        "--index",
        "charlson:charlson1987",
    ];
    args.extend_from_slice(extra);
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    out.lines()
        .skip(1)
        .map(|l| l.rsplit(',').next().unwrap().to_string())
        .collect()
}

#[test]
fn window_ends_are_inclusive_and_one_day_more_is_out() {
    // 2023-01-10 is exactly 365 days before 2024-01-10; 2023-01-09 is 366.
    let input = "patient,admitted,dx1\n\
a,2024-01-10,\n\
a,2023-01-10,I21.0\n\
b,2024-01-10,\n\
b,2023-01-09,I21.0\n";
    assert_eq!(wide(input, &["--lookback", "365"]), ["1", "1", "0", "1"]);
    assert_eq!(wide(input, &["--lookback", "366"]), ["1", "1", "1", "1"]);
    assert_eq!(wide(input, &["--lookback", "0"]), ["0", "1", "0", "1"]);
    // Without a lookback every episode stands alone.
    let (code, out, _) = morbus(
        &["score", "--dx", "dx*", "--index", "charlson:charlson1987"],
        input,
    );
    assert_eq!(code, 0);
    let alone: Vec<&str> = out
        .lines()
        .skip(1)
        .map(|l| l.rsplit(',').next().unwrap())
        .collect();
    assert_eq!(alone, ["0", "1", "0", "1"]);
}

#[test]
fn later_episodes_never_count_and_input_order_does_not_matter() {
    // The only qualifying code is in the latest episode: earlier ones score 0.
    // Rows are deliberately out of date order.
    let input = "patient,admitted,dx1,dx2\n\
c,2024-03-01,C18.7,\n\
c,2024-01-01,,\n\
c,2024-02-01,J06.9,\n";
    assert_eq!(wide(input, &["--lookback", "730"]), ["2", "0", "0"]);
}

#[test]
fn episodes_of_the_same_day_count_each_other() {
    let input = "patient,admitted,dx1\n\
d,2024-05-05,I21.0\n\
d,2024-05-05,I50.0\n\
d,2024-05-04,E11.9\n";
    // Each same-day episode sees the other and the day before.
    assert_eq!(wide(input, &["--lookback", "1"]), ["3", "3", "1"]);
    assert_eq!(wide(input, &["--lookback", "0"]), ["2", "2", "1"]);
}

#[test]
fn hierarchy_applies_across_episodes() {
    // Mild liver disease (K70.3) in an old episode and moderate/severe
    // (I85.0) in the current one count once, as moderate/severe (3 points);
    // diabetes without complications (E11.9) earlier and with (E11.2) now: 2.
    let input = "patient,admitted,dx1,dx2\n\
e,2022-06-01,K70.3,E11.9\n\
e,2023-06-01,I85.0,E11.2\n";
    assert_eq!(wide(input, &["--lookback", "730"]), ["2", "5"]);
    assert_eq!(
        wide(input, &["--lookback", "730", "--no-hierarchy"]),
        ["2", "7"]
    );
}

#[test]
fn primary_diagnosis_excluded_on_the_current_episode_only() {
    // The first diagnosis column is the primary diagnosis.
    let input = "patient,admitted,dx1,dx2\n\
f,2024-01-01,I21.0,E11.9\n\
f,2024-02-01,C18.7,I50.0\n";
    // Episode 1: MI excluded, diabetes 1. Episode 2: malignancy excluded, heart
    // failure 1, earlier MI 1 (a prior primary counts) and diabetes 1.
    assert_eq!(
        wide(input, &["--lookback", "365", "--exclude-primary"]),
        ["1", "3"]
    );
    // Without the rule: episode 2 has malignancy 2 + heart failure 1 + MI 1
    // + diabetes 1 = 5.
    assert_eq!(wide(input, &["--lookback", "365"]), ["2", "5"]);
}

#[test]
fn long_layout_episodes_with_primary_and_present_on_admission() {
    let input = "patient,stay,admitted,code,is_primary,on_admission\n\
g,s2,2024-02-01,C78.1,1,Y\n\
g,s1,2024-01-01,I21.0,1,Y\n\
g,s1,2024-01-01,I50.0,0,N\n\
g,s2,2024-02-01,E11.9,0,N\n\
g,s2,2024-02-01,I50.0,0,W\n\
h,s9,2024-02-01,,0,Y\n";
    let base = [
        "score",
        "--layout",
        "long",
        "--id",
        "patient",
        "--episode",
        "stay",
        "--date",
        "admitted",
        "--dx",
        "code",
        "--index",
        "charlson:charlson1987",
        "--lookback",
        "365",
    ];
    let (code, out, err) = morbus(&base, input);
    assert_eq!(code, 0, "{err}");
    // One row per episode in order of first appearance. s2 sees s1: metastatic
    // 6 + MI 1 + heart failure 1 + diabetes 1 = 9; s1 alone: MI 1 + HF 1 = 2.
    assert_eq!(
        out,
        "patient,stay,charlson_charlson1987\ng,s2,9\ng,s1,2\nh,s9,0\n"
    );

    let mut args = base.to_vec();
    args.extend([
        "--exclude-primary",
        "--primary",
        "is_primary",
        "--poa",
        "on_admission",
    ]);
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    // s2: metastatic excluded (primary), diabetes excluded (not on admission,
    // N), heart failure counts (W); from s1 (earlier, all codes count): MI 1,
    // HF already counted: 1 + 1 = 2. s1: MI excluded (primary), HF excluded
    // (N): 0.
    assert_eq!(
        out,
        "patient,stay,charlson_charlson1987\ng,s2,2\ng,s1,0\nh,s9,0\n"
    );
    assert!(err.contains("primary diagnoses left out: 2"), "{err}");
    assert!(
        err.contains("codes not present on admission left out: 2"),
        "{err}"
    );

    // A configurable indicator set: only Y counts. s2's own heart failure
    // (W) is now left out, but s1's heart failure (N) still counts because
    // s1 is an earlier episode: MI 1 + heart failure 1 = 2 as before; the
    // summary shows one more code left out.
    let mut args2 = args.clone();
    args2.extend(["--poa-values", "Y"]);
    let (_, out, err) = morbus(&args2, input);
    assert_eq!(
        out,
        "patient,stay,charlson_charlson1987\ng,s2,2\ng,s1,0\nh,s9,0\n"
    );
    assert!(
        err.contains("codes not present on admission left out: 3"),
        "{err}"
    );
}

#[test]
fn missing_and_unreadable_dates() {
    let input = "patient,admitted,dx1\n\
k,2024-01-10,I21.0\n\
k,,I50.0\n\
k,10/01/2024,E11.9\n\
k,2024-01-11,\n";
    // Undated episodes are scored from their own codes alone and do not
    // reach other episodes' windows (one unreadable date in three is over
    // the default limit of 1%: allowed here).
    let allow = ["--max-unreadable-dates", "100"];
    assert_eq!(
        wide(input, &["--lookback", "365", allow[0], allow[1]]),
        ["1", "1", "1", "1"]
    );
    let (code, _, err) = morbus(
        &[
            "score",
            "--dx",
            "dx*",
            "--id",
            "patient",
            "--date",
            "admitted",
            "--lookback",
            "365",
            allow[0],
            allow[1],
        ],
        input,
    );
    assert_eq!(code, 0);
    assert!(err.contains("dates missing: 1, unreadable: 1"), "{err}");
    let (code, _, err) = morbus(
        &[
            "score",
            "--dx",
            "dx*",
            "--id",
            "patient",
            "--date",
            "admitted",
            "--lookback",
            "365",
            "--strict",
        ],
        input,
    );
    assert_eq!(code, 3);
    assert!(err.contains("line 3: missing date"), "{err}");
    // A date pattern reads the other spelling.
    let input2 = "patient,admitted,dx1\nk,10/01/2024,I21.0\nk,11/01/2024,\n";
    assert_eq!(
        wide(input2, &["--lookback", "1", "--date-format", "%d/%m/%Y"]),
        ["1", "1"]
    );
}

#[test]
fn lookback_needs_id_and_date() {
    let (code, _, err) = morbus(
        &["score", "--dx", "dx1", "--lookback", "365"],
        "a,dx1\n1,I21\n",
    );
    assert_eq!(code, 2);
    assert!(err.contains("--lookback needs --id"), "{err}");
    let (code, _, err) = morbus(
        &[
            "score",
            "--dx",
            "dx1",
            "--id",
            "a",
            "--date",
            "d",
            "--lookback",
            "soon",
        ],
        "a,d,dx1\n1,2024-01-01,I21\n",
    );
    assert_eq!(code, 2);
    assert!(err.contains("whole number of days"), "{err}");
}

#[test]
fn explain_accounts_for_every_point() {
    let input = "patient,admitted,dx1,dx2\n\
e,2022-06-01,K70.3,E11.9\n\
e,2023-06-01,I85.0,E11.2\n\
e,2023-06-01,I85.0,XYZ\n";
    let (code, out, err) = morbus(
        &[
            "explain",
            "--dx",
            "dx*",
            "--id",
            "patient",
            "--date",
            "admitted",
            "--lookback",
            "730",
            "--index",
            "charlson:charlson1987",
        ],
        input,
    );
    assert_eq!(code, 0, "{err}");
    let mut rdr = csv::Reader::from_reader(out.as_bytes());
    let head: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(
        head,
        [
            "patient",
            "row",
            "index",
            "source_row",
            "source_date",
            "code_as_written",
            "code",
            "condition",
            "weight",
            "status"
        ]
    );
    let rows: Vec<Vec<String>> = rdr
        .records()
        .map(|r| r.unwrap().iter().map(String::from).collect())
        .collect();
    // Row 2: its own I85.0 and E11.2 count; the other same-day episode's
    // I85.0 repeats; the earlier K70.3 and E11.9 are superseded.
    let row2: Vec<(&str, &str, &str)> = rows
        .iter()
        .filter(|r| r[1] == "2")
        .map(|r| (r[3].as_str(), r[6].as_str(), r[9].as_str()))
        .collect();
    assert_eq!(
        row2,
        [
            ("2", "I850", "counted"),
            ("2", "E112", "counted"),
            ("3", "I850", "repeated"),
            ("1", "K703", "superseded_by:liver_disease_moderate_severe"),
            (
                "1",
                "E119",
                "superseded_by:diabetes_with_chronic_complication"
            ),
            ("", "", "total"),
        ]
    );
    // Totals equal the scores of `score` with the same options, and the
    // counted weights add up to the totals.
    let (_, scored, _) = morbus(
        &[
            "score",
            "--dx",
            "dx*",
            "--id",
            "patient",
            "--date",
            "admitted",
            "--lookback",
            "730",
            "--index",
            "charlson:charlson1987",
        ],
        input,
    );
    let scores: Vec<String> = scored
        .lines()
        .skip(1)
        .map(|l| l.rsplit(',').next().unwrap().to_string())
        .collect();
    for (i, s) in scores.iter().enumerate() {
        let row = (i + 1).to_string();
        let total: Vec<&Vec<String>> = rows
            .iter()
            .filter(|r| r[1] == row && r[9] == "total")
            .collect();
        assert_eq!(&total[0][8], s);
        let counted: i64 = rows
            .iter()
            .filter(|r| r[1] == row && r[9] == "counted")
            .map(|r| r[8].parse::<i64>().unwrap())
            .sum();
        assert_eq!(counted.to_string(), *s);
    }
    // JSON lines carry the same fields.
    let (code, json, _) = morbus(
        &[
            "explain",
            "--dx",
            "dx*",
            "--id",
            "patient",
            "--date",
            "admitted",
            "--lookback",
            "730",
            "--index",
            "charlson:charlson1987",
            "--json",
        ],
        input,
    );
    assert_eq!(code, 0);
    let lines: Vec<serde_json::Value> = json
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(lines.len(), rows.len());
    assert_eq!(lines[0]["status"], rows[0][9].as_str());
}

#[test]
fn long_rows_of_one_episode_that_disagree_on_date_or_age_are_counted() {
    // Episode e1 of patient p: its second row gives another date, its third
    // another age; the first readable values count (2024-03-01, age 70), so
    // e0 of 2023-03-02 (365 days before) is in the window and its heart
    // failure counts. e2 agrees with itself; e3's first date is missing and
    // its second row supplies it (no disagreement).
    let input = "patient,episode,admitted,age,code\n\
p,e0,2023-03-02,69,I50.9\n\
p,e1,2024-03-01,70,I21.9\n\
p,e1,2024-03-09,70,E11.9\n\
p,e1,2024-03-01,71,\n\
p,e2,2024-05-01,70,C78.0\n\
p,e2,2024-05-01,70,\n\
p,e3,,70,\n\
p,e3,2024-06-01,70,\n";
    let args = [
        "score",
        "--layout",
        "long",
        "--id",
        "patient",
        "--episode",
        "episode",
        "--date",
        "admitted",
        "--age",
        "age",
        "--dx",
        "code",
        "--lookback",
        "365",
        "--index",
        "charlson:charlson1987",
    ];
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("units whose rows disagree on date or age: 1 (the first value is used)"),
        "{err}"
    );
    // e1: MI 1 + heart failure 1 (e0, in the window) + diabetes 1 = 3.
    let e1 = out.lines().find(|l| l.starts_with("p,e1,")).unwrap();
    assert!(e1.starts_with("p,e1,3,"), "{out}");

    // --strict stops at the first disagreeing row, with its line.
    let mut strict = args.to_vec();
    strict.push("--strict");
    let (code, _, err) = morbus(&strict, input);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("line 4: a row of a unit gives another date 2024-03-09 (the unit's first date is 2024-03-01) (--strict)"),
        "{err}"
    );
    // With the date fixed, the age is the first disagreement.
    let fixed = input.replace("e1,2024-03-09", "e1,2024-03-01");
    let (code, _, err) = morbus(&strict, &fixed);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("line 5: a row of a unit gives another age 71 (the unit's first age is 70)"),
        "{err}"
    );
}

#[test]
fn long_rows_of_one_id_that_disagree_on_age_are_counted_without_a_history() {
    // No --episode, no --lookback: the unit is the id. Unit a's rows give
    // ages 80 and 81: the first (80) is used, for the Charlson age points
    // (Charlson et al. 1994 age points, J Clin Epidemiol 1994;47:1245-51,
    // from memory: one point per decade from 50, so 80 gives 3 like 81).
    let input = "id,age,code\na,80,I21.9\na,81,I50.9\nb,60,\nb,60,C78.0\n";
    let args = [
        "score",
        "--layout",
        "long",
        "--id",
        "id",
        "--age",
        "age",
        "--dx",
        "code",
        "--index",
        "charlson:charlson1987",
    ];
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("units whose rows disagree on date or age: 1"),
        "{err}"
    );
    assert_eq!(out.lines().count(), 3, "{out}");
    let mut strict = args.to_vec();
    strict.push("--strict");
    let (code, _, err) = morbus(&strict, input);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("line 3: a row of a unit gives another age 81 (the unit's first age is 80)"),
        "{err}"
    );
}
