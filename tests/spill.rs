//! The wide layout's input rows, kept for a history run's output, wait in a
//! temporary file beyond half of `--memory`: the output is identical to the
//! in-memory run's, and the file is gone after success and after failure.

mod common;

use common::{code_pool, morbus, Rng, TempDir};
use morbus::lists::Catalogue;
use morbus::pipeline::{score_stream, Layout, ScoreConfig};
use morbus::score::{Engine, IndexSpec, ScoreOptions};

/// An invented wide history: 500 patients over two years, CRLF line ends
/// on some rows, a quoted field with a line break now and then.
fn history(rows: usize) -> String {
    let pool = code_pool();
    let mut rng = Rng::new(41);
    let mut out = String::from("pid,date,note,dx1,dx2,dx3\n");
    for i in 0..rows {
        let day = 1 + rng.below(28);
        let month = 1 + rng.below(12);
        let year = 2023 + rng.below(2);
        let note = if rng.chance(2) {
            "\"two\nlines\""
        } else {
            "plain"
        };
        let codes: Vec<&str> = (0..3)
            .map(|_| {
                if rng.chance(40) {
                    ""
                } else {
                    pool[rng.below(pool.len())].as_str()
                }
            })
            .collect();
        let eol = if rng.chance(10) { "\r\n" } else { "\n" };
        out.push_str(&format!(
            "p{},{year}-{month:02}-{day:02},{note},{}{eol}",
            i % 500,
            codes.join(",")
        ));
    }
    out
}

fn engine() -> Engine {
    let specs = IndexSpec::parse_many("charlson:quan2011,elixhauser:vanwalraven2009,hfrs").unwrap();
    let options = ScoreOptions {
        hierarchy: true,
        flags: true,
        age: false,
    };
    Engine::new(&Catalogue::builtin(), &specs, options).unwrap()
}

fn files_in(dir: &std::path::Path) -> usize {
    std::fs::read_dir(dir).unwrap().count()
}

#[test]
fn spilled_rows_give_the_in_memory_output() {
    let input = history(40_000);
    let engine = engine();
    let temp = TempDir::new("spill-lib");
    let base = ScoreConfig {
        dx: vec!["dx*".into()],
        id: Some("pid".into()),
        date: Some("date".into()),
        lookback: Some(365),
        block_size: 16 << 10,
        temp_dir: Some(temp.path().to_path_buf()),
        ..ScoreConfig::default()
    };
    let run = |cfg: &ScoreConfig| {
        let mut out = Vec::new();
        let s = score_stream(&engine, cfg, input.as_bytes(), &mut out).unwrap();
        (out, s)
    };
    let (reference, summary) = run(&base);
    assert_eq!(summary.rows_written, 40_000);
    // Budgets: every block on disk, a few in memory then disk, all in memory.
    for (memory, threads) in [(0, 1), (0, 2), (100 << 10, 1), (100 << 10, 3), (1 << 30, 2)] {
        let cfg = ScoreConfig {
            memory,
            threads,
            ..base.clone()
        };
        let (out, s) = run(&cfg);
        assert!(out == reference, "memory {memory}, threads {threads}");
        assert_eq!(s, summary);
        assert_eq!(files_in(temp.path()), 0, "temporary file left behind");
    }
    // The long layout keeps no rows; the limit changes nothing.
    let long = "pid,date,dx\np1,2024-01-01,I21.0\np1,2024-02-01,I50.0\n";
    let cfg = ScoreConfig {
        layout: Layout::Long,
        dx: vec!["dx".into()],
        memory: 0,
        ..base.clone()
    };
    let mut a = Vec::new();
    score_stream(&engine, &cfg, long.as_bytes(), &mut a).unwrap();
    let mut b = Vec::new();
    score_stream(
        &engine,
        &ScoreConfig {
            memory: 1 << 30,
            ..cfg
        },
        long.as_bytes(),
        &mut b,
    )
    .unwrap();
    assert_eq!(a, b);
}

#[test]
fn the_command_line_spills_and_cleans_up_after_failure() {
    let dir = TempDir::new("spill-cli");
    let temp = dir.path().join("tmp");
    std::fs::create_dir(&temp).unwrap();
    let good = history(5_000);
    let input = dir.write("in.csv", &good);
    let args = |memory: &str| {
        vec![
            "score".to_string(),
            input.clone(),
            "--dx".into(),
            "dx*".into(),
            "--id".into(),
            "pid".into(),
            "--date".into(),
            "date".into(),
            "--lookback".into(),
            "730".into(),
            "--memory".into(),
            memory.into(),
            "--temp-dir".into(),
            temp.display().to_string(),
        ]
    };
    let run = |a: &[String]| morbus(&a.iter().map(String::as_str).collect::<Vec<_>>());
    let in_memory = run(&args("1GiB"));
    let spilled = run(&args("1KiB"));
    assert_eq!(in_memory.code, 0, "{}", in_memory.stderr);
    assert_eq!(spilled.code, 0, "{}", spilled.stderr);
    assert_eq!(spilled.stdout, in_memory.stdout);
    assert_eq!(files_in(&temp), 0);
    // A record with a field too many at the end: exit 1, no file left.
    let bad = dir.write("bad.csv", &format!("{good}p1,2024-01-01,x,I21.0,,,extra\n"));
    let mut a = args("1KiB");
    a[1] = bad;
    let r = run(&a);
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert_eq!(files_in(&temp), 0);
    // Usage: an unreadable size; a directory that does not exist.
    let r = run(&args("plenty"));
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("--memory takes a size"), "{}", r.stderr);
    let mut a = args("1KiB");
    let last = a.len() - 1;
    a[last] = dir.join("no-such-dir");
    let r = run(&a);
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(
        r.stderr.contains("cannot create a temporary file"),
        "{}",
        r.stderr
    );
}
