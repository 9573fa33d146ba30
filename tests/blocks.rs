//! Scoring must not depend on where the input is cut into blocks.

use morbus::lists::Catalogue;
use morbus::pipeline::{score_stream, Layout, ScoreConfig};
use morbus::score::{Engine, IndexSpec, ScoreOptions, DEFAULT_INDICES};

fn input() -> String {
    let mut s = String::from("id,note,dx1,dx2,age\r\n");
    for i in 0..3000 {
        match i % 7 {
            0 => s.push_str(&format!(
                "{i},\"a\r\nb, \"\"c\"\"\",I21.{},E11.{},{}\r\n",
                i % 10,
                i % 10,
                i % 90
            )),
            1 => s.push_str(&format!("{i},\"\",C{:02}.1,\"F00\",\r\n", i % 100)),
            _ => s.push_str(&format!("{i},x,N18.{},W19,{}\r\n", i % 6, 40 + i % 60)),
        }
    }
    s
}

fn run(layout: Layout, block_size: usize, data: &[u8]) -> (Vec<u8>, morbus::pipeline::Summary) {
    run_threads(layout, block_size, 0, data).unwrap()
}

fn run_threads(
    layout: Layout,
    block_size: usize,
    threads: usize,
    data: &[u8],
) -> Result<(Vec<u8>, morbus::pipeline::Summary), (Vec<u8>, morbus::Error)> {
    let engine = Engine::new(
        &Catalogue::builtin(),
        &IndexSpec::parse_many(DEFAULT_INDICES).unwrap(),
        ScoreOptions {
            hierarchy: true,
            flags: true,
            age: true,
        },
    )
    .unwrap();
    let cfg = ScoreConfig {
        dx: vec!["dx*".into()],
        layout,
        id: Some("dx2".into()),
        age: Some("age".into()),
        block_size,
        threads,
        ..ScoreConfig::default()
    };
    let mut out = Vec::new();
    match score_stream(&engine, &cfg, data, &mut out) {
        Ok(s) => Ok((out, s)),
        Err(e) => Err((out, e)),
    }
}

#[test]
fn any_block_size_gives_the_same_output() {
    let data = input();
    for layout in [Layout::Wide, Layout::Long] {
        let (reference, summary) = run(layout, 1 << 24, data.as_bytes());
        assert_eq!(summary.rows_read, 3000);
        for bs in [1024, 1500, 4096, 10_000, 65_536] {
            for threads in [1, 2, 5] {
                let (out, s) = run_threads(layout, bs, threads, data.as_bytes()).unwrap();
                assert_eq!(s, summary, "block size {bs}, {threads} threads");
                assert!(
                    out == reference,
                    "block size {bs}, {threads} threads changed the output"
                );
            }
        }
        if layout == Layout::Wide {
            // every input line (without its terminator) starts its output line
            let text = String::from_utf8(reference).unwrap();
            let mut a = csv::Reader::from_reader(text.as_bytes());
            let mut b = csv::Reader::from_reader(data.as_bytes());
            let n = a
                .records()
                .zip(b.records())
                .filter(|(x, y)| {
                    let (x, y) = (x.as_ref().unwrap(), y.as_ref().unwrap());
                    (0..5).all(|k| x.get(k) == y.get(k))
                })
                .count();
            assert_eq!(n, 3000);
        }
    }
}

#[test]
fn an_error_in_a_late_block_stops_after_the_rows_before_it() {
    let mut data = input();
    // 3000 good rows (some spanning two lines), then a short record.
    let lines_before = data.matches('\n').count();
    data.push_str("bad,row\r\n");
    data.push_str("3001,x,I21,I50,70\r\n");
    for threads in [1, 2, 4] {
        let (out, err) = run_threads(Layout::Wide, 1024, threads, data.as_bytes()).unwrap_err();
        assert_eq!(err.exit_code(), 1);
        assert_eq!(
            err.to_string(),
            format!(
                "line {}: record has 2 fields but the header has 5",
                lines_before + 1
            )
        );
        // Everything before the bad record was written, nothing after it.
        let text = String::from_utf8(out).unwrap();
        let rows = csv::Reader::from_reader(text.as_bytes()).records().count();
        assert_eq!(rows, 3000, "{threads} threads");
    }
}
