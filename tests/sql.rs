//! `morbus sql` and `lists export --format prefixes` from the command line:
//! options, messages and exit codes, the provenance header, and scripts
//! whose diff shows exactly what an edit of a list changed. Equality of the
//! scripts' scores with `morbus score` on real engines is checked in
//! `python/tests/test_sql.py`.

mod common;

use std::path::PathBuf;

use morbus::lists::Catalogue;

use common::{morbus, Run};

fn tmp(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("morbus-sql-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// `morbus sql --dialect duckdb --table episodes LINE` (see
/// [`common::words`]).
fn sql(line: &str, values: &[&str]) -> Run {
    common::run(
        &format!("sql --dialect duckdb --table episodes {line}"),
        values,
    )
}

#[test]
fn globs_need_the_tables_columns() {
    let r = sql("--dx dx*", &[]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("--columns"), "{}", r.stderr);
    let r = sql("--dx dx* --columns id,dx1,dx2,age", &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r.stdout.contains("2 AS position, CAST(r.\"dx2\" AS TEXT)"));
    assert!(!r.stdout.contains("\"age\" AS TEXT)"));
}

#[test]
fn columns_and_options_are_checked_as_in_score() {
    let r = sql("--dx dx1 --age years --columns id,dx1,age", &[]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr
            .contains("age column 'years' not found; columns in the input: id, dx1, age"),
        "{}",
        r.stderr
    );
    let r = sql("--dx dx1 --lookback 365 --id id", &[]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("--lookback needs --id"), "{}", r.stderr);
    let r = sql("--dx dx1 --create index x", &[]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains("'view NAME' or 'table NAME'"),
        "{}",
        r.stderr
    );
    let r = sql("--dx dx1 --layout long", &[]);
    assert_eq!(r.code, 2);
    // An output column that the table already has.
    let r = sql("--dx dx1 --columns dx1,charlson_quan2011", &[]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("already exists"), "{}", r.stderr);
}

#[test]
fn the_header_carries_version_lists_and_options() {
    let r = sql("--dx dx1,dx2 --id pid --date day --lookback all", &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let header: Vec<&str> = r
        .stdout
        .lines()
        .take_while(|l| l.starts_with("--"))
        .collect();
    let header = header.join("\n");
    assert!(header.contains(&format!("morbus {}", morbus::VERSION)));
    let cat = Catalogue::builtin();
    for name in ["charlson", "elixhauser", "hfrs"] {
        let l = cat.get(name).unwrap();
        assert!(
            header.contains(&format!("--   {} {} {}", l.name, l.version, l.checksum)),
            "{name} missing from\n{header}"
        );
    }
    assert!(header.contains("--   lookback (days): all"));
    assert!(header.contains("--   window: current-and-earlier"));
    assert!(header.contains("--   date format: %Y-%m-%d"));
    assert!(header.contains("--   max unreadable dates: 1%"));
    assert!(header.contains("--   diagnosis columns: dx1, dx2"));
    // The same options give the same script.
    let again = sql("--dx dx1,dx2 --id pid --date day --lookback all", &[]);
    assert_eq!(again.stdout, r.stdout);
}

#[test]
fn an_edited_list_changes_only_its_rows_and_header() {
    let dir = tmp("edit");
    let r = common::run("lists export charlson {}", &[dir.to_str().unwrap()]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let path = dir.join("charlson.tsv");
    let text = std::fs::read_to_string(&path).unwrap();
    let before = sql(
        "--dx dx1 --index charlson --lists {}",
        &[dir.to_str().unwrap()],
    );
    assert_eq!(before.code, 0, "{}", before.stderr);
    // Remove the code line of I43 (cardiomyopathy in diseases classified
    // elsewhere, under congestive heart failure) and bump the version.
    let mut removed = 0;
    let edited: Vec<String> = text
        .lines()
        .filter(|l| {
            let f: Vec<&str> = l.split('\t').collect();
            let drop = f.len() > 1 && f[0] == "code" && f[1].trim() == "I43";
            removed += drop as usize;
            !drop
        })
        .map(|l| {
            if l.starts_with("version\t") {
                format!("{l}.1")
            } else {
                l.to_string()
            }
        })
        .collect();
    assert_eq!(removed, 1, "the exported list has one I43 code line");
    std::fs::write(&path, edited.join("\n") + "\n").unwrap();
    let after = sql(
        "--dx dx1 --index charlson --lists {}",
        &[dir.to_str().unwrap()],
    );
    assert_eq!(after.code, 0, "{}", after.stderr);
    let a: Vec<&str> = before.stdout.lines().collect();
    let b: Vec<&str> = after.stdout.lines().collect();
    let gone: Vec<&&str> = a.iter().filter(|l| !b.contains(l)).collect();
    let new: Vec<&&str> = b.iter().filter(|l| !a.contains(l)).collect();
    // Only the list's header line and the I43 prefix row disappear; the
    // header line comes back with the new version and checksum.
    assert_eq!(gone.len(), 2, "{gone:?}");
    assert!(gone.iter().any(|l| l.contains("'I43', 'I43'")), "{gone:?}");
    assert_eq!(new.len(), 1, "{new:?}");
    assert!(
        new[0].starts_with("--   charlson ") && new[0].contains(".1 "),
        "{new:?}"
    );
}

#[test]
fn prefixes_export_writes_a_flat_csv() {
    let dir = tmp("prefixes");
    let d = dir.to_str().unwrap();
    let r = common::run("lists export charlson {} --format prefixes", &[d]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let text = std::fs::read_to_string(dir.join("charlson-prefixes.csv")).unwrap();
    let mut lines = text.lines();
    assert_eq!(
        lines.next().unwrap(),
        "list,version,condition,label,prefix,entry,points_charlson1987,points_quan2011,points_count"
    );
    // Quan et al., Med Care 2005;43:1130-9, Table 1 (from memory): I21 and
    // I22 code myocardial infarction; Charlson et al. 1987 weight it 1.
    assert!(
        text.lines().any(|l| l.starts_with("charlson,")
            && l.contains(",myocardial_infarction,")
            && l.contains(",I21,I21,1,")),
        "{text}"
    );
    // A second export without --force is refused.
    let r = common::run("lists export charlson {} --format prefixes", &[d]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("--force"), "{}", r.stderr);
}

#[test]
fn history_options_are_checked_as_in_score() {
    // A window for a list the run does not score.
    let r = sql(
        "--dx dx1 --index charlson --id pid --date day --lookback hfrs=365",
        &[],
    );
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains("names list 'hfrs', which is not scored"),
        "{}",
        r.stderr
    );
    let r = sql("--dx dx1 --window earlier-only", &[]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("--window is used with --lookback"));
    let r = sql(
        "--dx dx1 --id pid --date day --lookback 30 --window later",
        &[],
    );
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("'current-and-earlier' or 'earlier-only'"));
    let r = sql(
        "--dx dx1 --id pid --date day --lookback 30 --date-format %d/%m",
        &[],
    );
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains("--date-format '%d/%m' must hold %Y"),
        "{}",
        r.stderr
    );
    let r = sql("--dx dx1 --max-unreadable-dates 150", &[]);
    assert_eq!(r.code, 2);
    assert!(r
        .stderr
        .contains("--max-unreadable-dates takes a percentage"));
}

#[test]
fn edition_is_refused_with_its_reason() {
    // `score --edition` changes the summary's counts only, never a score:
    // the SQL, which writes no summary, says so rather than ignore it.
    let r = sql("--dx dx1 --edition who", &[]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains("never changes a score") && r.stderr.contains("no summary"),
        "{}",
        r.stderr
    );
}

#[test]
fn a_date_column_brings_the_unreadable_dates_stop() {
    let with = sql(
        "--dx dx1 --id pid --date day --lookback 30 \
         --max-unreadable-dates 2.5",
        &[],
    );
    assert_eq!(with.code, 0, "{}", with.stderr);
    assert!(with
        .stdout
        .contains("c.unreadable * 100.0 > 2.5 * c.non_empty"));
    assert!(with
        .stdout
        .contains("more than the 2.5% allowed by --max-unreadable-dates"));
    assert!(with.stdout.contains("WHERE g.passed = 1"));
    let without = sql("--dx dx1", &[]);
    assert!(!without.stdout.contains("date_guard"));
    // PostgreSQL: the function that raises the message, temporary for a
    // query, named after a view and kept with it.
    let pg = common::run(
        "sql --dialect postgres --table t --dx dx1 --id pid --date day \
         --lookback 30",
        &[],
    );
    assert!(pg
        .stdout
        .contains("CREATE OR REPLACE FUNCTION pg_temp.\"morbus_stop\"(message TEXT)"));
    let pg = common::run(
        "sql --dialect postgres --table t --dx dx1 --id pid --date day \
         --lookback 30 --create view s.scored",
        &[],
    );
    assert!(pg
        .stdout
        .contains("CREATE FUNCTION \"s\".\"scored_stop\"(message TEXT)"));
}

#[test]
fn order_by_is_checked_and_postgres_without_it_warns() {
    let r = sql("--dx dx1 --columns id,dx1 --order-by row_no", &[]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr
            .contains("--order-by column 'row_no' not found; columns in the input: id, dx1"),
        "{}",
        r.stderr
    );
    let r = sql("--dx dx1 --order-by id,dx1", &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r
        .stdout
        .contains("ROW_NUMBER() OVER (ORDER BY t.\"id\", t.\"dx1\") AS morbus_row"));
    let pg = [
        "sql",
        "--dialect",
        "postgres",
        "--table",
        "t",
        "--dx",
        "dx1",
    ];
    let r = morbus(&pg);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stderr.contains("PostgreSQL keeps no row order"),
        "{}",
        r.stderr
    );
    assert!(r.stdout.contains("ROW_NUMBER() OVER (ORDER BY t.ctid)"));
    let mut with = pg.to_vec();
    with.extend(["--order-by", "id"]);
    let r = morbus(&with);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r.stderr.is_empty(), "{}", r.stderr);
}
