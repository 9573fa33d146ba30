//! Beyond half of `--memory` a history run spills: the episodes are
//! partitioned by patient into temporary files, resolved a partition at a
//! time and merged back in input order. The output (every layout, CSV and
//! Parquet, in and out) and the summary are the in-memory run's, and the
//! files are gone after success, failure and a signal (`tests/nothing_lost.rs`).

mod common;

use common::{code_pool, morbus, Rng, Run, TempDir};
use morbus::lists::Catalogue;
use morbus::pipeline::explain::ExplainFormat;
use morbus::pipeline::{explain_stream, score_stream, Layout, ScoreConfig, Summary, WindowScope};
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

/// What the summary says when a run spilled.
const SPILLED: &str = "the history was over half of --memory and went to temporary files";

/// A directory for runs of the command line, with the `--temp-dir` they
/// spill into.
struct Runs {
    dir: TempDir,
    temp: String,
}

impl Runs {
    fn new(tag: &str) -> Runs {
        let dir = TempDir::new(tag);
        let temp = dir.join("tmp");
        std::fs::create_dir(&temp).unwrap();
        Runs { dir, temp }
    }

    /// Runs `morbus LINE --memory MEMORY --temp-dir TEMP` (LINE as in
    /// [`common::words`]).
    fn run(&self, line: &str, values: &[&str], memory: &str) -> Run {
        let mut args = common::words(line, values);
        args.extend(["--memory", memory, "--temp-dir", &self.temp]);
        morbus(&args)
    }

    /// [`Runs::run`], which must succeed and leave no temporary file.
    fn ok(&self, line: &str, values: &[&str], memory: &str) -> Run {
        let r = self.run(line, values, memory);
        assert_eq!(r.code, 0, "{line} {values:?} {memory}: {}", r.stderr);
        self.left_nothing(line);
        r
    }

    fn left_nothing(&self, what: &str) {
        let left = files_in(std::path::Path::new(&self.temp));
        assert_eq!(left, 0, "{what}: temporary file left behind");
    }
}

/// The extracts of `rows` rows as Parquet holds them (dates as dates: the
/// unreadable ones left out): wide, and long from `seed`.
fn typed_histories(rows: usize, seed: u64) -> (String, String) {
    let wide = history(rows).replace("\r\n", "\n");
    let long = long_history(rows, seed, false)
        .lines()
        .filter(|l| !l.contains("sometime"))
        .map(|l| format!("{l}\n"))
        .collect();
    (wide, long)
}

/// A clean long extract from `seed` with, last, a row of its first episode
/// that gives another date (which --strict stops at).
fn long_with_a_disagreeing_row(rows: usize, seed: u64) -> String {
    let mut text = long_history(rows, seed, true);
    let first = text.lines().nth(1).unwrap().to_string();
    let f: Vec<&str> = first.split(',').collect();
    text.push_str(&format!(
        "{},{},2001-01-01,{},{},0,Y,I21.0\n",
        f[0], f[1], f[3], f[4]
    ));
    text
}

/// A summary without what was spilled (the rest must equal the in-memory
/// run's).
fn unspilled(s: Summary) -> Summary {
    Summary {
        spilled_records: 0,
        spilled_bytes: 0,
        over_memory: None,
        ..s
    }
}

/// An invented long extract: 300 patients, episodes of 1-4 rows (rows of an
/// episode often far apart), a primary flag and a present-on-admission
/// indicator per row, a ward column (kept), some rows giving another date,
/// age or ward than their episode's first, missing and unreadable dates,
/// missing ids.
fn long_history(rows: usize, seed: u64, clean: bool) -> String {
    // Clean: known codes, dates and ids only (for --strict, which stops at
    // the first unknown code, unreadable date or missing id).
    let pool = if clean {
        [
            "I21.0", "I50.0", "E11.9", "C34.1", "F03", "J44.9", "N18.5", "K70.3",
        ]
        .map(String::from)
        .to_vec()
    } else {
        code_pool()
    };
    let mut rng = Rng::new(seed);
    let mut out = String::from("pid,stay,date,age,ward,primary,poa,dx\n");
    let mut open: Vec<(usize, usize, String, u32, String)> = Vec::new();
    let mut stays = 0;
    for _ in 0..rows {
        let reuse = !open.is_empty() && rng.chance(55);
        let (p, stay, mut date, mut age, mut ward) = if reuse {
            open[rng.below(open.len())].clone()
        } else {
            stays += 1;
            let d = format!(
                "{}-{:02}-{:02}",
                2022 + rng.below(3),
                1 + rng.below(12),
                1 + rng.below(28)
            );
            let e = (
                rng.below(300),
                stays,
                d,
                20 + rng.below(70) as u32,
                format!("w{}", rng.below(5)),
            );
            open.push(e.clone());
            if open.len() > 400 {
                open.swap_remove(rng.below(400));
            }
            e
        };
        if rng.chance(3) {
            date = "2023-07-01".into();
        }
        if !clean && rng.chance(2) {
            date = "sometime".into();
        }
        if !clean && rng.chance(2) {
            date.clear();
        }
        if rng.chance(3) {
            age += 1;
        }
        if rng.chance(3) {
            ward = "elsewhere".into();
        }
        let pid = if !clean && rng.chance(1) {
            String::new()
        } else {
            format!("p{p}")
        };
        let primary = if rng.chance(30) { "1" } else { "0" };
        let poa = ["Y", "N", "", "W"][rng.below(4)];
        let code = pool[rng.below(pool.len())].as_str();
        out.push_str(&format!(
            "{pid},s{stay},{date},{age},{ward},{primary},{poa},{code}\n"
        ));
    }
    out
}

/// What a run gave: its output, and its summary or message.
type Ran = (Vec<u8>, Result<Summary, String>);

/// A failed run's exit code and message.
fn stopped(e: &morbus::Error) -> String {
    format!("exit {}: {e}", e.exit_code())
}

/// Scores `cfg` over `input` with the history in memory and spilled (a few
/// limits, one and two threads): the same output and summary.
fn same_spilled(engine: &Engine, cfg: &ScoreConfig, input: &str, what: &str) {
    same_spilled_by(cfg, input.len(), what, &|cfg: &ScoreConfig| {
        let mut out = Vec::new();
        let s = score_stream(engine, cfg, input.as_bytes(), &mut out);
        (out, s.map_err(|e| stopped(&e)))
    });
}

/// Explains `cfg` over `input` (CSV and JSON lines) with the history in
/// memory and spilled: the same output and summary. In memory and spilled,
/// one thread, two, and more threads than episodes (or than a partition's
/// episodes) give the same records as one thread in memory.
fn same_explained(engine: &Engine, cfg: &ScoreConfig, input: &str, what: &str) {
    let temp = TempDir::new("spill-explain-threads");
    for format in [ExplainFormat::Csv, ExplainFormat::JsonLines] {
        let run = |cfg: &ScoreConfig| -> Ran {
            let mut out = Vec::new();
            let s = explain_stream(engine, cfg, format, input.as_bytes(), &mut out);
            (out, s.map_err(|e| stopped(&e)))
        };
        let at = |threads: usize, memory: u64| ScoreConfig {
            threads,
            memory,
            temp_dir: Some(temp.path().to_path_buf()),
            ..cfg.clone()
        };
        let (one, one_summary) = run(&at(1, 1 << 30));
        for (threads, memory) in [(2, 1 << 30), (64, 1 << 30), (2, 0), (64, 0)] {
            let (out, s) = run(&at(threads, memory));
            assert!(
                out == one,
                "explain {format:?}, {what}: {threads} threads, memory {memory}: output differs from one thread's"
            );
            match (&s, &one_summary) {
                (Ok(s), Ok(want)) => assert_eq!(&unspilled(s.clone()), want, "{what}"),
                (a, b) => assert_eq!(a.is_err(), b.is_err(), "{what}: {a:?} against {b:?}"),
            }
        }
        assert_eq!(files_in(temp.path()), 0, "{what}: temporary file left");
        same_spilled_by(
            cfg,
            input.len(),
            &format!("explain {format:?}, {what}"),
            &run,
        );
    }
    #[cfg(feature = "parquet")]
    same_explained_to_parquet(engine, cfg, input, what);
}

/// Explains `cfg` over `input` to Parquet (the records handed over as
/// value records, as `explain -o out.parquet` does) in memory and spilled,
/// on one thread, two and more threads than episodes: the same file every
/// time, holding the cells of the CSV output typed
/// ([`common::assert_explain_cells`]); a run that stops, stops with the
/// CSV run's message.
#[cfg(feature = "parquet")]
fn same_explained_to_parquet(engine: &Engine, cfg: &ScoreConfig, input: &str, what: &str) {
    use morbus::io::parquet::{OutputColumns, ParquetSink};
    use morbus::pipeline::OutputForm;
    let temp = TempDir::new("spill-explain-parquet");
    let path = temp.join("out.parquet");
    let at = |threads: usize, memory: u64| ScoreConfig {
        threads,
        memory,
        temp_dir: Some(temp.path().to_path_buf()),
        ..cfg.clone()
    };
    let run = |cfg: &ScoreConfig| -> Result<Vec<u8>, String> {
        let cfg = ScoreConfig {
            output_form: OutputForm::ValueRecords,
            ..cfg.clone()
        };
        let file = std::fs::File::create(&path).unwrap();
        let columns = OutputColumns::explain(engine, &cfg, None);
        let mut sink = ParquetSink::new(Box::new(file), cfg.delimiter, columns, None);
        explain_stream(
            engine,
            &cfg,
            ExplainFormat::Csv,
            input.as_bytes(),
            &mut sink,
        )
        .and_then(|_| sink.finish())
        .map_err(|e| stopped(&e))?;
        Ok(std::fs::read(&path).unwrap())
    };
    let mut text = Vec::new();
    let reference = explain_stream(
        engine,
        &at(1, 1 << 30),
        ExplainFormat::Csv,
        input.as_bytes(),
        &mut text,
    )
    .map_err(|e| stopped(&e));
    let one = run(&at(1, 1 << 30));
    match (&one, &reference) {
        (Ok(file), Ok(_)) => {
            let whole = (0..engine.specs().len()).all(|s| engine.decimals(s) == 0);
            let weights = if whole {
                arrow_schema::DataType::Int64
            } else {
                arrow_schema::DataType::Float64
            };
            let text = String::from_utf8(text).unwrap();
            let batch = common::parquet_batch(file);
            common::assert_explain_cells(&text, &batch, &weights, &[], what);
        }
        (Err(a), Err(b)) => assert_eq!(a, b, "{what}: Parquet and CSV stop alike"),
        (a, b) => panic!(
            "{what}: Parquet {:?} against CSV {:?}",
            a.as_ref().err(),
            b.as_ref().err()
        ),
    }
    for (threads, memory) in [
        (2, 1 << 30),
        (64, 1 << 30),
        (1, 0),
        (2, 0),
        (64, 0),
        (2, 64 << 10),
    ] {
        let got = run(&at(threads, memory));
        assert!(
            got == one,
            "explain to Parquet, {what}: {threads} threads, memory {memory}: another file (or stop) than one thread's in memory"
        );
    }
    std::fs::remove_file(&path).ok();
    assert_eq!(files_in(temp.path()), 0, "{what}: temporary file left");
}

/// Runs `cfg` with `run` with the history in memory and spilled (a few
/// limits, one and two threads, with and without the input's `size`): the
/// same output and summary.
fn same_spilled_by(cfg: &ScoreConfig, size: usize, what: &str, run: &dyn Fn(&ScoreConfig) -> Ran) {
    let temp = TempDir::new("spill-same");
    let base = ScoreConfig {
        block_size: 4 << 10,
        temp_dir: Some(temp.path().to_path_buf()),
        ..cfg.clone()
    };
    let expect_error = cfg.strict || cfg.max_unreadable_dates < 1.0;
    let (reference, summary) = run(&ScoreConfig {
        memory: 1 << 30,
        ..base.clone()
    });
    if let Ok(s) = &summary {
        assert_eq!(s.spilled_records, 0, "{what}");
    }
    assert_eq!(summary.is_err(), expect_error, "{what}: {summary:?}");
    // 0: everything spills after the first block; 40 KiB and 160 KiB:
    // after some blocks, episodes read so far carried into the partitions
    // (or, knowing the input's size, as soon as a sixteenth of it shows
    // that the history will not fit). Two threads with room for more than
    // one partition at a time resolve partitions side by side; one
    // partition at a time formats on both.
    let size = Some(size as u64);
    for (memory, threads, input_size) in [
        (0, 1, None),
        (0, 2, None),
        (40 << 10, 2, None),
        (160 << 10, 1, None),
        (40 << 10, 2, size),
        (160 << 10, 1, size),
        (1 << 20, 2, size),
    ] {
        let cfg = ScoreConfig {
            memory,
            threads,
            input_size,
            ..base.clone()
        };
        let (out, s) = run(&cfg);
        assert!(
            out == reference,
            "{what}, memory {memory}: output differs\n{}\n---\n{}",
            String::from_utf8_lossy(&out[..out.len().min(2000)]),
            String::from_utf8_lossy(&reference[..reference.len().min(2000)])
        );
        match (&s, &summary) {
            (Ok(s), Ok(want)) => {
                assert!(
                    memory > 0 || s.spilled_records > 0,
                    "{what}: nothing spilled"
                );
                assert_eq!(&unspilled(s.clone()), want, "{what}, memory {memory}");
            }
            (Err(a), Err(b)) => assert_eq!(a, b, "{what}, memory {memory}"),
            (a, b) => panic!("{what}, memory {memory}: {a:?} against {b:?}"),
        }
        assert_eq!(
            files_in(temp.path()),
            0,
            "{what}: temporary file left behind"
        );
    }
}

/// The long extract's run: by `episode` (or by id alone), a 365-day
/// lookback, unreadable dates allowed.
fn long_config(episode: Option<&str>) -> ScoreConfig {
    ScoreConfig {
        layout: Layout::Long,
        dx: vec!["dx".into()],
        id: Some("pid".into()),
        episode: episode.map(String::from),
        date: Some("date".into()),
        age: Some("age".into()),
        lookback: Some(365),
        max_unreadable_dates: 100.0,
        ..ScoreConfig::default()
    }
}

/// `base` with the primary diagnosis left out, present on admission, a
/// window per list and earlier episodes only.
fn with_rules(base: &ScoreConfig) -> ScoreConfig {
    ScoreConfig {
        primary: Some("primary".into()),
        exclude_primary: true,
        poa: Some("poa".into()),
        lookback: None,
        lookback_lists: vec![("hfrs".into(), 730), ("charlson".into(), u32::MAX)],
        window: WindowScope::EarlierOnly,
        ..base.clone()
    }
}

/// The wide extract's run: a 730-day lookback, the primary diagnosis left
/// out.
fn wide_config() -> ScoreConfig {
    ScoreConfig {
        dx: vec!["dx*".into()],
        id: Some("pid".into()),
        date: Some("date".into()),
        lookback: Some(730),
        exclude_primary: true,
        ..ScoreConfig::default()
    }
}

#[test]
fn every_layout_spilled_equals_in_memory() {
    let engine = engine();
    let long = long_history(6_000, 7, false);
    let wide = history(3_000);
    let long_cfg = long_config(None);
    same_spilled(&engine, &long_cfg, &long, "long, by id");
    let episodes = ScoreConfig {
        episode: Some("stay".into()),
        ..long_cfg.clone()
    };
    same_spilled(&engine, &episodes, &long, "long, by episode");
    let kept = ScoreConfig {
        keep: vec!["ward".into()],
        ..episodes.clone()
    };
    same_spilled(&engine, &kept, &long, "long, --keep");
    let rules = with_rules(&kept);
    same_spilled(
        &engine,
        &rules,
        &long,
        "long, exclusions and windows per list",
    );
    // Without a lookback (--episode alone) the long layout is held too.
    let no_lookback = ScoreConfig {
        lookback: None,
        ..episodes.clone()
    };
    same_spilled(&engine, &no_lookback, &long, "long, no lookback");
    let wide_cfg = wide_config();
    same_spilled(&engine, &wide_cfg, &wide, "wide");
    let earlier = ScoreConfig {
        window: WindowScope::EarlierOnly,
        lookback: Some(u32::MAX),
        ..wide_cfg.clone()
    };
    same_spilled(&engine, &earlier, &wide, "wide, earlier only");
    // Stops: the first disagreement in input order (--strict), too many
    // unreadable dates; the same message either way.
    let strict = ScoreConfig {
        strict: true,
        ..kept.clone()
    };
    let clean = long_history(6_000, 8, true);
    same_spilled(&engine, &strict, &clean, "long, --strict");
    let dates = ScoreConfig {
        max_unreadable_dates: 0.0,
        ..episodes.clone()
    };
    same_spilled(&engine, &dates, &long, "long, unreadable dates");
}

#[test]
fn explain_spilled_equals_in_memory() {
    // explain's records (every matched code of each window, per index, and
    // the totals) in the same order, CSV and JSON lines, whether the
    // history was held or partitioned: every layout, --label, exclusions,
    // present on admission, windows per list, earlier only, and the stops.
    let engine = engine();
    let long = long_history(3_000, 17, false);
    let wide = history(2_000);
    let long_cfg = long_config(Some("stay"));
    same_explained(&engine, &long_cfg, &long, "long, by episode");
    let by_id = ScoreConfig {
        episode: None,
        ..long_cfg.clone()
    };
    same_explained(&engine, &by_id, &long, "long, by id");
    let labelled = ScoreConfig {
        keep: vec!["ward".into()],
        ..long_cfg.clone()
    };
    same_explained(&engine, &labelled, &long, "long, --label");
    let rules = with_rules(&labelled);
    same_explained(
        &engine,
        &rules,
        &long,
        "long, exclusions, present on admission, windows per list, earlier only",
    );
    let wide_cfg = ScoreConfig {
        // A label with quoted line breaks.
        keep: vec!["note".into()],
        ..wide_config()
    };
    same_explained(&engine, &wide_cfg, &wide, "wide, --label");
    // Fewer episodes than threads.
    same_explained(&engine, &wide_cfg, &history(5), "wide, five episodes");
    let earlier = ScoreConfig {
        window: WindowScope::EarlierOnly,
        lookback: Some(u32::MAX),
        keep: Vec::new(),
        ..wide_cfg.clone()
    };
    same_explained(&engine, &earlier, &wide, "wide, earlier only");
    // Without a lookback or an id every row stands alone: spread over the
    // partitions by row.
    let alone = ScoreConfig {
        dx: vec!["dx*".into()],
        ..ScoreConfig::default()
    };
    same_explained(&engine, &alone, &wide, "wide, no lookback, no id");
    // Stops: the first disagreement in input order (--strict), too many
    // unreadable dates; the same message either way.
    let strict = ScoreConfig {
        strict: true,
        ..labelled.clone()
    };
    let clean = long_history(3_000, 18, true);
    same_explained(&engine, &strict, &clean, "long, --strict");
    let dates = ScoreConfig {
        max_unreadable_dates: 0.0,
        ..long_cfg.clone()
    };
    same_explained(&engine, &dates, &long, "long, unreadable dates");
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
    // Budgets: every block on disk, a few in memory then disk, all in
    // memory; with the input's size known, partitions from early on.
    let size = Some(input.len() as u64);
    for (memory, threads, input_size) in [
        (0, 1, None),
        (0, 2, None),
        (100 << 10, 1, None),
        (100 << 10, 3, None),
        (100 << 10, 2, size),
        (1 << 30, 2, None),
        (1 << 30, 2, size),
    ] {
        let cfg = ScoreConfig {
            memory,
            threads,
            input_size,
            ..base.clone()
        };
        let (out, s) = run(&cfg);
        assert!(out == reference, "memory {memory}, threads {threads}");
        assert_eq!(s.spilled_records > 0, memory < 1 << 30, "memory {memory}");
        assert_eq!(unspilled(s), summary);
        assert_eq!(files_in(temp.path()), 0, "temporary file left behind");
    }
    // A long layout of two rows, spilled or not.
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
    let runs = Runs::new("spill-cli");
    let good = history(5_000);
    let input = runs.dir.write("in.csv", &good);
    let line = "score {} --dx dx* --id pid --date date --lookback 730";
    let in_memory = runs.ok(line, &[&input], "1GiB");
    let spilled = runs.ok(line, &[&input], "1KiB");
    assert_eq!(spilled.stdout, in_memory.stdout);
    // The summary says what was spilled.
    assert!(spilled.stderr.contains(SPILLED), "{}", spilled.stderr);
    assert!(!in_memory.stderr.contains(SPILLED), "{}", in_memory.stderr);
    // A record with a field too many at the end: exit 1, no file left.
    let bad = runs
        .dir
        .write("bad.csv", &format!("{good}p1,2024-01-01,x,I21.0,,,extra\n"));
    let r = runs.run(line, &[&bad], "1KiB");
    assert_eq!(r.code, 1, "{}", r.stderr);
    runs.left_nothing("bad.csv");
    // Usage: an unreadable size; a directory that does not exist.
    let r = runs.run(line, &[&input], "plenty");
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("--memory takes a size"), "{}", r.stderr);
    let missing = runs.dir.join("no-such-dir");
    let r = morbus(&common::words(
        &format!("{line} --memory 1KiB --temp-dir {{}}"),
        &[&input, &missing],
    ));
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(
        r.stderr.contains("cannot create a temporary file"),
        "{}",
        r.stderr
    );
}

/// `text` (CSV) as Parquet: the `date` column as dates, the others as text
/// (empty fields as nulls).
#[cfg(feature = "parquet")]
fn to_parquet(text: &str, path: &std::path::Path) {
    use arrow_array::builder::{Date32Builder, StringBuilder};
    use arrow_array::{ArrayRef, RecordBatch};
    use std::sync::Arc;
    let mut rdr = csv::Reader::from_reader(text.as_bytes());
    let header: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let rows: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
    let mut arrays: Vec<(String, ArrayRef)> = Vec::new();
    for (k, name) in header.iter().enumerate() {
        let a: ArrayRef = if name == "date" {
            let mut b = Date32Builder::new();
            for r in &rows {
                b.append_option(morbus::pipeline::DateFormat::Iso.parse(r[k].as_bytes()));
            }
            Arc::new(b.finish())
        } else {
            let mut b = StringBuilder::new();
            for r in &rows {
                if r[k].is_empty() {
                    b.append_null()
                } else {
                    b.append_value(&r[k])
                }
            }
            Arc::new(b.finish())
        };
        arrays.push((name.clone(), a));
    }
    let batch = RecordBatch::try_from_iter(arrays).unwrap();
    common::write_parquet(path, &batch, None);
}

#[cfg(feature = "parquet")]
#[test]
fn parquet_in_and_out_spilled_equal_in_memory() {
    let runs = Runs::new("spill-parquet");
    let (wide, long) = typed_histories(4_000, 9);
    let cases = [
        (
            "wide",
            &wide,
            "--dx dx* --id pid --date date --lookback 365",
        ),
        (
            "long",
            &long,
            "--layout long --dx dx --id pid --episode stay --keep ward --date date --age age \
             --lookback 730",
        ),
    ];
    for (name, text, opts) in cases {
        let csv_in = runs.dir.write(&format!("{name}.csv"), text);
        let pq_in = runs.dir.path().join(format!("{name}.parquet"));
        to_parquet(text, &pq_in);
        let pq_in = pq_in.display().to_string();
        let run = |input: &str, memory: &str| {
            let line = format!("score {{}} -q {opts}");
            runs.ok(&line, &[input], memory).stdout
        };
        // Parquet in, CSV out: spilled or not, and as from the CSV.
        let from_csv = run(&csv_in, "1GiB");
        assert_eq!(run(&pq_in, "1GiB"), from_csv, "{name}: Parquet in");
        assert_eq!(run(&pq_in, "0"), from_csv, "{name}: Parquet in, spilled");
        assert_eq!(run(&csv_in, "0"), from_csv, "{name}: CSV in, spilled");
        // Parquet out: the same file, spilled or not.
        for input in [&csv_in, &pq_in] {
            let a = runs.dir.join(&format!("{name}-a.parquet"));
            let b = runs.dir.join(&format!("{name}-b.parquet"));
            let line = format!("score {{}} -q {opts} -o {{}}");
            runs.ok(&line, &[input, &a], "1GiB");
            runs.ok(&line, &[input, &b], "0");
            let (a, b) = (std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
            assert!(a == b, "{name} {input}: Parquet outputs differ");
        }
    }
}

#[test]
fn a_spilled_failure_leaves_no_file() {
    // --strict and a row of an episode giving another date, late in the
    // extract: the partitions are written, the run stops with exit 3.
    let runs = Runs::new("spill-fail");
    let input = runs
        .dir
        .write("in.csv", &long_with_a_disagreeing_row(3_000, 10));
    let out = runs.dir.join("out.csv");
    let line = "score {} --layout long --dx dx --id pid --episode stay --date date --lookback 365 \
                --strict -o {}";
    let in_memory = runs.run(line, &[&input, &out], "1GiB");
    let spilled = runs.run(line, &[&input, &out], "0");
    assert_eq!(in_memory.code, 3, "{}", in_memory.stderr);
    assert_eq!(spilled.code, 3, "{}", spilled.stderr);
    assert_eq!(spilled.stderr, in_memory.stderr);
    assert!(
        spilled.stderr.contains("another date"),
        "{}",
        spilled.stderr
    );
    runs.left_nothing("--strict");
    assert!(!std::path::Path::new(&out).exists());
}

#[test]
fn a_placeholder_id_over_the_limit_is_named_loudly() {
    // Two rows in five under the placeholder id UNKNOWN: spilled, its
    // partition alone holds more than half of the 64 KiB limit. The output
    // is the in-memory run's; the summary and provenance say the limit was
    // passed and name the id with its episodes.
    let runs = Runs::new("spill-placeholder");
    let mut text = String::new();
    let (mut unknown, mut record) = (0, 0);
    // Records start with their id `pN,`; a quoted note's second line does
    // not.
    for line in history(5_000).split_inclusive('\n') {
        if line.starts_with('p') && !line.starts_with("pid,") {
            record += 1;
            if record % 5 < 2 {
                unknown += 1;
                let rest = line.split_once(',').unwrap().1;
                text.push_str(&format!("UNKNOWN,{rest}"));
                continue;
            }
        }
        text.push_str(line);
    }
    let input = runs.dir.write("in.csv", &text);
    let line = "score {} --dx dx* --id pid --date date --lookback 365 --provenance {}";
    let prov_file = |name: &str| runs.dir.join(name);
    let in_memory = runs.ok(line, &[&input, &prov_file("memory.json")], "1GiB");
    let spilled = runs.ok(line, &[&input, &prov_file("spilled.json")], "64KiB");
    assert!(spilled.stdout == in_memory.stdout, "outputs differ");
    let warning = "WARNING: the memory limit was passed";
    assert!(spilled.stderr.contains(warning), "{}", spilled.stderr);
    let named = format!("patient id 'UNKNOWN' alone has {unknown} of its");
    assert!(spilled.stderr.contains(&named), "{}", spilled.stderr);
    assert!(!in_memory.stderr.contains(warning), "{}", in_memory.stderr);
    let prov = |name: &str| common::json_file(runs.dir.path().join(name).as_path());
    let over = &prov("spilled.json")["rows"]["over_memory"];
    assert_eq!(over["id"], "UNKNOWN", "{over}");
    assert_eq!(over["id_episodes"], unknown, "{over}");
    assert!(over["episodes"].as_u64().unwrap() >= unknown, "{over}");
    assert!(over["bytes"].as_u64().unwrap() > 32 << 10, "{over}");
    assert!(prov("memory.json")["rows"].get("over_memory").is_none());
}

#[test]
fn explain_on_the_command_line_spills_and_cleans_up() {
    // explain over CSV and (typed rows) Parquet, CSV and JSON lines out,
    // --label and earlier-only windows: spilled or not, the same bytes; the
    // summary says it spilled; nothing is left in --temp-dir after success
    // or failure.
    let runs = Runs::new("spill-explain-cli");
    let (wide, long) = typed_histories(2_000, 19);
    let cases = [
        (
            "wide",
            &wide,
            "--dx dx* --id pid --date date --lookback 365 --label note",
        ),
        (
            "wide-earlier",
            &wide,
            "--dx dx* --id pid --date date --lookback all --window earlier-only",
        ),
        (
            "long",
            &long,
            "--layout long --dx dx --id pid --episode stay --label ward --date date --age age \
             --primary primary --exclude-primary --poa poa --lookback charlson=365,hfrs=730",
        ),
    ];
    for (name, text, opts) in cases {
        let csv_in = runs.dir.write(&format!("{name}.csv"), text);
        #[cfg_attr(not(feature = "parquet"), allow(unused_mut))]
        let mut inputs = vec![csv_in.clone()];
        #[cfg(feature = "parquet")]
        {
            let pq_in = runs.dir.path().join(format!("{name}.parquet"));
            to_parquet(text, &pq_in);
            inputs.push(pq_in.display().to_string());
        }
        // `extra`: --json, --threads, -o FILE (words of the line).
        let run_with = |input: &str, memory: &str, extra: &str| {
            let r = runs.ok(&format!("explain {{}} {opts} {extra}"), &[input], memory);
            assert_eq!(r.stderr.contains(SPILLED), memory != "1GiB", "{}", r.stderr);
            r.stdout
        };
        // One thread for the reference, more for the rest (explain's
        // records are made on every thread, in memory and per partition).
        let run = |input: &str, memory: &str, json: bool, threads: &str| {
            let json = if json { "--json" } else { "" };
            run_with(input, memory, &format!("--threads {threads} {json}"))
        };
        for json in [false, true] {
            let reference = run(&csv_in, "1GiB", json, "1");
            assert!(reference.lines().count() > 2_000, "{name}: {reference}");
            for input in &inputs {
                for (memory, threads) in
                    [("1GiB", "2"), ("0", "2"), ("16KiB", "64"), ("256KiB", "2")]
                {
                    let out = run(input, memory, json, threads);
                    assert!(
                        out == reference,
                        "{name} {input} --memory {memory} --threads {threads} json {json}: output differs"
                    );
                }
            }
        }
        // Parquet output: the same file, byte for byte, on one thread in
        // memory, on more threads, and spilled.
        #[cfg(feature = "parquet")]
        {
            let file = |memory: &str, threads: &str| {
                let out = runs.dir.join(&format!("{name}-{memory}-{threads}.parquet"));
                run_with(&csv_in, memory, &format!("--threads {threads} -o {out}"));
                std::fs::read(&out).unwrap()
            };
            let reference = file("1GiB", "1");
            assert!(reference.len() > 1_000, "{name}: a Parquet file");
            for (memory, threads) in [("1GiB", "2"), ("1GiB", "64"), ("0", "2"), ("16KiB", "64")] {
                assert!(
                    file(memory, threads) == reference,
                    "{name}: Parquet output --memory {memory} --threads {threads} differs"
                );
            }
        }
    }
}

#[test]
fn a_spilled_explain_stops_at_the_same_line_and_leaves_no_file() {
    // --strict and a row of an episode giving another date, late in the
    // extract (found only when the partitions are read back); then a
    // record with a field too many (found while reading): the same exit
    // and message as in memory, no output, no temporary file.
    let runs = Runs::new("spill-explain-fail");
    let disagreeing = runs
        .dir
        .write("in.csv", &long_with_a_disagreeing_row(3_000, 20));
    let too_wide = runs.dir.write(
        "wide.csv",
        &format!("{}p1,2024-01-01,x,I21.0,,,extra\n", history(3_000)),
    );
    let (out_csv, out_json) = (runs.dir.join("out.csv"), runs.dir.join("out.jsonl"));
    let long_line = "explain {} --layout long --dx dx --id pid --episode stay --date date \
                     --lookback 365 --strict -o {}";
    let wide_line = "explain {} --dx dx* --id pid --date date --lookback 365 --json -o {}";
    for (line, input, out, code, says) in [
        (long_line, &disagreeing, &out_csv, 3, "another date"),
        (wide_line, &too_wide, &out_json, 1, "line"),
    ] {
        let in_memory = runs.run(line, &[input, out], "1GiB");
        let spilled = runs.run(line, &[input, out], "0");
        assert_eq!(in_memory.code, code, "{}", in_memory.stderr);
        assert_eq!(spilled.code, code, "{}", spilled.stderr);
        assert_eq!(spilled.stderr, in_memory.stderr);
        assert!(spilled.stderr.contains(says), "{}", spilled.stderr);
        runs.left_nothing(line);
        assert!(!std::path::Path::new(&out_csv).exists());
        assert!(!std::path::Path::new(&out_json).exists());
    }
}

/// What goes wrong on a row of [`strict_extract`].
#[derive(Clone, Copy, Debug)]
enum Problem {
    /// The long layout's row repeats the episode of 50 rows before (its id
    /// and stay) with another date (a disagreement: --strict stops, exit 3).
    OtherDate,
    /// The same, with another age.
    OtherAge,
    /// The same, with another ward (a kept value, `--keep` / `--label`).
    OtherWard,
    /// A field too many: exit 1.
    TooWide,
    /// An unreadable date: --strict stops, exit 3.
    UnreadableDate,
    /// A code of no edition: --strict stops, exit 3.
    UnknownCode,
    /// An empty id: --strict stops, exit 3.
    NoId,
}

/// An invented extract of `rows` data rows, each an episode of its own (so
/// that nothing disagrees and nothing is wrong), except `problems` on the
/// given 0-based data rows (data row `i` is on line `i + 2`). Long: one code
/// a row, a stay, an age and a ward; wide: two codes a row.
fn strict_extract(long: bool, rows: usize, problems: &[(usize, Problem)]) -> String {
    let codes = ["I21.0", "I50.0", "E11.9", "C34.1", "F03", "J44.9", "N18.5"];
    let row = |i: usize| {
        (
            format!("p{}", i % 97),
            format!("s{i}"),
            format!("2024-{:02}-{:02}", 1 + i % 12, 1 + i % 28),
            (40 + i % 30).to_string(),
            format!("w{}", i % 3),
            codes[i % codes.len()].to_string(),
        )
    };
    let mut out = String::from(if long {
        "pid,stay,date,age,ward,primary,poa,dx\n"
    } else {
        "pid,date,dx1,dx2\n"
    });
    for i in 0..rows {
        let (mut pid, mut stay, mut date, mut age, mut ward, mut code) = row(i);
        let mut extra = "";
        if let Some(&(_, p)) = problems.iter().find(|p| p.0 == i) {
            let earlier = || {
                assert!(long && i >= 50, "{p:?} on row {i}");
                row(i - 50)
            };
            match p {
                Problem::OtherDate => {
                    (pid, stay, _, age, ward, _) = earlier();
                    date = "2001-01-01".into();
                }
                Problem::OtherAge => {
                    (pid, stay, date, _, ward, _) = earlier();
                    age = "99".into();
                }
                Problem::OtherWard => {
                    (pid, stay, date, age, _, _) = earlier();
                    ward = "elsewhere".into();
                }
                Problem::TooWide => extra = ",extra",
                Problem::UnreadableDate => date = "sometime".into(),
                Problem::UnknownCode => code = "XYZ".into(),
                Problem::NoId => pid.clear(),
            }
        }
        if long {
            out.push_str(&format!(
                "{pid},{stay},{date},{age},{ward},0,Y,{code}{extra}\n"
            ));
        } else {
            let other = codes[(i + 3) % codes.len()];
            out.push_str(&format!("{pid},{date},{code},{other}{extra}\n"));
        }
    }
    out
}

/// The cases of the --strict ordering tests: problems, and what the first
/// of them in input order says (its line and words, its exit code).
#[allow(clippy::type_complexity)]
fn strict_cases() -> Vec<(bool, Vec<(usize, Problem)>, &'static str)> {
    use Problem::*;
    vec![
        // A disagreement long before a bad record, in another block.
        (
            true,
            vec![(100, OtherDate), (2_500, TooWide)],
            "exit 3: line 102: a row of a unit gives another date",
        ),
        (
            true,
            vec![(120, OtherAge), (2_500, UnknownCode)],
            "exit 3: line 122: a row of a unit gives another age",
        ),
        (
            true,
            vec![(1_300, OtherWard), (2_900, UnreadableDate)],
            "exit 3: line 1302: a row of a unit gives another value of column 'ward'",
        ),
        (
            true,
            vec![(2_000, OtherDate), (2_950, NoId)],
            "exit 3: line 2002: a row of a unit gives another date",
        ),
        // Two disagreements (other patients, so likely other partitions):
        // the earlier one.
        (
            true,
            vec![(1_700, OtherDate), (400, OtherAge), (2_800, TooWide)],
            "exit 3: line 402: a row of a unit gives another age",
        ),
        // The disagreement on the line just before the bad record (the same
        // block).
        (
            true,
            vec![(2_000, OtherDate), (2_001, TooWide)],
            "exit 3: line 2002: a row of a unit gives another date",
        ),
        // The bad record first: it stops the run, in memory or spilled.
        (
            true,
            vec![(2_000, OtherDate), (1_999, TooWide)],
            "exit 1: line 2001:",
        ),
        (
            true,
            vec![(2_600, OtherAge), (150, UnknownCode)],
            "exit 3: line 152:",
        ),
        (
            true,
            vec![(2_600, OtherWard), (1_000, UnreadableDate)],
            "exit 3: line 1002:",
        ),
        // A disagreement alone, late: found when the partitions are read.
        (
            true,
            vec![(2_990, OtherDate)],
            "exit 3: line 2992: a row of a unit gives another date",
        ),
        // Wide: every row is an episode of its own (nothing can disagree);
        // the first bad record stops the run.
        (
            false,
            vec![(300, UnknownCode), (2_500, TooWide)],
            "exit 3: line 302:",
        ),
        (
            false,
            vec![(2_500, UnknownCode), (700, TooWide)],
            "exit 1: line 702:",
        ),
        (false, vec![(2_900, NoId)], "exit 3: line 2902:"),
    ]
}

#[test]
fn a_spilled_strict_run_stops_at_the_first_problem_in_input_order() {
    // Hand-built extracts with a disagreement before, after or beside a bad
    // record (or two disagreements): `score` and `explain` (CSV and JSON
    // lines) stop at the same first problem, with the same message and exit
    // code, in memory and spilled (at once, after some blocks, knowing the
    // input's size or not, one and two threads), and leave no temporary
    // file.
    let engine = engine();
    for (long, problems, says) in strict_cases() {
        let text = strict_extract(long, 3_000, &problems);
        let cfg = if long {
            ScoreConfig {
                layout: Layout::Long,
                dx: vec!["dx".into()],
                id: Some("pid".into()),
                episode: Some("stay".into()),
                date: Some("date".into()),
                age: Some("age".into()),
                keep: vec!["ward".into()],
                lookback: Some(365),
                strict: true,
                ..ScoreConfig::default()
            }
        } else {
            ScoreConfig {
                dx: vec!["dx*".into()],
                id: Some("pid".into()),
                date: Some("date".into()),
                lookback: Some(730),
                strict: true,
                ..ScoreConfig::default()
            }
        };
        let what = format!("{problems:?}");
        // The in-memory run stops where the case says.
        let mut out = Vec::new();
        let reference = score_stream(&engine, &cfg, text.as_bytes(), &mut out);
        let message = stopped(&reference.expect_err(&what));
        assert!(message.starts_with(says), "{what}: {message}");
        same_spilled(&engine, &cfg, &text, &what);
        same_explained(&engine, &cfg, &text, &what);
    }
}

#[test]
fn a_spilled_strict_run_on_the_command_line_stops_at_the_first_problem() {
    // The long cases of the --strict ordering tests on the command line,
    // from CSV and (without a field too many, which a typed file cannot
    // hold) Parquet: `score` and `explain`, spilled (one and two threads)
    // or not, give the same exit code and message, write no output and
    // leave no temporary file.
    let dir = TempDir::new("spill-strict-order");
    let temp = dir.path().join("tmp");
    std::fs::create_dir(&temp).unwrap();
    let out = dir.join("out.csv");
    let mut checked_parquet = 0;
    for (n, (long, problems, says)) in strict_cases().into_iter().enumerate() {
        if !long {
            continue;
        }
        let text = strict_extract(true, 3_000, &problems);
        let csv_in = dir.write(&format!("case{n}.csv"), &text);
        #[cfg_attr(not(feature = "parquet"), allow(unused_mut))]
        let mut inputs: Vec<(String, Option<String>)> = vec![(csv_in, None)];
        #[cfg(feature = "parquet")]
        if !problems.iter().any(|p| matches!(p.1, Problem::TooWide)) {
            let pq_in = dir.path().join(format!("case{n}.parquet"));
            to_parquet(&text, &pq_in);
            let name = pq_in.display().to_string();
            // A typed file names its rows: data row 1 is line 2 of the CSV.
            let line: u64 = says["exit 3: line ".len()..]
                .split(':')
                .next()
                .unwrap()
                .parse()
                .unwrap();
            inputs.push((name.clone(), Some(format!("row {} of {name}: ", line - 1))));
        }
        for (input, row_named) in &inputs {
            for command in ["score", "explain"] {
                let run = |memory: &str, threads: &str| {
                    let mut a: Vec<String> = vec![command.into(), input.clone()];
                    a.extend(
                        [
                            "--layout",
                            "long",
                            "--dx",
                            "dx",
                            "--id",
                            "pid",
                            "--episode",
                            "stay",
                            "--date",
                            "date",
                            "--age",
                            "age",
                            "--lookback",
                            "365",
                            "--strict",
                            "--memory",
                            memory,
                            "--threads",
                            threads,
                            "--temp-dir",
                        ]
                        .map(String::from),
                    );
                    a.push(temp.display().to_string());
                    a.extend([
                        if command == "score" {
                            "--keep"
                        } else {
                            "--label"
                        }
                        .into(),
                        "ward".into(),
                        "-o".into(),
                        out.clone(),
                    ]);
                    let r = morbus(&a.iter().map(String::as_str).collect::<Vec<_>>());
                    assert_eq!(files_in(&temp), 0, "{problems:?}: temporary file left");
                    assert!(!std::path::Path::new(&out).exists(), "{problems:?}: output");
                    r
                };
                let in_memory = run("1GiB", "1");
                let code: i32 = says["exit ".len()..][..1].parse().unwrap();
                assert_eq!(
                    in_memory.code, code,
                    "{input} {problems:?}: {}",
                    in_memory.stderr
                );
                match row_named {
                    None => {
                        let at = &says[says.find("line").unwrap()..];
                        assert!(in_memory.stderr.contains(at), "{}", in_memory.stderr);
                    }
                    Some(row) => {
                        checked_parquet += 1;
                        assert!(
                            in_memory.stderr.contains(row),
                            "{row}: {}",
                            in_memory.stderr
                        );
                    }
                }
                for (memory, threads) in [("0", "1"), ("0", "2"), ("40KiB", "2")] {
                    let spilled = run(memory, threads);
                    assert_eq!(
                        (spilled.code, &spilled.stderr),
                        (in_memory.code, &in_memory.stderr),
                        "{command} {input} {problems:?} --memory {memory} --threads {threads}"
                    );
                }
            }
        }
    }
    assert!(cfg!(not(feature = "parquet")) || checked_parquet > 0);
    // A read that fails (a gzip input cut short) after a disagreement: the
    // blocks read before the failure are merged first, so the disagreement
    // stops the run, held or spilled (60,000 rows: more than one block of
    // the command line's 1 MiB).
    let text = strict_extract(true, 60_000, &[(100, Problem::OtherDate)]);
    let mut gz = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::default());
    std::io::Write::write_all(&mut gz, text.as_bytes()).unwrap();
    let gz = gz.finish().unwrap();
    let cut = dir.path().join("cut.csv.gz");
    std::fs::write(&cut, &gz[..gz.len() * 3 / 5]).unwrap();
    let cut = cut.display().to_string();
    let run = |memory: &str, threads: &str| {
        let r = morbus(&[
            "score",
            &cut,
            "--layout",
            "long",
            "--dx",
            "dx",
            "--id",
            "pid",
            "--episode",
            "stay",
            "--date",
            "date",
            "--lookback",
            "365",
            "--strict",
            "--memory",
            memory,
            "--threads",
            threads,
            "--temp-dir",
            &temp.display().to_string(),
            "-o",
            &out,
        ]);
        assert_eq!(files_in(&temp), 0, "cut gzip: temporary file left");
        assert!(!std::path::Path::new(&out).exists(), "cut gzip: output");
        r
    };
    let in_memory = run("1GiB", "2");
    assert_eq!(in_memory.code, 3, "{}", in_memory.stderr);
    assert!(
        in_memory
            .stderr
            .contains("line 102: a row of a unit gives another date"),
        "{}",
        in_memory.stderr
    );
    for (memory, threads) in [("0", "1"), ("0", "2"), ("40KiB", "2")] {
        let spilled = run(memory, threads);
        assert_eq!(
            (spilled.code, &spilled.stderr),
            (in_memory.code, &in_memory.stderr),
            "cut gzip --memory {memory} --threads {threads}"
        );
    }
}

#[test]
fn an_output_column_taken_twice_stops_before_the_rows() {
    // `--keep pid` (score) or `--label pid` (explain) with --id pid: the
    // output would hold the column twice, a usage error (exit 2) found
    // once the header is read, before any row. So it comes before a later
    // disagreement (--strict) or too many unreadable dates, held or
    // spilled alike (a spilled run used to find it before the partitions'
    // disagreements and dates, the in-memory run after them).
    let engine = engine();
    let strict = ScoreConfig {
        layout: Layout::Long,
        dx: vec!["dx".into()],
        id: Some("pid".into()),
        episode: Some("stay".into()),
        date: Some("date".into()),
        keep: vec!["pid".into()],
        lookback: Some(365),
        strict: true,
        ..ScoreConfig::default()
    };
    let dates = ScoreConfig {
        strict: false,
        max_unreadable_dates: 0.0,
        ..strict.clone()
    };
    use Problem::*;
    for (cfg, problems) in [
        (&strict, vec![(2_990, OtherDate)]),
        (&dates, vec![(2_990, UnreadableDate)]),
    ] {
        let text = strict_extract(true, 3_000, &problems);
        let what = format!("{problems:?}");
        for explain in [false, true] {
            let mut out = Vec::new();
            let r = if explain {
                explain_stream(&engine, cfg, ExplainFormat::Csv, text.as_bytes(), &mut out)
            } else {
                score_stream(&engine, cfg, text.as_bytes(), &mut out)
            };
            let message = stopped(&r.expect_err(&what));
            assert!(
                message.starts_with("exit 2: ") && message.contains("'pid'"),
                "{what}: {message}"
            );
        }
        same_spilled(&engine, cfg, &text, &what);
        same_explained(&engine, cfg, &text, &what);
    }
}
