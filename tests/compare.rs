//! End-to-end runs of `morbus compare`: the units analysed, the numbers
//! against independent computations in this file, clear messages for bad
//! input (never NaN), the JSON and HTML outputs, and a look at the report in
//! a real browser where one is installed.

mod common;

use std::path::PathBuf;
use std::process::{Command, Stdio};

use common::{json_file as json, morbus_with_input as morbus};

/// Seeded test data: the top 53 bits of the generator's state.
fn lcg(seed: u64) -> common::Lcg {
    common::Lcg::new(seed, 53)
}

/// Runs `morbus compare LINE` on `data` (see [`common::words`]).
fn compare(line: &str, values: &[&str], data: &[u8]) -> common::Run {
    let args = [&["compare"][..], &common::words(line, values)].concat();
    morbus(&args, data)
}

/// [`compare`] with `--json` to the file `name`, which must succeed: the
/// run and the JSON.
fn compare_json(
    name: &str,
    line: &str,
    values: &[&str],
    data: &[u8],
) -> (common::Run, serde_json::Value) {
    let out = tmp(name);
    let values = [values, &[out.to_str().unwrap()]].concat();
    let run = compare(&format!("{line} --json {{}}"), &values, data);
    assert_eq!(run.code, 0, "{}", run.stderr);
    (run, json(&out))
}

fn tmp(name: &str) -> PathBuf {
    common::scratch("compare", name)
}

const CODES: &[&str] = &[
    "I21.9", "I50.0", "E11.9", "E11.2", "C78.0", "C18.7", "J44.9", "N18.5", "F03", "R29.6", "W19",
    "I10", "E66.9", "F32.9", "K70.3", "G30.9", "I63.9", "S72.0", "N39.0", "Z74.1", "I48.9",
];

/// A wide extract of `n` episodes (columns episode, patient, date, age, sex,
/// dx1..dx6, died); the outcome depends on age and the number of codes; every
/// `missing_every`-th episode has an empty outcome.
fn extract(n: usize, seed: u64, missing_every: usize) -> String {
    let mut r = lcg(seed);
    let mut s = String::from("episode,patient,date,age,sex,dx1,dx2,dx3,dx4,dx5,dx6,died\n");
    for e in 0..n {
        let age = 30 + r.below(65);
        let k = r.below(7) as usize;
        let mut dx: Vec<&str> = Vec::new();
        for _ in 0..k {
            let c = CODES[r.below(CODES.len() as u64) as usize];
            if !dx.contains(&c) {
                dx.push(c);
            }
        }
        let eta = -4.0 + 0.035 * age as f64 + 0.4 * dx.len() as f64;
        let died = r.uniform() < 1.0 / (1.0 + (-eta).exp());
        let sex = if r.below(2) == 0 { "F" } else { "M" };
        let outcome = if missing_every > 0 && e % missing_every == missing_every - 1 {
            ""
        } else if died {
            "1"
        } else {
            "0"
        };
        let patient = r.below(n as u64 / 3 + 1);
        let date = format!("2025-{:02}-{:02}", 1 + r.below(12), 1 + r.below(28));
        let mut row = format!("E{e},P{patient},{date},{age},{sex}");
        for i in 0..6 {
            row.push(',');
            row.push_str(dx.get(i).copied().unwrap_or(""));
        }
        row.push(',');
        row.push_str(outcome);
        row.push('\n');
        s.push_str(&row);
    }
    s
}

fn write(name: &str, text: &str) -> PathBuf {
    let p = tmp(name);
    std::fs::write(&p, text).unwrap();
    p
}

/// No NaN or infinity anywhere in a text output.
fn assert_no_nan(what: &str, text: &str) {
    for bad in ["NaN", "nan", "inf", "Infinity"] {
        let hit = text.split(|c: char| !c.is_alphanumeric()).any(|w| w == bad);
        assert!(!hit, "{what} contains {bad}:\n{text}");
    }
}

/// c-statistic by direct pair counting: P(score of a positive > score of a
/// negative) + ½ P(tie) (Hanley & McNeil, Radiology 1982;143:29-36).
fn auc_pairs(scores: &[f64], y: &[bool]) -> f64 {
    let (mut num, mut den) = (0.0, 0.0);
    for (i, &a) in scores.iter().enumerate() {
        if !y[i] {
            continue;
        }
        for (j, &b) in scores.iter().enumerate() {
            if y[j] {
                continue;
            }
            den += 1.0;
            if a > b {
                num += 1.0;
            } else if a == b {
                num += 0.5;
            }
        }
    }
    num / den
}

fn score_columns(csv_text: &str, index: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let r = morbus(
        &["score", "--dx", "dx*", "--index", index, "-q"],
        csv_text.as_bytes(),
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let mut rdr = csv::Reader::from_reader(r.stdout.as_bytes());
    let head: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let rows = rdr
        .records()
        .map(|x| x.unwrap().iter().map(String::from).collect())
        .collect();
    (head, rows)
}

#[test]
fn default_compares_every_weighting_and_counts_units() {
    let data = extract(600, 11, 25);
    let input = write("default.csv", &data);
    let (r, j) = compare_json(
        "default.json",
        "{} --dx dx* --outcome died",
        &[input.to_str().unwrap()],
        b"",
    );
    let names: Vec<&str> = j["indices"]
        .as_array()
        .unwrap()
        .iter()
        .map(|i| i["name"].as_str().unwrap())
        .collect();
    // Every (list, weighting) of the built-in catalogue, as `morbus lists` shows it.
    let lists = morbus(&["lists"], b"");
    let mut expected = 0;
    for line in lists.stdout.lines().skip(1) {
        let name = line.split_whitespace().next().unwrap();
        let n = names
            .iter()
            .filter(|x| x.starts_with(&format!("{name}_")))
            .count();
        assert!(n >= 1, "no index of list {name} in {names:?}");
        expected += n;
    }
    assert_eq!(names.len(), expected);
    assert_eq!(
        names.len() * (names.len() - 1) / 2,
        j["pairs"].as_array().unwrap().len()
    );
    let u = &j["units"];
    assert_eq!(u["read"], 600);
    assert_eq!(u["missing_outcome"], 24);
    assert_eq!(u["analysed"], 576);
    let events = data.lines().skip(1).filter(|l| l.ends_with(",1")).count();
    assert_eq!(u["events"], events as u64);
    assert!(r.stdout.contains("576 analysed"), "{}", r.stdout);
    assert!(r.stdout.contains("24 without an outcome"));
    assert_no_nan("stdout", &r.stdout);
}

#[test]
fn c_statistics_match_pair_counting_on_score_output() {
    let data = extract(400, 5, 0);
    let input = write("auc.csv", &data);
    let out = tmp("auc.json");
    let index = "charlson:quan2011,elixhauser:vanwalraven2009,hfrs";
    let r = compare(
        "{} --dx dx* --outcome died --index {} --json {} -q",
        &[input.to_str().unwrap(), index, out.to_str().unwrap()],
        b"",
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let j = json(&out);
    let (head, rows) = score_columns(&data, index);
    let died = head.iter().position(|h| h == "died").unwrap();
    let y: Vec<bool> = rows.iter().map(|r| r[died] == "1").collect();
    for ix in j["indices"].as_array().unwrap() {
        let name = ix["name"].as_str().unwrap();
        let col = head.iter().position(|h| h == name).unwrap();
        let s: Vec<f64> = rows.iter().map(|r| r[col].parse().unwrap()).collect();
        let c = ix["c_statistic"]["estimate"].as_f64().unwrap();
        let expect = auc_pairs(&s, &y);
        assert!((c - expect).abs() < 1e-12, "{name}: {c} vs {expect}");
        // Mean score and share of zeros, straight from the score column.
        let mean = s.iter().sum::<f64>() / s.len() as f64;
        let m = ix["distribution"]["mean"].as_f64().unwrap();
        assert!((m - mean).abs() < 1e-9, "{name}: mean {m} vs {mean}");
        let zeros = s.iter().filter(|&&v| v == 0.0).count() as f64 / s.len() as f64;
        assert_eq!(ix["distribution"]["zero_share"].as_f64().unwrap(), zeros);
        let ci = ix["c_statistic"]["ci95"].as_array().unwrap();
        assert!(ci[0].as_f64().unwrap() < c && c < ci[1].as_f64().unwrap());
    }
}

#[test]
fn outcome_that_is_not_zero_or_one_names_the_line() {
    let data = "episode,dx1,died\ne1,I21.9,0\ne2,C78.0,1\ne3,,yes\ne4,,0\n";
    let r = compare("--dx dx1 --outcome died", &[], data.as_bytes());
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("line 4"), "{}", r.stderr);
    assert!(r.stderr.contains("'yes'"), "{}", r.stderr);
    assert!(r.stderr.contains("expected 0 or 1"), "{}", r.stderr);
    assert!(r.stdout.is_empty());
}

#[test]
fn constant_outcome_is_an_error_not_a_table_of_nan() {
    let mut data = String::from("episode,dx1,died\n");
    for i in 0..20 {
        data.push_str(&format!("e{i},{},0\n", CODES[i % CODES.len()]));
    }
    data.push_str("e20,I21.9,\n");
    let r = compare("--dx dx1 --outcome died", &[], data.as_bytes());
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(
        r.stderr
            .contains("is 0 for every one of the 20 analysed units"),
        "{}",
        r.stderr
    );
    assert!(r.stdout.is_empty());
    // No analysable unit at all.
    let data = "episode,dx1,died\ne1,I21.9,\ne2,C78.0,NA\n";
    let r = compare("--dx dx1 --outcome died", &[], data.as_bytes());
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("no unit can be analysed"), "{}", r.stderr);
}

#[test]
fn separated_model_is_a_note_with_the_c_statistic_kept() {
    // Outcome 1 exactly for the episodes with a metastatic tumour (6 points
    // in the 1987 weighting); the others score at most 1.
    let mut data = String::from("episode,age,dx1,dx2,died\n");
    let mut r = lcg(3);
    for i in 0..60 {
        let age = 40 + r.below(50);
        if i % 4 == 0 {
            data.push_str(&format!("e{i},{age},C78.0,,1\n"));
        } else if i % 4 == 1 {
            data.push_str(&format!("e{i},{age},I21.9,,0\n"));
        } else {
            data.push_str(&format!("e{i},{age},,,0\n"));
        }
    }
    let out = tmp("separated.json");
    let report = tmp("separated.html");
    let run = compare(
        "--dx dx* --outcome died --index charlson:charlson1987 --adjust age \
         --json {} --report {}",
        &[out.to_str().unwrap(), report.to_str().unwrap()],
        data.as_bytes(),
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    let j = json(&out);
    let ix = &j["indices"][0];
    assert_eq!(ix["c_statistic"]["estimate"].as_f64().unwrap(), 1.0);
    assert!(ix["model"].is_null());
    let notes = ix["notes"].to_string();
    assert!(notes.contains("separation"), "{notes}");
    assert!(run.stdout.contains("separation"), "{}", run.stdout);
    assert!(
        run.stdout.contains("(no model: see notes)"),
        "{}",
        run.stdout
    );
    assert_no_nan("stdout", &run.stdout);
    assert_no_nan("json", &std::fs::read_to_string(&out).unwrap());
    assert_no_nan("report", &std::fs::read_to_string(&report).unwrap());
}

#[test]
fn zero_variance_index_is_noted_and_left_out_of_tests() {
    // Codes that the Charlson list knows and the frailty list does not.
    let mut data = String::from("episode,dx1,died\n");
    let mut r = lcg(9);
    for i in 0..80 {
        let c = ["I21.9", "E11.9", "C78.0", "", "J44.9"][r.below(5) as usize];
        let died = if r.uniform() < 0.3 { 1 } else { 0 };
        data.push_str(&format!("e{i},{c},{died}\n"));
    }
    let (run, j) = compare_json(
        "zero.json",
        "--dx dx1 --outcome died --index charlson,hfrs",
        &[],
        data.as_bytes(),
    );
    let hfrs = &j["indices"][1];
    assert_eq!(hfrs["name"], "hfrs_gilbert2018");
    assert!(hfrs["c_statistic"].is_null());
    assert!(hfrs["model"].is_null());
    assert!(hfrs["notes"].to_string().contains("zero variance"));
    assert_eq!(hfrs["distribution"]["zero_share"].as_f64().unwrap(), 1.0);
    assert!(hfrs["distribution"]["sd"].as_f64().unwrap() == 0.0);
    let charlson = &j["indices"][0];
    assert!(charlson["c_statistic"]["estimate"].as_f64().is_some());
    let pair = &j["pairs"][0];
    assert!(pair["delong"].is_null() && pair["spearman"].is_null());
    assert!(pair["notes"].to_string().contains("zero variance"));
    assert!(run.stdout.contains("zero variance"), "{}", run.stdout);
    assert_no_nan("stdout", &run.stdout);
}

#[test]
fn identical_rankings_give_a_note_instead_of_a_test() {
    // Charlson count and Charlson 1987 weights rank units identically when
    // every unit has at most one condition of weight 1.
    let mut data = String::from("episode,dx1,died\n");
    let mut r = lcg(21);
    for i in 0..50 {
        let c = ["I21.9", "", "J44.9"][r.below(3) as usize];
        let died = if r.uniform() < 0.4 { 1 } else { 0 };
        data.push_str(&format!("e{i},{c},{died}\n"));
    }
    let (run, j) = compare_json(
        "identical.json",
        "--dx dx1 --outcome died \
         --index charlson:charlson1987,charlson:count",
        &[],
        data.as_bytes(),
    );
    let pair = &j["pairs"][0];
    assert!(pair["delong"].is_null());
    assert!(pair["notes"]
        .to_string()
        .contains("order the units identically"));
    assert_eq!(pair["spearman"].as_f64().unwrap(), 1.0);
    assert_no_nan("stdout", &run.stdout);
}

#[test]
fn adjustment_numeric_and_categorical() {
    let data = extract(300, 17, 0);
    let (run, j) = compare_json(
        "adjust.json",
        "--dx dx* --outcome died --index charlson --adjust age \
         --adjust-cat sex",
        &[],
        data.as_bytes(),
    );
    let terms: Vec<&str> = j["indices"][0]["model"]["terms"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["name"].as_str().unwrap())
        .collect();
    assert_eq!(terms, ["(Intercept)", "charlson_quan2011", "age", "sex=M"]);
    assert_eq!(j["adjustment"][1]["reference"], "F");
    assert!(j["adjustment_model"]["aic"].as_f64().is_some());
    assert!(run.stdout.contains("reference level 'F'"), "{}", run.stdout);

    // A non-number in a numeric adjustment column: its line.
    let mut lines: Vec<String> = data.lines().map(String::from).collect();
    let mut cells: Vec<String> = lines[5].split(',').map(String::from).collect();
    cells[3] = "unknown".into();
    lines[5] = cells.join(",");
    let bad = lines.join("\n") + "\n";
    let run = compare("--dx dx* --outcome died --adjust age", &[], bad.as_bytes());
    assert_eq!(run.code, 1, "{}", run.stderr);
    assert!(run.stderr.contains("line 6"), "{}", run.stderr);
    assert!(
        run.stderr.contains("'unknown', which is not a number"),
        "{}",
        run.stderr
    );

    // Missing adjustment values leave the unit out, counted.
    let mut lines: Vec<String> = data.lines().map(String::from).collect();
    for l in lines.iter_mut().skip(1).step_by(10) {
        let mut cells: Vec<String> = l.split(',').map(String::from).collect();
        cells[3] = "NA".into();
        *l = cells.join(",");
    }
    let gaps = lines.join("\n") + "\n";
    let run = compare(
        "--dx dx* --outcome died --adjust age --index hfrs",
        &[],
        gaps.as_bytes(),
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    assert!(
        run.stdout.contains("30 with a missing adjustment value"),
        "{}",
        run.stdout
    );
    assert!(run.stdout.contains("270 analysed"), "{}", run.stdout);
}

#[test]
fn usage_errors_exit_2() {
    let data = extract(30, 1, 0);
    let r = compare("--dx dx* --outcome dead", &[], data.as_bytes());
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("'dead' not found"), "{}", r.stderr);
    let r = compare(
        "--dx dx* --outcome died --adjust died",
        &[],
        data.as_bytes(),
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("is the outcome"), "{}", r.stderr);
    let many = extract(80, 2, 0);
    let r = compare(
        "--dx dx* --outcome died --adjust-cat episode",
        &[],
        many.as_bytes(),
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("has 80 levels"), "{}", r.stderr);
    let r = compare("--dx dx*", &[], data.as_bytes());
    assert_eq!(r.code, 2, "{}", r.stderr);
    let r = compare(
        "--dx dx* --outcome died --index nosuch",
        &[],
        data.as_bytes(),
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
}

#[test]
fn long_layout_episodes_and_lookback() {
    // Patient p1: an earlier episode with heart failure, a later one with a
    // myocardial infarction. With a lookback the later episode has both.
    let mut long = String::from("patient,episode,date,code,died\n");
    let mut r = lcg(4);
    for p in 0..40 {
        let died_late = if r.uniform() < 0.5 { 1 } else { 0 };
        long.push_str(&format!("p{p},a,2025-01-10,I50.0,0\n"));
        long.push_str(&format!("p{p},b,2025-03-01,I21.9,{died_late}\n"));
        long.push_str(&format!("p{p},b,2025-03-01,J44.9,\n"));
    }
    let base = [
        "compare",
        "--dx",
        "code",
        "--layout",
        "long",
        "--id",
        "patient",
        "--episode",
        "episode",
        "--date",
        "date",
        "--outcome",
        "died",
        "--index",
        "charlson:count",
    ];
    let out0 = tmp("long0.json");
    let mut a: Vec<&str> = base.to_vec();
    a.extend(["--json", out0.to_str().unwrap()]);
    let run = morbus(&a, long.as_bytes());
    assert_eq!(run.code, 0, "{}", run.stderr);
    let j0 = json(&out0);
    assert_eq!(j0["units"]["read"], 80);
    assert_eq!(j0["units"]["analysed"], 80);
    let out1 = tmp("long1.json");
    let mut a: Vec<&str> = base.to_vec();
    a.extend(["--lookback", "365", "--json", out1.to_str().unwrap()]);
    let run = morbus(&a, long.as_bytes());
    assert_eq!(run.code, 0, "{}", run.stderr);
    let j1 = json(&out1);
    assert_eq!(j1["lookback"], "365");
    let chf = |j: &serde_json::Value| {
        j["indices"][0]["prevalence"]
            .as_array()
            .unwrap()
            .iter()
            .find(|p| p["key"] == "congestive_heart_failure")
            .unwrap()["count"]
            .as_u64()
            .unwrap()
    };
    assert_eq!(chf(&j0), 40);
    assert_eq!(chf(&j1), 80);
    let mean0 = j0["indices"][0]["distribution"]["mean"].as_f64().unwrap();
    let mean1 = j1["indices"][0]["distribution"]["mean"].as_f64().unwrap();
    assert_eq!((mean0, mean1), (1.5, 2.0));

    // Two rows of one episode disagreeing on the outcome.
    let clash = long.replacen("p0,b,2025-03-01,J44.9,", "p0,b,2025-03-01,J44.9,7", 1);
    let clash = clash.replacen("p0,b,2025-03-01,I21.9,0", "p0,b,2025-03-01,I21.9,1", 1);
    let run = morbus(&base, clash.as_bytes());
    assert_eq!(run.code, 1, "{}", run.stderr);
    assert!(run.stderr.contains("line 4"), "{}", run.stderr);
    assert!(run.stderr.contains("same episode"), "{}", run.stderr);
}

#[test]
fn age_points_add_an_age_variant() {
    let data = extract(200, 8, 0);
    let (_, j) = compare_json(
        "age.json",
        "--dx dx* --outcome died --index charlson:charlson1987 --age age",
        &[],
        data.as_bytes(),
    );
    let names: Vec<&str> = j["indices"]
        .as_array()
        .unwrap()
        .iter()
        .map(|i| i["name"].as_str().unwrap())
        .collect();
    assert_eq!(
        names,
        ["charlson_charlson1987", "charlson_charlson1987_age"]
    );
    assert_eq!(j["indices"][1]["with_age"], true);
    let m0 = j["indices"][0]["distribution"]["mean"].as_f64().unwrap();
    let m1 = j["indices"][1]["distribution"]["mean"].as_f64().unwrap();
    assert!(m1 > m0, "age points add to the mean: {m0} {m1}");
}

fn report_for_tests() -> PathBuf {
    let data = extract(1500, 31, 40);
    let input = write("report.csv", &data);
    let report = tmp("report.html");
    let run = compare(
        "{} --dx dx* --outcome died --adjust age --adjust-cat sex \
         --adjust-spline age:4 --cluster patient --report {} -q",
        &[input.to_str().unwrap(), report.to_str().unwrap()],
        b"",
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    report
}

#[test]
fn spline_knots_and_clusters_are_shown() {
    // The knots of `--adjust-spline` are the type-7 quantiles of the
    // analysed ages at Harrell's 0.05, 0.35, 0.65, 0.95 (Harrell 2015,
    // Table 2.3, from memory), computed here from the same data; they are
    // printed in the table, the JSON and the report, with the clusters.
    let data = extract(1500, 31, 40);
    let input = write("spline.csv", &data);
    let out = tmp("spline.json");
    let report = tmp("spline.html");
    let run = compare(
        "{} --dx dx* --outcome died --index charlson,elixhauser \
         --adjust-spline age --cluster patient --json {} --report {} -q",
        &[
            input.to_str().unwrap(),
            out.to_str().unwrap(),
            report.to_str().unwrap(),
        ],
        b"",
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    let mut ages: Vec<f64> = data
        .lines()
        .skip(1)
        .filter(|l| !l.ends_with(','))
        .map(|l| l.split(',').nth(3).unwrap().parse().unwrap())
        .collect();
    ages.sort_by(f64::total_cmp);
    let q = |p: f64| {
        let h = (ages.len() - 1) as f64 * p;
        let i = h.floor() as usize;
        ages[i] + (h - h.floor()) * (ages[(i + 1).min(ages.len() - 1)] - ages[i])
    };
    let j = json(&out);
    let knots: Vec<f64> = j["splines"][0]["knots"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    assert_eq!(knots.len(), 4);
    for (k, p) in knots.iter().zip([0.05, 0.35, 0.65, 0.95]) {
        assert!((k - q(p)).abs() < 1e-9, "{knots:?}");
    }
    let terms: Vec<&str> = j["indices"][0]["model"]["terms"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["name"].as_str().unwrap())
        .collect();
    assert_eq!(
        terms,
        [
            "(Intercept)",
            "charlson_quan2011",
            "age",
            "age_spline1",
            "age_spline2"
        ]
    );
    let patients: std::collections::HashSet<&str> = data
        .lines()
        .skip(1)
        .filter(|l| !l.ends_with(','))
        .map(|l| l.split(',').nth(1).unwrap())
        .collect();
    assert_eq!(j["clusters"]["clusters"], patients.len());
    assert!(j["indices"][0]["c_statistic"]["cluster_ci95"].is_array());
    assert!(
        j["indices"][0]["model"]["terms"][1]["cluster_std_error"]
            .as_f64()
            .unwrap()
            > 0.0
    );
    assert!(j["pairs"][0]["delong"]["cluster"]["p_value"].is_number());
    let first = fmt_knot(knots[0]);
    assert!(
        run.stdout.contains("restricted cubic spline, 4 knots at"),
        "{}",
        run.stdout
    );
    assert!(run.stdout.contains(&first), "{}", run.stdout);
    assert!(run.stdout.contains("95% CI (clusters)"));
    let html = std::fs::read_to_string(&report).unwrap();
    assert!(html.contains("restricted cubic spline with 4 knots at"));
    assert!(html.contains(&first));
    assert!(html.contains("<th>cluster SE</th>"));
    // Knots from too few distinct values are refused, not merged.
    let flat: String = data
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                format!("{l}\n")
            } else {
                let mut f: Vec<&str> = l.split(',').collect();
                f[3] = if i % 50 == 0 { "40" } else { "70" };
                format!("{}\n", f.join(","))
            }
        })
        .collect();
    let run = compare(
        "--dx dx* --outcome died --adjust-spline age:3 -q",
        &[],
        flat.as_bytes(),
    );
    assert_eq!(run.code, 1, "{}", run.stderr);
    assert!(run.stderr.contains("use fewer knots"), "{}", run.stderr);
    let run = compare(
        "--dx dx* --outcome died --adjust-spline age:9 -q",
        &[],
        flat.as_bytes(),
    );
    assert_eq!(run.code, 2, "{}", run.stderr);
}

/// A knot as the table prints it (up to 4 decimals, no trailing zeros).
fn fmt_knot(v: f64) -> String {
    let s = format!("{v:.4}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

#[test]
fn report_is_one_self_contained_page() {
    let html = std::fs::read_to_string(report_for_tests()).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(html.trim_end().ends_with("</html>"));
    for banned in [
        "<script", "<link", "<img", "@import", "url(", "src=", "href=",
    ] {
        assert!(!html.contains(banned), "report contains {banned}");
    }
    // The only URL is the SVG namespace name, which is never fetched.
    let urls = html.matches("http").count();
    let ns = html.matches("http://www.w3.org/2000/svg").count();
    assert_eq!(urls, ns);
    // One ROC plot with a path per index, a histogram per index, the
    // prevalence bars per list and the caution.
    let indices = 6;
    assert_eq!(html.matches("aria-label=\"ROC curves").count(), 1);
    assert!(html.matches("stroke-width=\"2\"").count() >= indices);
    assert_eq!(html.matches("aria-label=\"histogram of").count(), indices);
    assert_eq!(html.matches("aria-label=\"condition prevalence").count(), 3);
    assert!(html.contains("For population-level research only"));
    assert_no_nan("report", &html);
}

fn find_browser() -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    for dir in std::env::split_paths(&path) {
        for name in ["chromium", "chromium-browser", "google-chrome"] {
            let p = dir.join(name);
            if p.is_file() {
                return Some(p);
            }
        }
    }
    None
}

/// Width, height of a PNG from its IHDR chunk.
fn png_size(bytes: &[u8]) -> Option<(u32, u32)> {
    if bytes.len() < 24 || &bytes[..8] != b"\x89PNG\r\n\x1a\n" || &bytes[12..16] != b"IHDR" {
        return None;
    }
    let w = u32::from_be_bytes(bytes[16..20].try_into().ok()?);
    let h = u32::from_be_bytes(bytes[20..24].try_into().ok()?);
    Some((w, h))
}

#[test]
fn report_renders_in_headless_chromium() {
    let Some(browser) = find_browser() else {
        eprintln!(
            "SKIPPED report_renders_in_headless_chromium: no chromium on PATH \
             (install Debian's chromium package to run it)"
        );
        return;
    };
    let report = report_for_tests();
    let png = tmp("report.png");
    let profile = tmp("chromium-profile");
    std::fs::create_dir_all(&profile).unwrap();
    let mut child = Command::new(&browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            &format!("--user-data-dir={}", profile.display()),
            &format!("--screenshot={}", png.display()),
            "--window-size=1200,2400",
            &format!("file://{}", report.display()),
        ])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("run chromium");
    // A browser that hangs must not hang the test suite.
    let started = std::time::Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().expect("wait for chromium") {
            break s;
        }
        if started.elapsed() > std::time::Duration::from_secs(120) {
            let _ = child.kill();
            let _ = child.wait();
            panic!("chromium did not finish within 120 s");
        }
        std::thread::sleep(std::time::Duration::from_millis(100));
    };
    assert!(status.success(), "chromium failed: {status}");
    let bytes = std::fs::read(&png).unwrap();
    assert_eq!(png_size(&bytes), Some((1200, 2400)));
    // A blank or error page compresses to a few kilobytes; the report's
    // text, tables and charts do not.
    assert!(
        bytes.len() > 60_000,
        "screenshot is only {} bytes: the page looks empty",
        bytes.len()
    );
}

#[test]
fn single_event_gives_c_statistics_without_intervals() {
    let mut data = String::from("episode,dx1,dx2,died\n");
    for i in 0..30 {
        let (a, b) = [
            ("I21.9", "E11.9"),
            ("", ""),
            ("J44.9", ""),
            ("C78.0", "I50.0"),
        ][i % 4];
        data.push_str(&format!("e{i},{a},{b},{}\n", if i == 3 { 1 } else { 0 }));
    }
    let (run, j) = compare_json(
        "single.json",
        "--dx dx* --outcome died --index charlson:charlson1987,elixhauser",
        &[],
        data.as_bytes(),
    );
    let c = &j["indices"][0]["c_statistic"];
    // The one event scores highest (metastatic tumour + heart failure): the
    // episodes scoring the same are the other 6 of its kind (ties count ½).
    let negatives = 29.0;
    let tied = 7.0 - 1.0;
    let expected = (negatives - tied + 0.5 * tied) / negatives;
    assert!(
        (c["estimate"].as_f64().unwrap() - expected).abs() < 1e-12,
        "{c}"
    );
    assert!(c["std_error"].is_null() && c["ci95"].is_null());
    assert!(
        j["notes"].to_string().contains("no DeLong variance"),
        "{}",
        j["notes"]
    );
    assert!(j["pairs"][0]["delong"].is_null());
    assert!(j["pairs"][0]["spearman"].as_f64().is_some());
    assert_no_nan("stdout", &run.stdout);
}

#[test]
fn header_only_and_empty_input_are_clear_errors() {
    let r = compare("--dx dx1 --outcome died", &[], b"episode,dx1,died\n");
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("no unit can be analysed"), "{}", r.stderr);
    let r = compare("--dx dx1 --outcome died", &[], b"");
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("empty"), "{}", r.stderr);
}

/// The test extract with a provider column `site` (four invented names)
/// added at the end.
fn extract_with_sites(n: usize, seed: u64) -> String {
    let names = ["Ashgrove", "Birchmead", "Cobble Lane", "Dunmore"];
    let mut out = String::new();
    for (i, line) in extract(n, seed, 50).lines().enumerate() {
        out.push_str(line);
        if i == 0 {
            out.push_str(",site\n");
        } else {
            out.push(',');
            out.push_str(names[(i * 7 + i / 3) % 4]);
            out.push('\n');
        }
    }
    out
}

#[test]
fn providers_folds_and_reference_end_to_end() {
    let input = write("sites.csv", &extract_with_sites(2400, 77));
    let js = tmp("sites.json");
    let report = tmp("sites.html");
    let run = compare(
        "{} --dx dx* --outcome died --adjust age --by site --folds 3 \
         --id patient --reference charlson:quan2011 \
         --overdispersion multiplicative --json {} --report {} -q",
        &[
            input.to_str().unwrap(),
            js.to_str().unwrap(),
            report.to_str().unwrap(),
        ],
        b"",
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    assert_no_nan("stdout", &run.stdout);
    assert!(run.stdout.contains("Providers by 'site'"), "{}", run.stdout);
    let j = json(&js);
    let k = j["indices"].as_array().unwrap().len();
    // --reference: k - 1 pairs, each with the reference first.
    assert_eq!(j["pairs"].as_array().unwrap().len(), k - 1);
    assert!(j["pairs"]
        .as_array()
        .unwrap()
        .iter()
        .all(|p| p["a"] == "charlson_quan2011"));
    assert_eq!(j["pairs_compared"]["tests_if_all_pairs"], k * (k - 1) / 2);
    let p = &j["providers"];
    let names: Vec<&str> = p["names"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap())
        .collect();
    assert_eq!(names, ["Ashgrove", "Birchmead", "Cobble Lane", "Dunmore"]);
    let events = j["units"]["events"].as_u64().unwrap();
    let observed: u64 = p["observed"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap())
        .sum();
    assert_eq!(observed, events);
    // A maximum-likelihood logistic model with an intercept reproduces the
    // number of events: the expected counts of all providers add up to the
    // observed total (the score equation of the intercept).
    for s in p["specifications"].as_array().unwrap() {
        let expected: f64 = s["providers"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r["expected"].as_f64().unwrap())
            .sum();
        assert!(
            (expected - events as f64).abs() < 1e-6 * events as f64,
            "{}: {expected} vs {events}",
            s["index"]
        );
        let d = &s["dispersion"];
        assert!(d["phi"].as_f64().unwrap() >= 0.0);
    }
    // Cross-validation: every analysed unit in one fold; per-fold units add up.
    let analysed = j["units"]["analysed"].as_u64().unwrap();
    let cv = &j["cross_validation"];
    let per_fold: u64 = cv["fold_units"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap())
        .sum();
    assert_eq!(per_fold, analysed);
    for ix in j["indices"].as_array().unwrap() {
        let oos = &ix["out_of_sample"];
        let groups: u64 = oos["calibration"]
            .as_array()
            .unwrap()
            .iter()
            .map(|g| g["units"].as_u64().unwrap())
            .sum();
        assert_eq!(groups, analysed);
        let brier = oos["brier"].as_f64().unwrap();
        assert!(brier > 0.0 && brier < 0.25, "{brier}");
        assert!(ix["added_value"]["p_value"].as_f64().unwrap() <= 1.0);
    }
    let html = std::fs::read_to_string(&report).unwrap();
    assert_no_nan("report", &html);
    assert_eq!(html.matches("aria-label=\"funnel plot").count(), k);
    assert_eq!(html.matches("aria-label=\"calibration,").count(), k);
    // The same seed gives the same folds; another seed other folds.
    let again = tmp("sites2.json");
    let other = tmp("sites3.json");
    for (path, seed) in [(&again, "20261203"), (&other, "5")] {
        let r = compare(
            "{} --dx dx* --outcome died --folds 3 --id patient --seed {} \
             --index charlson --json {} -q",
            &[input.to_str().unwrap(), seed, path.to_str().unwrap()],
            b"",
        );
        assert_eq!(r.code, 0, "{}", r.stderr);
    }
    assert_eq!(j["cross_validation"]["seed"], 20261203);
    let (a, b) = (json(&again), json(&other));
    assert_ne!(
        a["cross_validation"]["fold_units"],
        b["cross_validation"]["fold_units"]
    );
}

#[test]
fn provider_and_fold_options_are_checked() {
    let input = write("sites-usage.csv", &extract_with_sites(200, 3));
    let base = [
        "compare",
        input.to_str().unwrap(),
        "--dx",
        "dx*",
        "--outcome",
        "died",
        "-q",
    ];
    for (extra, needle) in [
        (&["--folds", "1"][..], "--folds 1"),
        (&["--overdispersion", "additive"][..], "needs --by"),
        (
            &["--reference", "nothing:here"][..],
            "not among the indices",
        ),
        (&["--by", "site", "--min-expected=-1"][..], "--min-expected"),
        (&["--by", "nowhere"][..], "nowhere"),
    ] {
        let mut args: Vec<&str> = base.to_vec();
        args.extend_from_slice(extra);
        let r = morbus(&args, b"");
        assert_eq!(r.code, 2, "{extra:?}: {}", r.stderr);
        assert!(r.stderr.contains(needle), "{extra:?}: {}", r.stderr);
    }
}
