//! One engine for every list, and the "done when" scenario of editable
//! lists: export `charlson`, delete one code line, score with `--lists`, and
//! only the episodes carrying that code change.

mod common;

use std::path::Path;

use common::{invented_extract, morbus, root, spell, Rng, TempDir};
use morbus::lists::{builtin, load_file, Origin};

/// Every weighting of every built-in list, as an `--index` value.
fn every_index() -> String {
    let mut v = Vec::new();
    for l in builtin::all() {
        for w in &l.weightings {
            v.push(format!("{}:{}", l.name, w.name));
        }
    }
    v.join(",")
}

#[test]
fn builtin_files_parse_to_the_embedded_lists() {
    for l in builtin::all() {
        let path = root().join(format!("code-lists/{}.tsv", l.name));
        let loaded = load_file(&path).unwrap();
        assert!(
            loaded.warnings.iter().all(|w| builtin::problems().contains(
                &morbus::lists::Diagnostic {
                    file: format!("built-in ({}.tsv)", l.name),
                    ..w.clone()
                }
            )),
            "the file on disk warns about more than the embedded copy"
        );
        let mut from_disk = loaded.list;
        assert_eq!(from_disk.origin, Origin::File(path.clone()));
        from_disk.origin = l.origin.clone();
        assert_eq!(&from_disk, l, "{} differs from its embedded copy", l.name);
    }
}

/// Scores an extract with the embedded lists and with `--lists code-lists`
/// and requires identical output.
fn same_output_from_disk_and_embedded(input: &str, age: &str) {
    let idx = every_index();
    let base = [
        "score", input, "--dx", "dx*", "--age", age, "--flags", "--index", &idx,
    ];
    let embedded = morbus(&base);
    assert_eq!(embedded.code, 0, "{}", embedded.stderr);
    let mut with_dir = base.to_vec();
    with_dir.extend(["--lists", "code-lists"]);
    let disk = morbus(&with_dir);
    assert_eq!(disk.code, 0, "{}", disk.stderr);
    for name in builtin::names() {
        assert!(
            disk.stderr.contains(&format!(
                "list '{name}' from code-lists/{name}.tsv replaces the built-in"
            )),
            "{}",
            disk.stderr
        );
    }
    assert_eq!(embedded.stdout, disk.stdout);
    // The comparison means something: every score column has some non-zero
    // value.
    let mut lines = embedded.stdout.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    for spec in idx.split(',') {
        let col = spec.replace(':', "_");
        let i = header.iter().position(|h| *h == col).unwrap();
        assert!(
            rows.iter()
                .any(|r| r[i].parse::<f64>().is_ok_and(|x| x != 0.0)),
            "column {col} is zero everywhere"
        );
    }
}

#[test]
fn lists_from_disk_score_like_the_embedded_copies() {
    let dir = TempDir::new("onengine");
    let (data, _) = invented_extract(2026, 3000);
    let input = dir.write("episodes.csv", &data);
    same_output_from_disk_and_embedded(&input, "age");
    // The project's demo extract, once it exists.
    let demo = root().join("demo-data/episodes.csv");
    if demo.exists() {
        same_output_from_disk_and_embedded("demo-data/episodes.csv", "age");
    }
}

/// Whether a normalised code is claimed by a code-list entry (`I21`,
/// `I425-I429`), by the format's prefix rule.
fn claims(entry: &str, code: &str) -> bool {
    let (first, last) = entry.split_once('-').unwrap_or((entry, entry));
    let n = first.len();
    code.len() >= n && &code[..n] >= first && &code[..n] <= last
}

fn normalise(raw: &str) -> String {
    raw.trim().to_uppercase().replace(['.', ' '], "")
}

#[test]
fn deleting_one_code_line_changes_exactly_the_episodes_with_that_code() {
    let dir = TempDir::new("scenario");
    let lists = dir.path().join("lists");
    let lists_s = lists.display().to_string();

    // 1. Export charlson.
    let r = morbus(&["lists", "export", "charlson", &lists_s]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let file = lists.join("charlson.tsv");
    let text = std::fs::read_to_string(&file).unwrap();

    // 2. Delete the code line of I25.2 (myocardial infarction).
    let target = "I252";
    let condition = "myocardial_infarction";
    let is_target = |l: &&str| l.starts_with(&format!("code\t{target}\t{condition}\t"));
    assert_eq!(text.lines().filter(is_target).count(), 1, "one I25.2 line");
    let edited: String = text
        .lines()
        .filter(|l| !is_target(l))
        .map(|l| format!("{l}\n"))
        .collect();
    std::fs::write(&file, &edited).unwrap();
    // What else claims myocardial infarction, and its weight, as the file says.
    let others: Vec<String> = edited
        .lines()
        .filter_map(|l| {
            let f: Vec<&str> = l.split('\t').collect();
            (f[0] == "code" && f.get(2) == Some(&condition)).then(|| f[1].to_string())
        })
        .collect();
    assert!(!others.is_empty());
    let weight: f64 = edited
        .lines()
        .find_map(|l| {
            let f: Vec<&str> = l.split('\t').collect();
            (f[0] == "weight" && f[1] == "charlson1987" && f[2] == condition)
                .then(|| f[3].parse().unwrap())
        })
        .unwrap();
    assert!(
        weight > 0.0,
        "the scenario needs a weighting that scores MI"
    );

    // 3. An invented extract where some episodes carry I25.2, some with
    //    another myocardial infarction code too.
    let (base, _) = invented_extract(99, 1500);
    let mut rng = Rng::new(5);
    let mut data = String::new();
    for (i, line) in base.lines().enumerate() {
        if i == 0 || !rng.chance(20) {
            data.push_str(line);
            data.push('\n');
            continue;
        }
        let mut f: Vec<String> = line.split(',').map(str::to_string).collect();
        // dx1..dx6 are fields 2..8: put I25.2 (or a child) in an empty or
        // random diagnosis slot, and sometimes another MI code.
        let slot = 2 + rng.below(6);
        f[slot] = spell(["I252", "I2520", "I252"][rng.below(3)], &mut rng);
        if rng.chance(30) {
            let other = 2 + (slot - 2 + 1 + rng.below(5)) % 6;
            f[other] = spell(&format!("{}9", others[rng.below(others.len())]), &mut rng);
        }
        data.push_str(&f.join(","));
        data.push('\n');
    }
    let input = dir.write("episodes.csv", &data);

    let index = "charlson:charlson1987,charlson:count";
    let before = morbus(&["score", &input, "--dx", "dx*", "--flags", "--index", index]);
    assert_eq!(before.code, 0, "{}", before.stderr);
    let after = morbus(&[
        "score", &input, "--dx", "dx*", "--flags", "--index", index, "--lists", &lists_s,
    ]);
    assert_eq!(after.code, 0, "{}", after.stderr);
    assert!(
        after.stderr.contains("list 'charlson' from ")
            && after.stderr.contains("replaces the built-in")
    );

    // 4. Exactly the episodes with I25.2 and no other MI code change.
    let header: Vec<&str> = before.stdout.lines().next().unwrap().split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let (score_c, count_c, flag_c) = (
        col("charlson_charlson1987"),
        col("charlson_count"),
        col(&format!("charlson_{condition}")),
    );
    let b: Vec<&str> = before.stdout.lines().collect();
    let a: Vec<&str> = after.stdout.lines().collect();
    assert_eq!(a.len(), b.len());
    assert_eq!(a[0], b[0]);
    let mut expected = Vec::new();
    let mut with_target_and_other = 0;
    for (i, row) in data.lines().enumerate().skip(1) {
        let dx: Vec<String> = row.split(',').skip(2).map(normalise).collect();
        let has_target = dx.iter().any(|c| claims(target, c));
        let has_other = dx.iter().any(|c| others.iter().any(|o| claims(o, c)));
        if has_target && has_other {
            with_target_and_other += 1;
        }
        if has_target && !has_other {
            expected.push(i);
        }
    }
    let changed: Vec<usize> = (1..b.len()).filter(|&i| a[i] != b[i]).collect();
    assert!(
        expected.len() > 50,
        "the extract carries the code often enough"
    );
    assert!(with_target_and_other > 10, "and with another MI code too");
    assert_eq!(changed, expected);
    for &i in &changed {
        let (rb, ra): (Vec<&str>, Vec<&str>) =
            (b[i].split(',').collect(), a[i].split(',').collect());
        assert_eq!((rb[flag_c], ra[flag_c]), ("1", "0"), "row {i}");
        let drop = rb[score_c].parse::<f64>().unwrap() - ra[score_c].parse::<f64>().unwrap();
        assert_eq!(drop, weight, "row {i}");
        let drop = rb[count_c].parse::<f64>().unwrap() - ra[count_c].parse::<f64>().unwrap();
        assert_eq!(drop, 1.0, "row {i}");
    }

    // 5. The diff shows the deleted line.
    let d = morbus(&["lists", "diff", "charlson", &file.display().to_string()]);
    assert_eq!(d.code, 0, "{}", d.stderr);
    assert!(
        d.stdout.contains(&format!(
            "  {condition} (1 removed, 0 added)\n    - {target}  (a line "
        )),
        "{}",
        d.stdout
    );
    assert_eq!(d.stdout.matches("\n    - ").count(), 1, "{}", d.stdout);
    assert!(!d.stdout.contains("\n    + "), "{}", d.stdout);
    assert!(d.stdout.contains("bump the 'version'"), "{}", d.stdout);
    assert!(Path::new(&file).exists());
}
