//! Hand-worked patient histories: lookback windows, primary-diagnosis and
//! present-on-admission rules, hierarchies across episodes, and `explain`.
//!
//! Weights used in the expected values: Charlson et al., J Chronic Dis
//! 1987;40:373-83 (MI 1, heart failure 1, diabetes 1, diabetes with chronic
//! complications 2, any malignancy 2, mild liver disease 1, moderate/severe
//! liver disease 3, metastatic solid tumour 6), codes per Quan et al., Med
//! Care 2005;43:1130-9, Table 1; all from memory.

mod common;

fn morbus(args: &[&str], stdin: &str) -> (i32, String, String) {
    let out = common::pipe(args, stdin.as_bytes());
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8(out.stdout).unwrap(),
        String::from_utf8(out.stderr).unwrap(),
    )
}

/// [`morbus`] with the command line written as one line (see
/// [`common::words`]).
fn run(line: &str, values: &[&str], stdin: &str) -> (i32, String, String) {
    morbus(&common::words(line, values), stdin)
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
    let (code, out, _) = run("score --dx dx* --index charlson:charlson1987", &[], input);
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
    let base = common::words(
        "score --layout long --id patient --episode stay --date admitted \
         --dx code --index charlson:charlson1987 --lookback 365",
        &[],
    );
    let (code, out, err) = morbus(&base, input);
    assert_eq!(code, 0, "{err}");
    // One row per episode in order of first appearance. s2 sees s1: metastatic
    // 6 + MI 1 + heart failure 1 + diabetes 1 = 9; s1 alone: MI 1 + HF 1 = 2.
    assert_eq!(
        out,
        "patient,stay,charlson_charlson1987\ng,s2,9\ng,s1,2\nh,s9,0\n"
    );

    let mut args = base.to_vec();
    args.extend(common::words(
        "--exclude-primary --primary is_primary --poa on_admission",
        &[],
    ));
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
    let (code, _, err) = run(
        "score --dx dx* --id patient --date admitted --lookback 365 {} {}",
        &[allow[0], allow[1]],
        input,
    );
    assert_eq!(code, 0);
    assert!(err.contains("dates missing: 1, unreadable: 1"), "{err}");
    let (code, _, err) = run(
        "score --dx dx* --id patient --date admitted --lookback 365 \
         --strict",
        &[],
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
    let (code, _, err) = run("score --dx dx1 --lookback 365", &[], "a,dx1\n1,I21\n");
    assert_eq!(code, 2);
    assert!(err.contains("--lookback needs --id"), "{err}");
    let (code, _, err) = run(
        "score --dx dx1 --id a --date d --lookback soon",
        &[],
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
    let (code, out, err) = run(
        "explain --dx dx* --id patient --date admitted --lookback 730 \
         --index charlson:charlson1987",
        &[],
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
            "status",
            "age_points"
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
    let (_, scored, _) = run(
        "score --dx dx* --id patient --date admitted --lookback 730 \
         --index charlson:charlson1987",
        &[],
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
    let (code, json, _) = run(
        "explain --dx dx* --id patient --date admitted --lookback 730 \
         --index charlson:charlson1987 --json",
        &[],
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
    let args = common::words(
        "score --layout long --id patient --episode episode --date admitted \
         --age age --dx code --lookback 365 --index charlson:charlson1987",
        &[],
    );
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains(
            "units whose rows disagree on date, age or a kept column: 1 (the first value is used)"
        ),
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
    let args = common::words(
        "score --layout long --id id --age age --dx code \
         --index charlson:charlson1987",
        &[],
    );
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("units whose rows disagree on date, age or a kept column: 1"),
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

/// Scores a wide history and returns the named output columns, row by row.
fn columns(input: &str, args: &[&str], names: &[&str]) -> Vec<Vec<String>> {
    let mut all = vec![
        "score", "--dx", "dx*", "--id", "patient", "--date", "admitted",
    ];
    all.extend_from_slice(args);
    let (code, out, err) = morbus(&all, input);
    assert_eq!(code, 0, "{err}");
    let mut lines = out.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let at: Vec<usize> = names
        .iter()
        .map(|n| {
            head.iter()
                .position(|h| h == n)
                .unwrap_or_else(|| panic!("{n}"))
        })
        .collect();
    lines
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            at.iter().map(|&i| f[i].to_string()).collect()
        })
        .collect()
}

#[test]
fn earlier_only_leaves_out_the_episode_and_its_day() {
    // Day 0: myocardial infarction (1) in one episode, heart failure (1) in
    // another of the same day; day 92: diabetes with chronic complications
    // (2). Charlson 1987 weights, see the top of the file.
    let input = "patient,admitted,dx1\n\
a,2024-03-01,I21.0\n\
a,2024-03-01,I50.0\n\
a,2024-06-01,E11.2\n";
    // Default: the episode itself and every episode up to its day.
    assert_eq!(wide(input, &["--lookback", "365"]), ["2", "2", "4"]);
    // Earlier days only: neither the episode nor its same-day sibling.
    assert_eq!(
        wide(input, &["--lookback", "365", "--window", "earlier-only"]),
        ["0", "0", "2"]
    );
    // The window's far end stays inclusive: day 0 is 92 days before day 92.
    assert_eq!(
        wide(input, &["--lookback", "92", "--window", "earlier-only"]),
        ["0", "0", "2"]
    );
    assert_eq!(
        wide(input, &["--lookback", "91", "--window", "earlier-only"]),
        ["0", "0", "0"]
    );
    // A zero-day window holds no earlier day.
    assert_eq!(
        wide(input, &["--lookback", "0", "--window", "earlier-only"]),
        ["0", "0", "0"]
    );
    assert_eq!(
        wide(input, &["--lookback", "all", "--window", "earlier-only"]),
        ["0", "0", "2"]
    );
}

#[test]
fn each_list_is_scored_over_its_own_window() {
    // Heart failure (I50.0) 548 days before the second episode: inside a
    // 730-day window, outside a 365-day one. I50.x is congestive heart
    // failure in both Charlson (weight 1, Charlson 1987) and Elixhauser
    // (Quan et al., Med Care 2005;43:1130-9, Table 2; from memory); the
    // Elixhauser count weighting counts conditions (common practice).
    let input = "patient,admitted,dx1\n\
a,2022-06-01,I50.0\n\
a,2023-12-01,\n";
    let names = ["charlson_charlson1987", "elixhauser_count"];
    let index = ["--index", "charlson:charlson1987,elixhauser:count"];
    let run = |lookback: &str| {
        let mut a = index.to_vec();
        a.extend(["--lookback", lookback]);
        columns(input, &a, &names)
    };
    assert_eq!(run("charlson=365,elixhauser=730")[1], ["0", "1"]);
    assert_eq!(run("elixhauser=730,charlson=365")[1], ["0", "1"]);
    assert_eq!(run("365,elixhauser=730")[1], ["0", "1"]);
    assert_eq!(run("730,elixhauser=365")[1], ["1", "0"]);
    // A list not named, with no bare DAYS, is scored from the episode alone.
    assert_eq!(run("charlson=730")[1], ["1", "0"]);
    assert_eq!(run("elixhauser=all")[1], ["0", "1"]);
    // The first episode has its own heart failure under every window.
    assert_eq!(run("charlson=365,elixhauser=730")[0], ["1", "1"]);
    // Earlier-only applies to the lists with a window; the others keep the
    // episode's own codes.
    let mut a = index.to_vec();
    a.extend(common::words(
        "--lookback elixhauser=730 --window earlier-only",
        &[],
    ));
    assert_eq!(columns(input, &a, &names), [["1", "0"], ["0", "1"]]);
}

#[test]
fn window_options_are_checked() {
    let input = "patient,admitted,dx1\na,2024-01-01,I21.0\n";
    let base = common::words("score --dx dx1 --id patient --date admitted", &[]);
    for (extra, message) in [
        (
            &["--lookback", "nosuchlist=30"][..],
            "--lookback names list 'nosuchlist'",
        ),
        (&["--lookback", "charlson=x"][..], "not 'x'"),
        (
            &["--lookback", "charlson=3,charlson=4"][..],
            "more than one window",
        ),
        (&["--lookback", "3,4"][..], "more than one window"),
        (
            &["--window", "earlier-only"][..],
            "--window is used with --lookback",
        ),
        (
            &["--lookback", "3", "--window", "before"][..],
            "--window takes",
        ),
    ] {
        let mut a = base.to_vec();
        a.extend_from_slice(extra);
        let (code, _, err) = morbus(&a, input);
        assert_eq!(code, 2, "{extra:?}: {err}");
        assert!(err.contains(message), "{extra:?}: {err}");
    }
}

#[test]
fn explain_shows_the_current_episode_left_out() {
    let input = "patient,admitted,dx1\n\
a,2024-03-01,I21.0\n\
a,2024-06-01,E11.2\n";
    let (code, out, err) = run(
        "explain --dx dx1 --id patient --date admitted --lookback 365 \
         --window earlier-only --index charlson:charlson1987",
        &[],
        input,
    );
    assert_eq!(code, 0, "{err}");
    // The second episode: its own diabetes left out, the earlier infarction
    // counted, total 1.
    let rows: Vec<&str> = out.lines().filter(|l| l.starts_with("a,2,")).collect();
    assert!(
        rows.iter()
            .any(|l| l.contains("E112") && l.ends_with("excluded:current_episode,")),
        "{out}"
    );
    assert!(
        rows.iter()
            .any(|l| l.contains("I210") && l.ends_with(",counted,")),
        "{out}"
    );
    assert!(rows.iter().any(|l| l.ends_with(",1,total,")), "{out}");
}

#[test]
fn long_layout_keeps_columns_with_the_first_value_and_counts_disagreements() {
    // Episode 1's rows give ward "north" then "" (empty: no disagreement);
    // episode 2's give "east" then "west" (a disagreement: "east" is kept).
    let input = "patient,episode,ward,unit_type,code\n\
a,1,north,acute,I21.0\n\
a,1,,acute,I50.0\n\
a,2,east,,E11.9\n\
a,2,west,rehab,C50.9\n\
b,9,,,\n";
    let args = common::words(
        "score --layout long --id patient --episode episode --dx code \
         --index charlson:charlson1987 --keep ward,unit_type",
        &[],
    );
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        out,
        "patient,episode,ward,unit_type,charlson_charlson1987\n\
a,1,north,acute,2\n\
a,2,east,rehab,3\n\
b,9,,,0\n"
    );
    assert!(
        err.contains("units whose rows disagree on date, age or a kept column: 1"),
        "{err}"
    );
    // --strict stops at the disagreeing row.
    let mut strict = args.to_vec();
    strict.push("--strict");
    let (code, _, err) = morbus(&strict, input);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("line 5: a row of a unit gives another value of column 'ward' west (the unit's first value of column 'ward' is east)"),
        "{err}"
    );
    // Repeated --keep, and the checks.
    let mut twice = args[..args.len() - 1].to_vec();
    twice.extend(["ward", "--keep", "unit_type"]);
    assert_eq!(morbus(&twice, input).1, out);
    let mut missing = args[..args.len() - 1].to_vec();
    missing.push("nosuch");
    assert_eq!(morbus(&missing, input).0, 2);
    let mut again = args[..args.len() - 1].to_vec();
    again.push("episode");
    let (code, _, err) = morbus(&again, input);
    assert_eq!(code, 2);
    assert!(err.contains("already in the output"), "{err}");
    let (code, _, err) = run("score --dx code --keep ward", &[], input);
    assert_eq!(code, 2);
    assert!(err.contains("--keep is for the long layout"), "{err}");
}

#[test]
fn explain_labels_rows_and_writes_json_numbers() {
    // Charlson age points: one per decade from 50 (50-59 1, 60-69 2, 70-79
    // 3; Charlson et al., J Clin Epidemiol 1994;47:1245-51, from memory, as
    // in tests/published.rs): age 72 gives 3. Congestive heart failure
    // weighs 1 (Charlson 1987, top of the file).
    let input = "patient,stay_ref,admitted,age,dx1\n\
a,S-17,2024-01-10,72,I50.0\n";
    let args = common::words(
        "explain --dx dx1 --id patient --date admitted --lookback 30 \
         --age age --index charlson:charlson1987 --label stay_ref",
        &[],
    );
    let (code, out, err) = morbus(&args, input);
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        out,
        "patient,stay_ref,row,index,source_row,source_date,code_as_written,code,condition,weight,status,age_points\n\
a,S-17,1,charlson:charlson1987,1,2024-01-10,I50.0,I500,congestive_heart_failure,1,counted,\n\
a,S-17,1,charlson:charlson1987,,2024-01-10,,,,1,total,\n\
a,S-17,1,charlson:charlson1987,,2024-01-10,,,,4,total_with_age:72,3\n"
    );
    let mut json = args.to_vec();
    json.push("--json");
    let (code, out, err) = morbus(&json, input);
    assert_eq!(code, 0, "{err}");
    let rows: Vec<serde_json::Value> = out
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(rows.len(), 3);
    assert_eq!(rows[0]["stay_ref"], "S-17");
    assert_eq!(rows[0]["row"], 1);
    assert_eq!(rows[0]["source_row"], 1);
    assert_eq!(rows[0]["weight"], 1);
    assert_eq!(rows[0]["age_points"], serde_json::Value::Null);
    assert_eq!(rows[1]["source_row"], serde_json::Value::Null);
    assert_eq!(rows[2]["weight"], 4);
    assert_eq!(rows[2]["age_points"], 3);
    assert_eq!(rows[2]["status"], "total_with_age:72");
    // A label that would repeat an output column is refused.
    let mut clash = args[..args.len() - 1].to_vec();
    clash.push("patient");
    assert_eq!(morbus(&clash, input).0, 2);
}

#[test]
fn explain_lists_each_index_window_sources() {
    // As in each_list_is_scored_over_its_own_window: the heart failure of
    // 548 days before counts for Elixhauser (730 days) but not Charlson
    // (365 days).
    let input = "patient,admitted,dx1\n\
a,2022-06-01,I50.0\n\
a,2023-12-01,\n";
    let (code, out, err) = run(
        "explain --dx dx1 --id patient --date admitted \
         --lookback charlson=365,elixhauser=730 \
         --index charlson:charlson1987,elixhauser:count",
        &[],
        input,
    );
    assert_eq!(code, 0, "{err}");
    let second: Vec<&str> = out.lines().filter(|l| l.starts_with("a,2,")).collect();
    assert_eq!(
        second,
        [
            "a,2,charlson:charlson1987,,2023-12-01,,,,0,total,",
            "a,2,elixhauser:count,1,2022-06-01,I50.0,I500,congestive_heart_failure,1,counted,",
            "a,2,elixhauser:count,,2023-12-01,,,,1,total,",
        ],
        "{out}"
    );
}
