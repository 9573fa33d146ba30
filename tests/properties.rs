//! Property tests: invariants of the scoring that must hold for any
//! extract, checked on generated ones (codes drawn from every entry of the
//! built-in lists, plus values that are not codes).
//!
//! - scores do not depend on the order of the diagnosis columns, nor on the
//!   dots or the case a code is written with;
//! - adding a code never lowers a count weighting (nor the frailty score,
//!   whose points are all positive);
//! - after the hierarchy, no superior/inferior pair is flagged together;
//! - built-in lists and their exported-then-reloaded copies score alike;
//! - wide and long layouts agree on the same episodes;
//! - a lookback over the whole history equals patient-level long scoring
//!   for each patient's latest episodes;
//! - parallel wide output equals single-thread output for any block size;
//! - the sliding-window history equals a naive reference that gathers, for
//!   every episode and list, the codes of the episodes in its window
//!   (same-day episodes, whole history, per-list windows, earlier episodes
//!   only, the primary left out of the current episode only, undated
//!   episodes, one patient with many episodes).

mod common;

use std::sync::OnceLock;

use morbus::lists::{builtin, canonical_text, export_text, parse, Catalogue, Origin};
use morbus::pipeline::dates::days_from_civil;
use morbus::pipeline::dates::write_iso_date;
use morbus::pipeline::{score_stream, DateFormat, Layout, ScoreConfig, WindowScope};
use morbus::score::{Engine, IndexSpec, ScoreOptions};
use proptest::prelude::*;

/// Every weighting of every built-in list, with flags.
const ALL: &str = "charlson:charlson1987,charlson:quan2011,charlson:count,\
elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018";

fn engine_for(cat: &Catalogue, hierarchy: bool) -> Engine {
    let specs = IndexSpec::parse_many(ALL).unwrap();
    let options = ScoreOptions {
        hierarchy,
        flags: true,
        age: true,
    };
    Engine::new(cat, &specs, options).unwrap()
}

fn engine() -> &'static Engine {
    static E: OnceLock<Engine> = OnceLock::new();
    E.get_or_init(|| engine_for(&Catalogue::builtin(), true))
}

fn pool() -> &'static [String] {
    static P: OnceLock<Vec<String>> = OnceLock::new();
    P.get_or_init(|| {
        let mut p = common::code_pool();
        // A few values that are not codes, and empty fields.
        for v in ["", "", "N/A", "??", "I2", "12345"] {
            p.push(v.to_string());
        }
        p
    })
}

fn code() -> impl Strategy<Value = String> {
    prop::sample::select(pool())
}

/// The scores and flags an engine gives a set of raw values.
fn unit_values(engine: &Engine, codes: &[String], age: Option<u32>) -> Vec<String> {
    let mut unit = engine.unit();
    for c in codes {
        engine.add_raw(&mut unit.bits, c.as_bytes());
    }
    engine.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
    let mut values = Vec::new();
    engine.values(&unit.bits, age, &mut values);
    let mut out = Vec::new();
    engine.write_values(&values, b',', &mut out);
    String::from_utf8(out)
        .unwrap()
        .split(',')
        .skip(1)
        .map(str::to_string)
        .collect()
}

fn run(cfg: &ScoreConfig, input: &str) -> (String, morbus::pipeline::Summary) {
    let mut out = Vec::new();
    let s = score_stream(engine(), cfg, input.as_bytes(), &mut out).expect("scores");
    (String::from_utf8(out).unwrap(), s)
}

/// The score columns (everything after the first `skip` fields) of each
/// output row, by the `csv` crate.
fn score_rows(output: &str, skip: usize) -> Vec<Vec<String>> {
    let mut rdr = csv::Reader::from_reader(output.as_bytes());
    rdr.records()
        .map(|r| r.unwrap().iter().skip(skip).map(str::to_string).collect())
        .collect()
}

/// A wide extract `ep,age,dx1..dxK` with every row padded to K columns.
fn wide_csv(rows: &[Vec<String>], age: u32) -> (String, usize) {
    let k = rows.iter().map(Vec::len).max().unwrap_or(0).max(1);
    let mut s = String::from("ep,age");
    for i in 1..=k {
        s.push_str(&format!(",dx{i}"));
    }
    s.push('\n');
    for (i, r) in rows.iter().enumerate() {
        s.push_str(&format!("e{i},{age}"));
        for j in 0..k {
            s.push(',');
            s.push_str(r.get(j).map_or("", String::as_str));
        }
        s.push('\n');
    }
    (s, k)
}

fn wide_cfg() -> ScoreConfig {
    ScoreConfig {
        dx: vec!["dx*".into()],
        age: Some("age".into()),
        threads: 1,
        ..ScoreConfig::default()
    }
}

/// Rewrites a code with or without its dot and in another case.
fn respell(code: &str, how: u8) -> String {
    let bare = code.replace('.', "");
    let s = if how & 1 == 1
        && bare.len() > 3
        && code.chars().all(|c| c.is_ascii_alphanumeric() || c == '.')
    {
        format!("{}.{}", &bare[..3], &bare[3..])
    } else if code.chars().all(|c| c.is_ascii_alphanumeric() || c == '.') {
        bare
    } else {
        code.to_string()
    };
    match how >> 1 {
        0 => s.to_ascii_lowercase(),
        1 => s.to_ascii_uppercase(),
        _ => s
            .chars()
            .enumerate()
            .map(|(i, c)| {
                if i % 2 == 0 {
                    c.to_ascii_lowercase()
                } else {
                    c
                }
            })
            .collect(),
    }
}

fn episodes() -> impl Strategy<Value = Vec<Vec<String>>> {
    prop::collection::vec(prop::collection::vec(code(), 0..8), 1..40)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 128, ..ProptestConfig::default() })]

    #[test]
    fn column_order_does_not_matter(
        rows in episodes().prop_flat_map(|rows| {
            let shuffled: Vec<_> = rows.iter().map(|r| Just(r.clone()).prop_shuffle()).collect();
            (Just(rows), shuffled)
        })
    ) {
        let (rows, shuffled) = rows;
        let (a, _) = wide_csv(&rows, 70);
        let (b, _) = wide_csv(&shuffled, 70);
        let (oa, sa) = run(&wide_cfg(), &a);
        let (ob, sb) = run(&wide_cfg(), &b);
        let k = rows.iter().map(Vec::len).max().unwrap_or(0).max(1);
        prop_assert_eq!(score_rows(&oa, 2 + k), score_rows(&ob, 2 + k));
        prop_assert_eq!(sa.codes_read, sb.codes_read);
        prop_assert_eq!(sa.invalid_codes, sb.invalid_codes);
    }

    #[test]
    fn dots_and_case_do_not_matter(rows in episodes(), how in prop::collection::vec(0u8..6, 8)) {
        let respelled: Vec<Vec<String>> = rows
            .iter()
            .map(|r| r.iter().enumerate().map(|(i, c)| respell(c, how[i % how.len()])).collect())
            .collect();
        let (a, k) = wide_csv(&rows, 55);
        let (b, _) = wide_csv(&respelled, 55);
        let (oa, sa) = run(&wide_cfg(), &a);
        let (ob, sb) = run(&wide_cfg(), &b);
        prop_assert_eq!(score_rows(&oa, 2 + k), score_rows(&ob, 2 + k));
        prop_assert_eq!(sa.codes_read, sb.codes_read);
        prop_assert_eq!(sa.invalid_codes, sb.invalid_codes);
    }

    #[test]
    fn adding_a_code_never_lowers_a_count(codes in prop::collection::vec(code(), 0..12), extra in code()) {
        let e = engine();
        let names: Vec<&str> = e.columns().iter().map(|c| c.name.as_str()).collect();
        let before = unit_values(e, &codes, None);
        let mut more = codes.clone();
        more.push(extra.clone());
        let after = unit_values(e, &more, None);
        for (i, name) in names.iter().enumerate() {
            if name.ends_with("_count") || *name == "hfrs_gilbert2018" {
                let (x, y): (f64, f64) = (before[i].parse().unwrap(), after[i].parse().unwrap());
                prop_assert!(y >= x, "{} fell from {} to {} adding {}", name, x, y, extra);
            }
        }
    }

    #[test]
    fn hierarchy_never_leaves_both_of_a_pair(codes in prop::collection::vec(code(), 0..16)) {
        let e = engine();
        let mut unit = e.unit();
        for c in &codes {
            e.add_raw(&mut unit.bits, c.as_bytes());
        }
        let coded = unit.bits.clone();
        e.apply_hierarchy(&mut unit.bits, &mut unit.scratch);
        for l in e.lists() {
            for h in &l.list.hierarchy {
                let (sup, inf) = (l.offset + h.superior, l.offset + h.inferior);
                prop_assert!(
                    !(Engine::has(&unit.bits, sup) && Engine::has(&unit.bits, inf)),
                    "{}: both {} and {} flagged", l.list.name,
                    l.list.conditions[h.superior].key, l.list.conditions[h.inferior].key
                );
                // The superior itself is never removed by its own pair.
                // A coded superior goes only when it is itself the inferior
                // of a coded condition.
                let removed = Engine::has(&coded, sup) && !Engine::has(&unit.bits, sup);
                let outranked = Engine::has(&coded, sup)
                    && l.list.hierarchy.iter().any(|g| {
                        g.inferior == h.superior && Engine::has(&coded, l.offset + g.superior)
                    });
                prop_assert_eq!(removed, outranked);
            }
        }
        // Nothing is added by the hierarchy.
        for (a, b) in unit.bits.iter().zip(&coded) {
            prop_assert_eq!(a & !b, 0);
        }
    }

    #[test]
    fn exported_lists_score_like_the_built_ins(
        units in prop::collection::vec(prop::collection::vec(code(), 0..10), 1..20),
        age in 0u32..110,
    ) {
        let reloaded = reloaded_engines();
        for hierarchy in [true, false] {
            let (builtin_engine, copy) = &reloaded[hierarchy as usize];
            for codes in &units {
                prop_assert_eq!(
                    unit_values(builtin_engine, codes, Some(age)),
                    unit_values(copy, codes, Some(age))
                );
            }
        }
    }

    #[test]
    fn wide_and_long_agree(rows in episodes(), age in 0u32..110) {
        let (wide, k) = wide_csv(&rows, age);
        let mut long = String::from("ep,age,dx\n");
        for (i, r) in rows.iter().enumerate() {
            // An empty diagnosis row so that every episode is a unit.
            long.push_str(&format!("e{i},{age},\n"));
            for c in r {
                long.push_str(&format!("e{i},{age},{c}\n"));
            }
        }
        let (ow, sw) = run(&wide_cfg(), &wide);
        let cfg = ScoreConfig {
            dx: vec!["dx".into()],
            layout: Layout::Long,
            id: Some("ep".into()),
            ..wide_cfg()
        };
        let (ol, sl) = run(&cfg, &long);
        prop_assert_eq!(score_rows(&ow, 2 + k), score_rows(&ol, 1));
        prop_assert_eq!(sw.codes_read, sl.codes_read);
        prop_assert_eq!(sw.invalid_codes, sl.invalid_codes);
        prop_assert_eq!(sw.units, sl.units);
    }

    #[test]
    fn whole_history_equals_patient_level_long(
        eps in prop::collection::vec((0usize..5, 0i32..3000, prop::collection::vec(code(), 0..6)), 1..30)
    ) {
        // Wide, one row per episode: patient, date, codes.
        let k = eps.iter().map(|e| e.2.len()).max().unwrap_or(0).max(1);
        let mut wide = String::from("pid,date");
        for i in 1..=k {
            wide.push_str(&format!(",dx{i}"));
        }
        wide.push('\n');
        let mut long = String::from("pid,dx\n");
        for (p, d, codes) in &eps {
            let date = date_text(*d);
            wide.push_str(&format!("p{p},{date}"));
            for j in 0..k {
                wide.push(',');
                wide.push_str(codes.get(j).map_or("", String::as_str));
            }
            wide.push('\n');
            long.push_str(&format!("p{p},\n"));
            for c in codes {
                long.push_str(&format!("p{p},{c}\n"));
            }
        }
        let cfg = ScoreConfig {
            dx: vec!["dx*".into()],
            id: Some("pid".into()),
            date: Some("date".into()),
            lookback: Some(u32::MAX),
            threads: 1,
            ..ScoreConfig::default()
        };
        let (ow, _) = run(&cfg, &wide);
        let cfg_long = ScoreConfig {
            dx: vec!["dx".into()],
            layout: Layout::Long,
            id: Some("pid".into()),
            threads: 1,
            ..ScoreConfig::default()
        };
        let (ol, _) = run(&cfg_long, &long);
        let mut patient_scores = std::collections::HashMap::new();
        let mut rdr = csv::Reader::from_reader(ol.as_bytes());
        for r in rdr.records() {
            let r = r.unwrap();
            let v: Vec<String> = r.iter().skip(1).map(str::to_string).collect();
            patient_scores.insert(r[0].to_string(), v);
        }
        let wide_scores = score_rows(&ow, 2 + k);
        prop_assert_eq!(wide_scores.len(), eps.len());
        for (i, (p, d, _)) in eps.iter().enumerate() {
            let latest = eps.iter().filter(|e| e.0 == *p).map(|e| e.1).max().unwrap();
            if *d == latest {
                prop_assert_eq!(&wide_scores[i], &patient_scores[&format!("p{p}")], "episode {}", i);
            }
        }
    }

    #[test]
    fn dates_never_panic_and_iso_round_trips(
        text in prop::collection::vec(any::<u8>(), 0..24),
        pattern in "[%YmdbY/ .-]{0,10}",
        y in 1000i32..=9999, m in 1u32..=12, d in 1u32..=28,
    ) {
        let _ = DateFormat::Iso.parse(&text);
        if let Some(f) = DateFormat::from_pattern(&pattern) {
            let _ = f.parse(&text);
        }
        let iso = format!("{y:04}-{m:02}-{d:02}");
        let days = DateFormat::Iso.parse(iso.as_bytes());
        prop_assert_eq!(days, days_from_civil(y, m, d));
        prop_assert!(days.is_some());
        let dmy = DateFormat::from_pattern("%d/%m/%Y").unwrap();
        prop_assert_eq!(dmy.parse(format!("{d}/{m}/{y}").as_bytes()), days);
        // The next day is one more.
        let next = if d < 28 { days_from_civil(y, m, d + 1) } else { None };
        if let Some(n) = next {
            prop_assert_eq!(n, days.unwrap() + 1);
        }
    }

    #[test]
    fn parallel_output_equals_single_thread(
        rows in prop::collection::vec(prop::collection::vec(code(), 0..8), 1..300),
        block in 1024usize..6000,
        threads in 2usize..5,
        crlf in any::<bool>(),
    ) {
        let (mut input, _) = wide_csv(&rows, 64);
        if crlf {
            input = input.replace('\n', "\r\n");
        }
        let single = ScoreConfig { threads: 1, block_size: 1 << 20, ..wide_cfg() };
        let parallel = ScoreConfig { threads, block_size: block, ..wide_cfg() };
        let (a, sa) = run(&single, &input);
        let (b, sb) = run(&parallel, &input);
        prop_assert_eq!(a, b);
        prop_assert_eq!(sa, sb);
    }
}

/// One generated episode: patient, day (`None`: no date), codes (the first
/// is the primary diagnosis).
type GenEpisode = (usize, Option<i64>, Vec<String>);

fn history_episodes() -> impl Strategy<Value = Vec<GenEpisode>> {
    // Few patients and a short span of days: many same-day episodes and
    // windows whose ends fall on episodes.
    prop::collection::vec(
        (
            0usize..3,
            prop::option::weighted(0.9, 0i64..40),
            prop::collection::vec(code(), 0..5),
        ),
        1..40,
    )
}

fn lookback_days() -> impl Strategy<Value = u32> {
    prop_oneof![0u32..20, Just(u32::MAX)]
}

/// The naive reference of a history run: for each episode and each list,
/// the codes of every episode in that list's window, scored together.
fn history_reference(eps: &[GenEpisode], cfg: &ScoreConfig) -> Vec<Vec<String>> {
    let e = engine();
    let mut out = Vec::new();
    for (i, (p, d, codes)) in eps.iter().enumerate() {
        let mut bits = vec![0u64; e.words()];
        for l in e.lists() {
            let days = cfg
                .lookback_lists
                .iter()
                .find(|(n, _)| *n == l.list.name)
                .map(|x| x.1)
                .or(cfg.lookback);
            let mut unit = e.unit();
            let own = |unit: &mut morbus::score::Unit| {
                let skip = usize::from(cfg.exclude_primary);
                for c in codes.iter().skip(skip) {
                    e.add_raw(&mut unit.bits, c.as_bytes());
                }
            };
            match (days, cfg.window) {
                (None, _) | (Some(_), WindowScope::CurrentAndEarlier) => own(&mut unit),
                (Some(_), WindowScope::EarlierOnly) => {}
            }
            if let (Some(days), Some(d)) = (days, d) {
                for (j, (q, dj, cj)) in eps.iter().enumerate() {
                    let Some(dj) = dj else { continue };
                    let counts = j != i
                        && q == p
                        && *dj >= d - days as i64
                        && match cfg.window {
                            WindowScope::CurrentAndEarlier => dj <= d,
                            WindowScope::EarlierOnly => dj < d,
                        };
                    if counts {
                        for c in cj {
                            e.add_raw(&mut unit.bits, c.as_bytes());
                        }
                    }
                }
            }
            for id in l.offset..l.offset + l.list.conditions.len() {
                if morbus::score::Engine::has(&unit.bits, id) {
                    bits[id >> 6] |= 1 << (id & 63);
                }
            }
        }
        let mut scratch = vec![0u64; e.words()];
        e.apply_hierarchy(&mut bits, &mut scratch);
        let mut values = Vec::new();
        e.values(&bits, None, &mut values);
        let mut line = Vec::new();
        e.write_values(&values, b',', &mut line);
        out.push(
            String::from_utf8(line)
                .unwrap()
                .split(',')
                .skip(1)
                .map(str::to_string)
                .collect(),
        );
    }
    out
}

/// A wide extract `pid,date,dx1..dxK` of generated episodes.
fn history_csv(eps: &[GenEpisode]) -> (String, usize) {
    let k = eps.iter().map(|e| e.2.len()).max().unwrap_or(0).max(1);
    let mut s = String::from("pid,date");
    for i in 1..=k {
        s.push_str(&format!(",dx{i}"));
    }
    s.push('\n');
    for (p, d, codes) in eps {
        let mut date = Vec::new();
        if let Some(d) = d {
            // Days from 2024-02-20: windows cross a leap day.
            write_iso_date(19_773 + d, &mut date);
        }
        s.push_str(&format!("p{p},{}", String::from_utf8(date).unwrap()));
        for j in 0..k {
            s.push(',');
            s.push_str(codes.get(j).map_or("", String::as_str));
        }
        s.push('\n');
    }
    (s, k)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 300, ..ProptestConfig::default() })]

    #[test]
    fn history_equals_naive_reference(
        eps in history_episodes(),
        every in prop::option::of(lookback_days()),
        hfrs in prop::option::of(lookback_days()),
        charlson in prop::option::of(lookback_days()),
        earlier_only in any::<bool>(),
        exclude_primary in any::<bool>(),
        threads in 1usize..3,
        // In memory; spilled to partitions from the start; spilled after
        // some blocks of 256 bytes (episodes read so far carried over).
        spill in prop_oneof![Just(None), Just(Some(0u64)), Just(Some(3_000u64))],
    ) {
        let mut lookback_lists = Vec::new();
        if let Some(d) = hfrs {
            lookback_lists.push(("hfrs".to_string(), d));
        }
        if let Some(d) = charlson {
            lookback_lists.push(("charlson".to_string(), d));
        }
        // At least one window, else the run is not a history run.
        let lookback = if every.is_none() && lookback_lists.is_empty() { Some(0) } else { every };
        let cfg = ScoreConfig {
            dx: vec!["dx*".into()],
            id: Some("pid".into()),
            date: Some("date".into()),
            lookback,
            lookback_lists,
            window: if earlier_only { WindowScope::EarlierOnly } else { WindowScope::CurrentAndEarlier },
            exclude_primary,
            threads,
            memory: spill.unwrap_or(1 << 30),
            block_size: if spill.is_some() { 256 } else { 1 << 20 },
            ..ScoreConfig::default()
        };
        let (csv_text, k) = history_csv(&eps);
        let (out, summary) = run(&cfg, &csv_text);
        let got = score_rows(&out, 2 + k);
        let want = history_reference(&eps, &cfg);
        prop_assert_eq!(summary.units as usize, eps.len());
        match spill {
            None => prop_assert_eq!(summary.spilled_records, 0),
            Some(0) => prop_assert!(summary.spilled_records > 0),
            Some(_) => {}
        }
        prop_assert_eq!(got, want);
    }
}

#[test]
fn one_patient_with_many_episodes_equals_naive_reference() {
    // One id with 1,500 episodes over 200 days (about 7 a day), codes drawn
    // from the pool by a fixed linear congruential sequence.
    let p = pool();
    let mut x: u64 = 12_345;
    let mut next = |m: usize| {
        x = x.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
        ((x >> 33) as usize) % m
    };
    let eps: Vec<GenEpisode> = (0..1_500)
        .map(|_| {
            let d = next(200) as i64;
            let n = next(4);
            (
                0,
                Some(d),
                (0..n).map(|_| p[next(p.len())].clone()).collect(),
            )
        })
        .collect();
    for (lookback, window) in [
        (30, WindowScope::CurrentAndEarlier),
        (u32::MAX, WindowScope::CurrentAndEarlier),
        (30, WindowScope::EarlierOnly),
        (0, WindowScope::EarlierOnly),
    ] {
        let cfg = ScoreConfig {
            dx: vec!["dx*".into()],
            id: Some("pid".into()),
            date: Some("date".into()),
            lookback: Some(lookback),
            window,
            exclude_primary: true,
            ..ScoreConfig::default()
        };
        let (csv_text, k) = history_csv(&eps);
        let (out, _) = run(&cfg, &csv_text);
        assert_eq!(
            score_rows(&out, 2 + k),
            history_reference(&eps, &cfg),
            "{lookback} {window:?}"
        );
    }
}

/// `YYYY-MM-DD` of a day number from 2015-01-01 (no dates past the 28th,
/// so every month has them).
fn date_text(d: i32) -> String {
    let year = 2015 + d / 336;
    let month = (d % 336) / 28 + 1;
    let day = d % 28 + 1;
    format!("{year}-{month:02}-{day:02}")
}

/// For hierarchy on and off: an engine over the built-ins and one over
/// their exported copies, reloaded through the parser.
fn reloaded_engines() -> &'static [(Engine, Engine); 2] {
    static R: OnceLock<[(Engine, Engine); 2]> = OnceLock::new();
    R.get_or_init(|| {
        let mut cat = Catalogue::builtin();
        for l in builtin::all() {
            let text = export_text(l, builtin::text(&l.name));
            let back = parse(&text, Origin::File(format!("{}.tsv", l.name).into()))
                .unwrap()
                .list;
            assert_eq!(back.checksum, l.checksum, "{}", l.name);
            assert_eq!(canonical_text(&back), canonical_text(l), "{}", l.name);
            assert!(matches!(back.origin, Origin::File(_)));
            cat.insert(back);
        }
        [
            (
                engine_for(&Catalogue::builtin(), false),
                engine_for(&cat, false),
            ),
            (
                engine_for(&Catalogue::builtin(), true),
                engine_for(&cat, true),
            ),
        ]
    })
}

/// The properties can fail: a list with one code dropped on export scores
/// differently on that code, and a shuffled row changes nothing only
/// because the scorer ignores order (a positional score would not).
#[test]
fn the_checks_can_fail() {
    let l = builtin::all()
        .iter()
        .find(|l| l.name == "charlson")
        .unwrap();
    let text = canonical_text(l);
    let dropped: Vec<&str> = text.lines().collect();
    let at = dropped
        .iter()
        .position(|x| x.starts_with("code\tI21"))
        .expect("charlson codes I21");
    let mut lines = dropped.clone();
    lines.remove(at);
    let back = parse(&(lines.join("\n") + "\n"), Origin::File("c.tsv".into()))
        .unwrap()
        .list;
    let mut cat = Catalogue::builtin();
    cat.insert(back);
    let copy = engine_for(&cat, true);
    let codes = vec!["I21.9".to_string()];
    assert_ne!(
        unit_values(engine(), &codes, None),
        unit_values(&copy, &codes, None)
    );
    // The respelling really changes the text.
    assert_eq!(respell("I50.9", 0), "i509");
    assert_eq!(respell("I509", 3), "I50.9");
    assert_eq!(date_text(0), "2015-01-01");
    assert_eq!(date_text(335), "2015-12-28");
}
