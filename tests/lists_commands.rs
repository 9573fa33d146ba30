//! `morbus lists show | export | diff`, user-defined lists in `score`, a
//! broken list stopping `score`, and `score --provenance`.

mod common;

use common::{invented_extract, TempDir};
use morbus::lists::builtin;

/// An invented index: two weightings, a hierarchy, bands and age points.
const OWN: &str = "# an invented index
list\town_index
version\t0.3
title\tInvented index for tests
edition\tICD-10 (WHO)
source\tInvented for tests
default_weighting\tpoints
condition\theart\tHeart\tInvented
condition\theart_severe\tSevere heart\tInvented
condition\tlung\tLung\tInvented
code\tI50\theart\tInvented
code\tI50.1-I50.9\theart_severe\tInvented
code\tJ44\tlung\tInvented
supersedes\theart_severe\theart\tInvented
weighting\tpoints\tInvented points\tInvented
weight\tpoints\theart\t1
weight\tpoints\theart_severe\t2.5
weight\tpoints\tlung\t1
weighting\tcount\tConditions present\tInvented
weight\tcount\theart\t1
weight\tcount\theart_severe\t1
weight\tcount\tlung\t1
band\tpoints\tnone\t*\t<1\tInvented
band\tpoints\tsome\t>=1\t<3\tInvented
band\tpoints\tmany\t>=3\t*\tInvented
age_points\t65\t*\t1\tInvented
";

#[test]
fn show_prints_metadata_codes_hierarchy_and_weights() {
    let r = common::run("lists show charlson", &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let l = builtin::all()
        .iter()
        .find(|l| l.name == "charlson")
        .unwrap();
    assert!(r
        .stdout
        .contains(&format!("checksum           {}", l.checksum)));
    assert!(r
        .stdout
        .contains(&format!("version            {}", l.version)));
    // Every code entry appears as written and normalised.
    for e in &l.codes {
        let needle = format!("{} -> {}", e.text, e.normalised());
        let found = r.stdout.lines().any(|x| {
            let t: Vec<&str> = x.split_whitespace().collect();
            t.len() >= 3 && t[0] == e.text && t[2] == e.normalised()
        });
        assert!(found, "missing '{needle}'");
    }
    for w in &l.weightings {
        assert!(r.stdout.contains(&format!("weighting {}", w.name)));
    }
    for h in &l.hierarchy {
        assert!(r.stdout.contains(&format!(
            "{} supersedes {}",
            l.conditions[h.superior].key, l.conditions[h.inferior].key
        )));
    }
    assert!(r.stdout.contains("age points"));
}

#[test]
fn show_json_is_the_library_description() {
    let dir = TempDir::new("showjson");
    let path = dir.write("own_index.tsv", OWN);
    let r = common::run("lists show {} --json", &[&path]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    let list = morbus::lists::load_file(std::path::Path::new(&path))
        .unwrap()
        .list;
    let expected = serde_json::to_value(morbus::lists::describe(&list)).unwrap();
    assert_eq!(v, expected);
    assert_eq!(v["conditions"][1]["codes"][0]["normalised"], "I501-I509");
    assert_eq!(v["weightings"][0]["weights"][1]["value"], "2.5");
    assert_eq!(v["weightings"][0]["bands"][2]["lower"], ">=3");
}

#[test]
fn show_of_an_unknown_list_fails_with_the_available_names() {
    let r = common::run("lists show no_such_list", &[]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains("available lists: charlson"),
        "{}",
        r.stderr
    );
}

#[test]
fn export_writes_copies_that_load_back_with_the_same_checksum() {
    let dir = TempDir::new("export");
    let d = dir.path().display().to_string();
    for l in builtin::all() {
        let r = common::run("lists export {} {}", &[&l.name, &d]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        let path = dir.path().join(format!("{}.tsv", l.name));
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(text.starts_with("# morbus export: list"), "{text}");
        assert!(text.contains(&l.checksum));
        assert!(text.contains(&format!("version {}", l.version)));
        let back = morbus::lists::load_file(&path).unwrap().list;
        assert_eq!(back.checksum, l.checksum, "{}", l.name);
    }
    // --lists DIR loads them back, replacing the built-ins, same checksums.
    let r = common::run("lists --lists {}", &[&d]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    for l in builtin::all() {
        let row = r
            .stdout
            .lines()
            .find(|x| x.starts_with(&format!("{} ", l.name)))
            .unwrap_or_else(|| panic!("no row for {}:\n{}", l.name, r.stdout));
        assert!(row.contains(&l.checksum[..12]), "{row}");
        assert!(row.contains(&d), "{row}");
        assert!(r.stderr.contains(&format!("list '{}' from", l.name)));
    }
    // An existing file is not replaced without --force.
    let r = common::run("lists export charlson {}", &[&d]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("--force"), "{}", r.stderr);
    let r = common::run("lists export charlson {} --force", &[&d]);
    assert_eq!(r.code, 0, "{}", r.stderr);
}

#[test]
fn export_of_a_user_list_keeps_its_content() {
    let src = TempDir::new("own");
    src.write("own_index.tsv", OWN);
    let out = TempDir::new("ownout");
    let r = common::run(
        "lists export own_index {} --lists {}",
        &[
            &out.path().display().to_string(),
            &src.path().display().to_string(),
        ],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let a = morbus::lists::load_file(&src.path().join("own_index.tsv")).unwrap();
    let b = morbus::lists::load_file(&out.path().join("own_index.tsv")).unwrap();
    assert_eq!(a.list.checksum, b.list.checksum);
    let text = std::fs::read_to_string(out.path().join("own_index.tsv")).unwrap();
    assert!(text.contains("# an invented index"), "opening comment kept");
}

#[test]
fn diff_reports_weights_hierarchy_and_version() {
    let dir = TempDir::new("diff");
    let a = dir.write("a.tsv", OWN);
    let edited = OWN
        .replace("version\t0.3", "version\t0.4")
        .replace("weight\tpoints\tlung\t1", "weight\tpoints\tlung\t1.5")
        .replace("supersedes\theart_severe\theart\tInvented\n", "")
        .replace("code\tJ44\tlung", "code\tJ43\tlung");
    let b = dir.write("b.tsv", &edited);
    let r = common::run("lists diff {} {}", &[&a, &b]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let out = &r.stdout;
    assert!(out.contains("version: 0.3 -> 0.4"), "{out}");
    assert!(out.contains("points lung: 1 -> 1.5"), "{out}");
    assert!(out.contains("  - heart_severe supersedes heart"), "{out}");
    assert!(out.contains("    - J44  (a line 13)"), "{out}");
    assert!(out.contains("    + J43  (b line 13)"), "{out}");
    assert!(!out.contains("note:"), "{out}");

    let r = common::run("lists diff {} {}", &[&a, &a]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains("no differences"), "{}", r.stdout);

    let r = common::run("lists diff {} {} --json", &[&a, &b]);
    let v: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    assert_eq!(v["weights"][0]["after"], "1.5");

    // A list that does not load: exit 2 with its errors.
    let broken = dir.write("broken.tsv", &OWN.replace("I50.1-I50.9", "I50.9-I50.1"));
    let r = common::run("lists diff {} {}", &[&a, &broken]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains(&format!("{broken}:12: error: range")),
        "{}",
        r.stderr
    );
    assert!(r.stdout.is_empty());
}

#[test]
fn diff_of_two_directories_pairs_lists_by_name() {
    // Two directories as `lists export` writes them: `own_index` in both
    // (edited in b), `charlson` only in a, `hfrs` only in b.
    let dir = TempDir::new("diffdirs");
    let (a, b) = (dir.join("a"), dir.join("b"));
    for d in [&a, &b] {
        std::fs::create_dir(d).unwrap();
    }
    std::fs::write(format!("{a}/own_index.tsv"), OWN).unwrap();
    let edited = OWN
        .replace("version\t0.3", "version\t0.4")
        .replace("code\tJ44\tlung", "code\tJ43\tlung");
    std::fs::write(format!("{b}/own_index.tsv"), edited).unwrap();
    assert_eq!(common::run("lists export charlson {}", &[&a]).code, 0);
    assert_eq!(common::run("lists export hfrs {}", &[&b]).code, 0);
    // A project file beside the lists is not a list (FORMAT.md).
    std::fs::write(format!("{b}/VERSIONS.tsv"), "not a list\n").unwrap();

    let r = common::run("lists diff {} {}", &[&a, &b]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let out = &r.stdout;
    assert!(out.contains("--- a: own_index 0.3"), "{out}");
    assert!(out.contains("version: 0.3 -> 0.4"), "{out}");
    assert!(out.contains("    - J44  (a line 13)"), "{out}");
    assert!(out.contains("    + J43  (b line 13)"), "{out}");
    assert!(out.contains("only in a: - charlson "), "{out}");
    assert!(out.contains("only in b: + hfrs "), "{out}");
    assert!(!out.contains("VERSIONS"), "{out}");

    let r = common::run("lists diff {} {} --json", &[&a, &b]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    assert_eq!(v["lists"].as_array().unwrap().len(), 1);
    assert_eq!(v["lists"][0]["a"]["name"], "own_index");
    assert_eq!(v["only_in_a"][0]["name"], "charlson");
    assert_eq!(v["only_in_b"][0]["name"], "hfrs");

    let r = common::run("lists diff {} {}", &[&a, &a]);
    assert_eq!(r.code, 0);
    assert!(
        r.stdout
            .contains("no differences: the same 2 lists with the same content"),
        "{}",
        r.stdout
    );

    // A directory and a list: a usage error naming both.
    let r = common::run("lists diff {} charlson", &[&a]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains(&format!(
            "'{a}' is a directory but 'charlson' is not: compare two directories (lists paired by name) or two lists"
        )),
        "{}",
        r.stderr
    );
    // A broken list in a directory: exit 2 with its error.
    std::fs::write(
        format!("{b}/own_index.tsv"),
        OWN.replace("I50.1-I50.9", "I50.9-I50.1"),
    )
    .unwrap();
    let r = common::run("lists diff {} {}", &[&a, &b]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains("own_index.tsv:12: error: range"),
        "{}",
        r.stderr
    );
}

#[test]
fn a_user_defined_index_scores_from_files_alone() {
    let lists = TempDir::new("ownscore");
    lists.write("own_index.tsv", OWN);
    let data = lists.write(
        "episodes.csv",
        "episode,age,dx1,dx2\n\
         e1,70,I50.1,J44.9\n\
         e2,40,I50,\n\
         e3,,J44,\n\
         e4,66,K35.8,\n",
    );
    let d = lists.path().display().to_string();
    let r = common::run(
        "score {} --dx dx* --age age --flags --lists {} \
         --index own_index,own_index:count",
        &[&data, &d],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let lines: Vec<&str> = r.stdout.lines().collect();
    assert_eq!(
        lines[0],
        "episode,age,dx1,dx2,own_index_points,own_index_points_age,own_index_points_band,\
         own_index_count,own_index_count_age,own_index_heart,own_index_heart_severe,own_index_lung"
    );
    // e1: severe heart (2.5, supersedes heart) + lung (1) = 3.5; age 70: +1.
    assert_eq!(lines[1], "e1,70,I50.1,J44.9,3.5,4.5,many,2,3,0,1,1");
    assert_eq!(lines[2], "e2,40,I50,,1.0,1.0,some,1,1,1,0,0");
    assert_eq!(lines[3], "e3,,J44,,1.0,,some,1,,0,0,1");
    assert_eq!(lines[4], "e4,66,K35.8,,0.0,1.0,none,0,1,0,0,0");
}

#[test]
fn a_broken_list_never_produces_scores() {
    let lists = TempDir::new("broken");
    let bad = lists.write(
        "own_index.tsv",
        &OWN.replace("weight\tcount\tlung\t1\n", ""),
    );
    let (data, _) = invented_extract(7, 20);
    let input = lists.write("episodes.csv", &data);
    let out = lists.join("scored.csv");
    // The broken list is not even among the indices scored.
    let r = common::run(
        "score {} --dx dx* --index charlson --lists {} -o {}",
        &[&input, &lists.path().display().to_string(), &out],
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains(&format!(
            "{bad}:19: error: weighting 'count' has no weight for condition 'lung'"
        )),
        "{}",
        r.stderr
    );
    assert!(r.stdout.is_empty());
    assert!(!std::path::Path::new(&out).exists(), "no output written");
}

#[test]
fn warnings_of_a_list_are_printed_when_scoring() {
    let lists = TempDir::new("warn");
    let path = lists.write(
        "own_index.tsv",
        &OWN.replace(
            "code\tJ44\tlung\tInvented\n",
            "code\tJ44\tlung\tInvented\ncode\tI50.3\tlung\tInvented\n",
        ),
    );
    let data = lists.write("episodes.csv", "episode,dx1\ne1,I50.3\n");
    let r = common::run(
        "score {} --dx dx1 --index own_index:count --lists {} --quiet",
        &[&data, &lists.path().display().to_string()],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stderr.contains(&format!(
            "{path}:14: warning: code 'I50.3' of 'lung' is also claimed by line 11"
        )),
        "{}",
        r.stderr
    );
    // heart_severe supersedes heart; lung also claims I50.3: 2 conditions.
    assert_eq!(r.stdout.lines().nth(1), Some("e1,I50.3,2"));
}

#[test]
fn provenance_records_lists_options_and_counts() {
    let dir = TempDir::new("prov");
    let (data, facts) = invented_extract(11, 300);
    let input = dir.write("episodes.csv", &data);
    let out = dir.join("scored.csv");
    let prov = dir.join("provenance.json");
    let lists = TempDir::new("provlists");
    lists.write("own_index.tsv", OWN);
    let r = common::run(
        "score {} --dx dx* --age age --flags \
         --index charlson:charlson1987,hfrs,own_index:count --lists {} \
         -o {} --provenance {}",
        &[&input, &lists.path().display().to_string(), &out, &prov],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&prov).unwrap()).unwrap();
    assert_eq!(v["tool"]["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(v["input"], input.as_str());
    assert_eq!(v["output"], out.as_str());
    let names: Vec<&str> = v["lists"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| l["name"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["charlson", "hfrs", "own_index"]);
    for l in v["lists"].as_array().unwrap() {
        let name = l["name"].as_str().unwrap();
        if let Some(b) = builtin::all().iter().find(|b| b.name == name) {
            assert_eq!(l["checksum"], b.checksum.as_str());
            assert_eq!(l["version"], b.version.as_str());
            assert_eq!(l["builtin"], true);
        } else {
            assert_eq!(l["builtin"], false);
            assert!(l["origin"].as_str().unwrap().ends_with("own_index.tsv"));
            assert_eq!(l["version"], "0.3");
        }
    }
    assert_eq!(v["lists"][0]["weightings"][0]["name"], "charlson1987");
    assert_eq!(v["lists"][1]["weightings"][0]["name"], "gilbert2018");
    assert_eq!(v["indices"][2]["spec"], "own_index:count");
    assert_eq!(v["indices"][2]["column"], "own_index_count");
    let o = &v["options"];
    assert_eq!(o["layout"], "wide");
    assert_eq!(o["dx"][0], "dx*");
    assert_eq!(
        o["dx_columns"],
        serde_json::json!(["dx1", "dx2", "dx3", "dx4", "dx5", "dx6"])
    );
    assert_eq!(o["age_column"], "age");
    assert_eq!(o["hierarchy"], true);
    assert_eq!(o["flags"], true);
    assert_eq!(v["rows"]["read"], facts.rows as u64);
    assert_eq!(v["rows"]["written"], facts.rows as u64);
    assert_eq!(v["codes"]["invalid"], facts.invalid as u64);
    let top = v["codes"]["top_invalid"].as_array().unwrap();
    let listed: u64 = top.iter().map(|t| t["count"].as_u64().unwrap()).sum();
    assert_eq!(
        listed, facts.invalid as u64,
        "all invalid values fit in the top 20"
    );
    for t in top {
        assert!(common::INVALID_VALUES.contains(&t["value"].as_str().unwrap()));
    }
    assert_eq!(v["ages"]["missing"], facts.missing_ages as u64);
    assert_eq!(v["ages"]["unreadable"], facts.unreadable_ages as u64);
    let header = std::fs::read_to_string(&out).unwrap();
    let header = header.lines().next().unwrap();
    let cols: Vec<&str> = v["columns"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c.as_str().unwrap())
        .collect();
    assert!(header.ends_with(&cols.join(",")), "{header}");
}

#[test]
fn an_unwritable_provenance_file_stops_before_scoring() {
    let dir = TempDir::new("provbad");
    let input = dir.write("episodes.csv", "episode,dx1\ne1,I50\n");
    let out = dir.join("scored.csv");
    let r = common::run(
        "score {} --dx dx1 -o {} --provenance {}",
        &[&input, &out, &dir.join("no/such/dir/p.json")],
    );
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("p.json"), "{}", r.stderr);
    assert!(!std::path::Path::new(&out).exists());
}

#[test]
fn a_failed_run_leaves_no_provenance() {
    let dir = TempDir::new("provfail");
    // Line 3 has one field too many: unreadable input data.
    let input = dir.write("episodes.csv", "episode,dx1\ne1,I50\ne2,I50,J44\n");
    let prov = dir.join("p.json");
    let r = common::run(
        "score {} --dx dx1 -o {} --provenance {}",
        &[&input, &dir.join("scored.csv"), &prov],
    );
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("line 3"), "{}", r.stderr);
    assert!(!std::path::Path::new(&prov).exists());
}

#[test]
fn provenance_records_lookback_dates_and_exclusions() {
    let dir = TempDir::new("provlookback");
    let input = dir.write(
        "episodes.csv",
        "patient,admitted,dx1,dx2\n\
         a,2024-01-10,I50.0,J44.9\n\
         a,2023-06-01,I21.0,\n\
         b,,E11.9,\n\
         b,2024-13-40,C18.7,\n",
    );
    let prov = dir.join("p.json");
    // One unreadable date in three: over the default 1%.
    let r = common::run(
        "score {} --dx dx1,dx2 --id patient --date admitted --lookback all \
         --exclude-primary --index charlson:count --max-unreadable-dates 50 \
         --provenance {} -o {}",
        &[&input, &prov, &dir.join("out.csv")],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&prov).unwrap()).unwrap();
    let o = &v["options"];
    assert_eq!(o["id_column"], "patient");
    assert_eq!(o["date_column"], "admitted");
    assert_eq!(
        o["lookback"],
        serde_json::json!({ "days": null, "window": "current-and-earlier" })
    );
    assert_eq!(o["exclude_primary"], true);
    assert_eq!(o["dx_columns"], serde_json::json!(["dx1", "dx2"]));
    assert_eq!(v["dates"]["missing"], 1);
    assert_eq!(v["dates"]["unreadable"], 1);
    assert_eq!(
        v["dates"]["unreadable_examples"],
        serde_json::json!(["2024-13-40"])
    );
    assert_eq!(v["dates"]["max_unreadable_percent"], 50.0);
    // The first diagnosis column of each of the 4 episodes is left out.
    assert_eq!(v["excluded"]["primary"], 4);
    assert_eq!(v["ages"], serde_json::Value::Null);
    assert_eq!(v["rows"]["read"], 4);
}
