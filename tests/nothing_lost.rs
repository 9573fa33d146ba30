//! Nothing lost, whatever the user types: an input is never an output,
//! outputs are written atomically (a failed or interrupted run leaves the
//! old file as it was and no temporary file), standard streams are handled
//! (a reader that stops early, a closed standard output, a full standard
//! error), inputs that are not plain files, and Parquet timestamps with a
//! named time zone.
//!
//! Every case checks its exact exit code and message, that the input's
//! bytes did not change, and what is left in the directory.

mod common;

use std::io::Write;
use std::path::Path;
use std::process::{Command, Stdio};

use common::{invented_extract, TempDir};

const EXTRACT: &str = "episode,patient,dx1,dx2\n\
e1,p1,I21.9,E11.9\n\
e2,p1,I50.9,\n\
e3,p2,C78.0,J44.9\n";

/// Files in `dir`, sorted (temporary files start with a dot).
fn entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// An invented dated extract: `episode,patient,admitted,dx1,dx2`.
fn dated_extract(rows: usize) -> String {
    let codes = [
        "I21.9", "I50.9", "E11.9", "C78.0", "J44.9", "F03", "N18.5", "",
    ];
    let mut out = String::from("episode,patient,admitted,dx1,dx2\n");
    for i in 0..rows {
        out.push_str(&format!(
            "e{i},p{},2023-{:02}-{:02},{},{}\n",
            i % 997,
            1 + i % 12,
            1 + i % 28,
            codes[i % 7],
            codes[(i / 7) % 8]
        ));
    }
    out
}

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_morbus"))
}

/// Runs `morbus ARGS` in `dir`.
fn run_in(dir: &Path, args: &[&str]) -> common::Run {
    common::Run::from(bin().args(args).current_dir(dir).output().unwrap())
}

#[test]
fn an_input_is_never_an_output() {
    let dir = TempDir::new("same-file");
    let d = dir.path();
    dir.write("c.csv", EXTRACT);
    std::os::unix::fs::symlink("c.csv", d.join("alias.csv")).unwrap();
    dir.write("old.csv", "kept\n");
    let same = "is the same file as the input 'c.csv'; an output never replaces an input: name another output";
    let cases: Vec<(Vec<&str>, String)> = vec![
        (
            vec!["score", "c.csv", "--dx", "dx*", "-o", "c.csv"],
            format!("morbus: error: --output 'c.csv' {same}\n"),
        ),
        (
            vec!["score", "c.csv", "--dx", "dx*", "-o", "alias.csv"],
            format!("morbus: error: --output 'alias.csv' {same}\n"),
        ),
        (
            vec!["score", "c.csv", "--dx", "dx*", "--provenance", "c.csv"],
            format!("morbus: error: --provenance 'c.csv' {same}\n"),
        ),
        (
            vec!["score", "c.csv", "--dx", "dx*", "-o", "./alias.csv", "--output-format", "parquet"],
            format!("morbus: error: --output './alias.csv' {same}\n"),
        ),
        (
            vec!["explain", "c.csv", "--dx", "dx*", "-o", "c.csv"],
            format!("morbus: error: --output 'c.csv' {same}\n"),
        ),
        (
            vec!["compare", "c.csv", "--dx", "dx*", "--outcome", "dx2", "--json", "alias.csv"],
            format!("morbus: error: --json 'alias.csv' {same}\n"),
        ),
        (
            vec!["compare", "c.csv", "--dx", "dx*", "--outcome", "dx2", "--report", "c.csv"],
            format!("morbus: error: --report 'c.csv' {same}\n"),
        ),
        // Two outputs that are one file, existing or not yet.
        (
            vec!["score", "c.csv", "--dx", "dx*", "-o", "old.csv", "--provenance", "./old.csv"],
            "morbus: error: --output 'old.csv' and --provenance './old.csv' are the same file; give each output its own file\n".into(),
        ),
        (
            vec!["score", "c.csv", "--dx", "dx*", "-o", "new.csv", "--provenance", "new.csv"],
            "morbus: error: --output 'new.csv' and --provenance 'new.csv' are the same file; give each output its own file\n".into(),
        ),
        (
            vec!["compare", "c.csv", "--dx", "dx*", "--outcome", "dx2", "--json", "r", "--report", "r"],
            "morbus: error: --json 'r' and --report 'r' are the same file; give each output its own file\n".into(),
        ),
    ];
    for (args, message) in cases {
        let r = run_in(d, &args);
        assert_eq!(r.code, 2, "{args:?}: {}", r.stderr);
        assert_eq!(r.stderr, message, "{args:?}");
        assert_eq!(r.stdout, "", "{args:?}");
        assert_eq!(std::fs::read_to_string(d.join("c.csv")).unwrap(), EXTRACT);
        assert_eq!(
            std::fs::read_to_string(d.join("old.csv")).unwrap(),
            "kept\n"
        );
        assert_eq!(entries(d), ["alias.csv", "c.csv", "old.csv"], "{args:?}");
    }

    // Standard input and output count when they are the input's file.
    let o = bin()
        .args(["score", "--dx", "dx*", "-o", "c.csv"])
        .current_dir(d)
        .stdin(std::fs::File::open(d.join("c.csv")).unwrap())
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(
        String::from_utf8_lossy(&o.stderr),
        "morbus: error: --output 'c.csv' is the same file as standard input; an output never replaces an input: name another output\n"
    );
    let appended = std::fs::OpenOptions::new()
        .append(true)
        .open(d.join("c.csv"))
        .unwrap();
    let o = bin()
        .args(["score", "c.csv", "--dx", "dx*"])
        .current_dir(d)
        .stdout(appended)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(
        String::from_utf8_lossy(&o.stderr),
        format!("morbus: error: standard output {same}\n")
    );
    assert_eq!(std::fs::read_to_string(d.join("c.csv")).unwrap(), EXTRACT);
}

/// A usage error found once the input is open (a diagnosis pattern that
/// matches nothing), a record that cannot be read far into the file, or a
/// --strict stop: the existing outputs keep their bytes and no temporary
/// file is left, for every kind of output.
#[test]
fn a_failed_run_leaves_old_outputs_untouched() {
    let dir = TempDir::new("atomic");
    let d = dir.path();
    let (mut text, _) = invented_extract(12, 3000);
    dir.write("good.csv", &text);
    text.push_str("late,50,I21,too,many,fields,here,and,more\n");
    dir.write("bad.csv", &text);
    let olds = ["out.csv", "out.csv.gz", "out.parquet", "p.json", "x.csv"];
    for name in olds {
        dir.write(name, &format!("old {name}\n"));
    }
    let before = entries(d);
    let bad_line = "morbus: error: line 3002: ";
    let cases: Vec<(Vec<&str>, i32, &str)> = vec![
        (
            vec!["score", "good.csv", "--dx", "dxx*", "-o", "out.csv"],
            2,
            "morbus: error: diagnosis pattern 'dxx*' matches no column",
        ),
        (
            vec![
                "score",
                "good.csv",
                "--dx",
                "dxx*",
                "-o",
                "out.parquet",
                "--provenance",
                "p.json",
            ],
            2,
            "morbus: error: diagnosis pattern 'dxx*' matches no column",
        ),
        (
            vec![
                "score",
                "bad.csv",
                "--dx",
                "dx*",
                "-o",
                "out.csv.gz",
                "--provenance",
                "p.json",
            ],
            1,
            bad_line,
        ),
        (
            vec!["score", "bad.csv", "--dx", "dx*", "-o", "out.csv"],
            1,
            bad_line,
        ),
        (
            vec!["score", "bad.csv", "--dx", "dx*", "-o", "out.parquet"],
            1,
            bad_line,
        ),
        (
            vec![
                "score", "good.csv", "--dx", "dx*", "-o", "out.csv", "--strict",
            ],
            3,
            "morbus: error: line ",
        ),
        (
            vec![
                "explain", "bad.csv", "--dx", "dx*", "--id", "episode", "-o", "x.csv",
            ],
            1,
            bad_line,
        ),
        (
            vec![
                "score",
                "good.csv",
                "--dx",
                "dx*",
                "--age",
                "nope",
                "-o",
                "out.csv.gz",
            ],
            2,
            "morbus: error: ",
        ),
    ];
    for (args, code, start) in cases {
        let r = run_in(d, &args);
        assert_eq!(r.code, code, "{args:?}: {}", r.stderr);
        assert!(r.stderr.starts_with(start), "{args:?}: {}", r.stderr);
        assert!(!r.stderr.contains("panicked"), "{args:?}: {}", r.stderr);
        for name in olds {
            assert_eq!(
                std::fs::read_to_string(d.join(name)).unwrap(),
                format!("old {name}\n"),
                "{args:?}: {name}"
            );
        }
        assert_eq!(entries(d), before, "{args:?}: a file left behind");
    }
    // A run that succeeds replaces them, and leaves nothing else.
    let r = run_in(
        d,
        &[
            "score",
            "good.csv",
            "--dx",
            "dx*",
            "-o",
            "out.csv.gz",
            "--provenance",
            "p.json",
            "-q",
        ],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(entries(d), before);
    let gz = std::fs::read(d.join("out.csv.gz")).unwrap();
    let mut plain = String::new();
    std::io::Read::read_to_string(&mut flate2::read::MultiGzDecoder::new(&gz[..]), &mut plain)
        .unwrap();
    assert_eq!(plain.lines().count(), 3001);
    let prov = std::fs::read_to_string(d.join("p.json")).unwrap();
    let prov: serde_json::Value = serde_json::from_str(&prov).unwrap();
    assert_eq!(prov["rows"]["read"], 3000);
}

/// A new output that fails is not created at all; an unwritable place
/// fails before the run, and an output's file keeps its permissions.
#[test]
fn new_outputs_appear_only_when_complete() {
    let dir = TempDir::new("atomic-new");
    let d = dir.path();
    dir.write("bad.csv", "id,dx1\na,I21\nb,I50,extra\n");
    let r = run_in(
        d,
        &[
            "score",
            "bad.csv",
            "--dx",
            "dx1",
            "-o",
            "new.csv.gz",
            "--provenance",
            "new.json",
        ],
    );
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert_eq!(entries(d), ["bad.csv"]);
    let r = run_in(
        d,
        &["score", "bad.csv", "--dx", "dx1", "-o", "no/such/dir/x.csv"],
    );
    assert_eq!(r.code, 1);
    assert!(
        r.stderr.starts_with(
            "morbus: error: cannot create no/such/dir/x.csv: No such file or directory"
        ),
        "{}",
        r.stderr
    );
    // A link to a file that does not exist is not written through.
    std::os::unix::fs::symlink("elsewhere.csv", d.join("link.csv")).unwrap();
    dir.write("ok.csv", "id,dx1\na,I21\n");
    let r = run_in(d, &["score", "ok.csv", "--dx", "dx1", "-o", "link.csv"]);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "morbus: error: link.csv is a symbolic link to 'elsewhere.csv', which does not exist; name the file itself or remove the link\n"
    );
    assert!(!d.join("elsewhere.csv").exists());
    // A link to a file: the file is replaced, the link stays.
    dir.write("target.csv", "old\n");
    std::os::unix::fs::symlink("target.csv", d.join("to-target.csv")).unwrap();
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(d.join("target.csv"), std::fs::Permissions::from_mode(0o640)).unwrap();
    let r = run_in(
        d,
        &[
            "score",
            "ok.csv",
            "--dx",
            "dx1",
            "-o",
            "to-target.csv",
            "-q",
        ],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(std::fs::read_to_string(d.join("target.csv"))
        .unwrap()
        .starts_with("id,dx1,"));
    assert!(std::fs::symlink_metadata(d.join("to-target.csv"))
        .unwrap()
        .file_type()
        .is_symlink());
    let mode = std::fs::metadata(d.join("target.csv"))
        .unwrap()
        .permissions()
        .mode();
    assert_eq!(mode & 0o777, 0o640);
    assert_eq!(
        entries(d),
        [
            "bad.csv",
            "link.csv",
            "ok.csv",
            "target.csv",
            "to-target.csv"
        ]
    );
}

fn sh(dir: &Path, script: &str) -> std::process::Output {
    Command::new("bash")
        .arg("-c")
        .arg(format!("set -o pipefail; {script}"))
        .env("M", env!("CARGO_BIN_EXE_morbus"))
        .current_dir(dir)
        .output()
        .unwrap()
}

/// `| head` closes the pipe early: every command ends quietly with 0, so
/// that `set -o pipefail` scripts go on.
#[test]
fn a_reader_that_stops_early_ends_the_run_quietly() {
    let dir = TempDir::new("pipes");
    let d = dir.path();
    let (text, _) = invented_extract(17, 60_000);
    dir.write("big.csv", &text);
    dir.write("dated.csv", &dated_extract(60_000));
    let cases = [
        "\"$M\" score big.csv --dx 'dx*' | head -2",
        "\"$M\" score big.csv --dx 'dx*' --threads 1 | head -c 10",
        "\"$M\" score big.csv --dx 'dx*' --output-format parquet | head -c 10",
        "\"$M\" score dated.csv --dx 'dx*' --id patient --lookback all --date admitted | head -2",
        "\"$M\" explain big.csv --dx 'dx*' --id episode | head -2",
        "\"$M\" explain big.csv --dx 'dx*' --id episode --json | head -2",
        "\"$M\" lists show charlson | head -1",
        "\"$M\" lists | head -1",
        "\"$M\" lists diff charlson elixhauser | head -1",
        // The generated script is larger than a pipe's buffer.
        "\"$M\" sql --dialect duckdb --table episodes --dx dx1,dx2 | head -1",
    ];
    for script in cases {
        let o = sh(d, script);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(0), "{script}: {err}");
        assert!(
            !err.contains("error") && !err.contains("panicked"),
            "{script}: {err}"
        );
        assert!(!o.stdout.is_empty(), "{script}");
    }
    // A write error on a file is still an error.
    if Path::new("/dev/full").exists() {
        let o = sh(d, "\"$M\" score big.csv --dx 'dx*' > /dev/full");
        assert_eq!(o.status.code(), Some(1));
        assert_eq!(
            String::from_utf8_lossy(&o.stderr),
            "morbus: error: cannot write output: No space left on device (os error 28)\n"
        );
    }
}

/// A standard output closed before the run is an error; a closed or full
/// standard error never panics and leaves the exit status as it was.
#[test]
fn closed_and_full_standard_streams() {
    let dir = TempDir::new("streams");
    let d = dir.path();
    dir.write("c.csv", EXTRACT);
    let closed = "morbus: error: cannot write output: standard output is closed (give -o FILE, or redirect it)\n";
    for script in [
        "\"$M\" score c.csv --dx 'dx*' >&-",
        "\"$M\" explain c.csv --dx 'dx*' >&-",
        "\"$M\" compare c.csv --dx 'dx*' --outcome dx2 >&-",
        "\"$M\" lists >&-",
        "\"$M\" lists show charlson >&-",
    ] {
        let o = sh(d, script);
        assert_eq!(o.status.code(), Some(1), "{script}");
        assert_eq!(String::from_utf8_lossy(&o.stderr), closed, "{script}");
    }
    // With -o, a closed standard output does not matter.
    let o = sh(d, "\"$M\" score c.csv --dx 'dx*' -o out.csv -q >&-");
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    // Standard error full or closed: same exit status, no panic (exit 101).
    for (script, code) in [
        ("\"$M\" score c.csv --dx 'dx*' > /dev/null 2>/dev/full", 0),
        ("\"$M\" score c.csv --dx 'dx*' > /dev/null 2>&-", 0),
        (
            "\"$M\" score c.csv --dx 'nothing*' > /dev/null 2>/dev/full",
            2,
        ),
        ("\"$M\" score c.csv --dx 'nothing*' > /dev/null 2>&-", 2),
        ("\"$M\" lists --lists /nonexistent 2>/dev/full", 2),
    ] {
        if script.contains("/dev/full") && !Path::new("/dev/full").exists() {
            continue;
        }
        let o = sh(d, script);
        assert_eq!(o.status.code(), Some(code), "{script}");
    }
    assert_eq!(std::fs::read_to_string(d.join("c.csv")).unwrap(), EXTRACT);
}

/// Sends `signal` to a run writing `-o out.csv --provenance p.json` while
/// it waits for more input on a pipe: the temporary files go, the old
/// output keeps its bytes, and the process ends as the signal says.
fn interrupted(signal: &str, number: i32, extra: &[&str]) {
    interrupted_run("score", signal, number, extra)
}

/// [`interrupted`] for `command` (`explain` writes no provenance).
fn interrupted_run(command: &str, signal: &str, number: i32, extra: &[&str]) {
    use std::os::unix::process::ExitStatusExt;
    let dir = TempDir::new("signal");
    let d = dir.path();
    dir.write("out.csv", "old output\n");
    let mut args = vec![command, "-", "--dx", "dx*", "-o", "out.csv"];
    let provenance = command == "score";
    if provenance {
        args.extend(["--provenance", "p.json"]);
    }
    args.extend_from_slice(extra);
    let mut child = bin()
        .args(&args)
        .current_dir(d)
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut stdin = child.stdin.take().unwrap();
    // Rows reach the spill file a block (about 1 MiB) at a time: give the
    // spilling run several blocks before the pipe goes quiet.
    let spills = extra.contains(&"--temp-dir");
    let text = dated_extract(if spills { 150_000 } else { 20_000 });
    stdin.write_all(text.as_bytes()).unwrap();
    stdin.flush().unwrap();
    // The run is certainly under way once both temporary files exist; it
    // then waits for the rest of the input, which never comes.
    // With `--temp-dir .` and a zero memory limit the history is spilled
    // to 128 partition files beside them.
    let expected = usize::from(provenance) + if spills { 1 + 128 } else { 1 };
    let mut tries = 0;
    while entries(d).iter().filter(|n| n.ends_with(".tmp")).count() < expected {
        tries += 1;
        assert!(tries < 6000, "no temporary files: {:?}", entries(d));
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    let status = Command::new("bash")
        .arg("-c")
        .arg(format!("kill -{signal} {}", child.id()))
        .status()
        .unwrap();
    assert!(status.success());
    let status = child.wait().unwrap();
    drop(stdin);
    assert_eq!(status.signal(), Some(number), "{signal}: {status:?}");
    assert_eq!(entries(d), ["out.csv"], "{signal}");
    assert_eq!(
        std::fs::read_to_string(d.join("out.csv")).unwrap(),
        "old output\n"
    );
}

#[test]
fn an_interrupt_removes_the_temporary_files() {
    interrupted("INT", 2, &[]);
    interrupted("TERM", 15, &[]);
    interrupted("TERM", 15, &["--output-format", "parquet"]);
    interrupted(
        "INT",
        2,
        &["--id", "patient", "--lookback", "all", "--date", "admitted"],
    );
    // The partition files of a spilled history (a zero memory limit) go
    // too; explain's too.
    let spilled = common::words(
        "--id patient --lookback all --date admitted --memory 0 --temp-dir .",
        &[],
    );
    interrupted("TERM", 15, &spilled);
    interrupted_run("explain", "TERM", 15, &spilled);
}

/// Inputs that are not plain files: list files must be regular files of a
/// bounded size; an export never writes through a link to nothing.
#[test]
fn list_files_that_are_not_plain_files() {
    let dir = TempDir::new("list-files");
    let d = dir.path();
    std::fs::create_dir(d.join("lists")).unwrap();
    let fifo = d.join("lists/pipe.tsv");
    assert!(Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .unwrap()
        .success());
    std::os::unix::fs::symlink("/dev/zero", d.join("lists/zero.tsv")).unwrap();
    dir.write("c.csv", EXTRACT);
    let not_regular =
        "cannot read: not a regular file (a FIFO, device or socket); a list is read from a file";
    // Neither hangs on the FIFO nor reads /dev/zero without end.
    let r = run_in(d, &["score", "c.csv", "--dx", "dx*", "--lists", "lists"]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr
            .contains(&format!("lists/pipe.tsv: error: {not_regular}")),
        "{}",
        r.stderr
    );
    assert!(
        r.stderr
            .contains(&format!("lists/zero.tsv: error: {not_regular}")),
        "{}",
        r.stderr
    );
    let r = run_in(d, &["lists", "show", "lists/pipe.tsv"]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains(not_regular), "{}", r.stderr);
    let r = run_in(d, &["lists", "check", "lists/zero.tsv"]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stdout.contains(not_regular), "{}", r.stdout);

    // An export onto a link to nothing: refused without --force, the
    // link's target never created; with --force the file replaces the link.
    std::fs::create_dir(d.join("out")).unwrap();
    std::os::unix::fs::symlink("../elsewhere.tsv", d.join("out/charlson.tsv")).unwrap();
    let r = run_in(d, &["lists", "export", "charlson", "out"]);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "morbus: error: out/charlson.tsv is a symbolic link to a file that does not exist; remove it or use --force to replace it\n"
    );
    assert!(!d.join("elsewhere.tsv").exists());
    let r = run_in(d, &["lists", "export", "charlson", "out", "--force"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let m = std::fs::symlink_metadata(d.join("out/charlson.tsv")).unwrap();
    assert!(m.file_type().is_file());
    assert!(!d.join("elsewhere.tsv").exists());
    assert_eq!(entries(&d.join("out")), ["charlson.tsv"]);
}

/// Text shown on a terminal has its control characters escaped, the same
/// way for values, header names and list fields; a carriage return inside
/// a field is kept (the code reader does not drop it) and shown.
#[test]
fn shown_text_is_escaped_and_wide_encodings_refused() {
    let dir = TempDir::new("escaped");
    let d = dir.path();
    dir.write("cr.csv", "id,dx1\na,\"I21\r\"\nb,I50\n");
    let r = run_in(d, &["score", "cr.csv", "--dx", "dx1", "--strict"]);
    assert_eq!(r.code, 3);
    assert_eq!(
        r.stderr,
        "morbus: error: line 2: invalid code 'I21\\r' in column 'dx1' (--strict)\n"
    );
    let r = run_in(
        d,
        &["score", "cr.csv", "--dx", "dx1", "--index", "charlson"],
    );
    assert_eq!(r.code, 0);
    assert!(
        r.stderr
            .contains("most frequent invalid values: 'I21\\r' (1)"),
        "{}",
        r.stderr
    );
    dir.write("esc.csv", "id,d\x1b[31mx\na,I21\n");
    let r = run_in(d, &["score", "esc.csv", "--dx", "dx1"]);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "morbus: error: diagnosis column 'dx1' not found; columns in the input: id, d\\u{1b}[31mx\n"
    );
    // A list whose title and version carry control characters.
    let list = std::fs::read_to_string(common::root().join("code-lists/charlson.tsv")).unwrap();
    let mut edited = String::new();
    for line in list.lines() {
        if line.starts_with("version\t") {
            edited.push_str("version\t2026.1\x1b[2J\n");
        } else {
            edited.push_str(line);
            edited.push('\n');
        }
    }
    dir.write("charlson.tsv", &edited);
    let r = run_in(d, &["lists", "show", "charlson.tsv"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stdout.contains("version            2026.1\\u{1b}[2J\n"),
        "{}",
        r.stdout
    );
    assert!(!r.stdout.contains('\x1b'));
    // UTF-16 and UTF-32, with or without a byte-order mark: exit 1.
    let text = "id,dx1\na,I21\n";
    let cases: [(&str, Vec<u8>, &str); 4] = [
        (
            "u16le.csv",
            [
                &[0xff, 0xfe][..],
                &text
                    .encode_utf16()
                    .flat_map(u16::to_le_bytes)
                    .collect::<Vec<_>>(),
            ]
            .concat(),
            "UTF-16 (little-endian)",
        ),
        (
            "u16be.csv",
            text.encode_utf16().flat_map(u16::to_be_bytes).collect(),
            "UTF-16 (big-endian)",
        ),
        (
            "u32le.csv",
            text.chars()
                .flat_map(|c| (c as u32).to_le_bytes())
                .collect(),
            "UTF-32 (little-endian)",
        ),
        (
            "u32be.csv",
            [
                &[0, 0, 0xfe, 0xff][..],
                &text
                    .chars()
                    .flat_map(|c| (c as u32).to_be_bytes())
                    .collect::<Vec<_>>(),
            ]
            .concat(),
            "UTF-32 (big-endian)",
        ),
    ];
    for (name, bytes, encoding) in cases {
        std::fs::write(d.join(name), &bytes).unwrap();
        let r = run_in(d, &["score", name, "--dx", "dx1"]);
        assert_eq!(r.code, 1, "{name}");
        assert_eq!(
            r.stderr,
            format!("morbus: error: {name} is {encoding} text; morbus reads UTF-8 (or ASCII) text: convert it first (e.g. with iconv -t UTF-8)\n")
        );
        assert_eq!(r.stdout, "");
        assert_eq!(std::fs::read(d.join(name)).unwrap(), bytes);
    }
}

#[cfg(feature = "parquet")]
mod parquet_cases {
    use super::*;
    use arrow_array::builder::StringBuilder;
    use arrow_array::{ArrayRef, RecordBatch, TimestampMicrosecondArray};
    use common::{column, morbus};
    use std::sync::Arc;

    /// Timestamps with a named time zone (as data-frame libraries write
    /// zone-aware columns), in a column the run uses and in one it only
    /// passes on.
    fn zoned(dir: &TempDir) -> std::path::PathBuf {
        // Patient p: heart failure at 2023-01-02T15:30Z, which is 2023-01-03
        // 00:30 in Asia/Tokyo (UTC+09:00 all year, no daylight saving since
        // 1951: IANA time zone database); a myocardial infarction at
        // 2024-01-03 00:30 Tokyo time. 2023-01-03 is exactly 365 days before
        // 2024-01-03 (inclusive window); the UTC date 2023-01-02 is 366:
        // read in its zone the earlier episode counts. Charlson et al. 1987
        // weights (from memory, as in tests/history.rs): heart failure 1,
        // myocardial infarction 1.
        let micros = |days: i64, secs: i64| (days * 86_400 + secs) * 1_000_000;
        let d2023_01_02 = 19_359; // days since 1970-01-01
        let d2024_01_02 = d2023_01_02 + 365;
        let admitted = TimestampMicrosecondArray::from(vec![
            micros(d2023_01_02, 15 * 3600 + 1800),
            micros(d2024_01_02, 15 * 3600 + 1800),
        ])
        .with_timezone("Asia/Tokyo");
        // Not used by the run: 12:00Z is 07:00 in New York in January
        // (UTC-05:00, standard time) and 08:00 in July (UTC-04:00).
        let recorded = TimestampMicrosecondArray::from(vec![
            micros(d2023_01_02, 12 * 3600),
            micros(d2023_01_02 + 181, 12 * 3600),
        ])
        .with_timezone("America/New_York");
        let mut pid = StringBuilder::new();
        let mut dx = StringBuilder::new();
        for (p, d) in [("p", "I50.9"), ("p", "I21.9")] {
            pid.append_value(p);
            dx.append_value(d);
        }
        let batch = RecordBatch::try_from_iter([
            ("patient", Arc::new(pid.finish()) as ArrayRef),
            ("admitted", Arc::new(admitted) as ArrayRef),
            ("recorded", Arc::new(recorded) as ArrayRef),
            ("dx1", Arc::new(dx.finish()) as ArrayRef),
        ])
        .unwrap();
        let input = dir.path().join("zoned.parquet");
        common::write_parquet(&input, &batch, None);
        input
    }

    #[test]
    fn timestamps_with_a_named_time_zone_are_read() {
        let dir = TempDir::new("named-zone");
        let input = zoned(&dir);
        let input = input.to_str().unwrap();
        let lookback = [
            "--dx",
            "dx1",
            "--id",
            "patient",
            "--date",
            "admitted",
            "--lookback",
            "365",
            "--index",
            "charlson:charlson1987",
        ];
        let mut args = vec!["score", input];
        args.extend_from_slice(&lookback);
        let r = morbus(&args);
        assert_eq!(r.code, 0, "{}", r.stderr);
        assert_eq!(column(&r.stdout, "charlson_charlson1987"), ["1", "2"]);
        assert_eq!(
            column(&r.stdout, "admitted"),
            ["2023-01-03T00:30:00+09:00", "2024-01-03T00:30:00+09:00"]
        );
        assert_eq!(
            column(&r.stdout, "recorded"),
            ["2023-01-02T07:00:00-05:00", "2023-07-02T08:00:00-04:00"]
        );
        // Without a lookback, the zoned columns are only passed on.
        let r = morbus(&["score", input, "--dx", "dx1", "-q"]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        assert_eq!(
            column(&r.stdout, "recorded")[0],
            "2023-01-02T07:00:00-05:00"
        );
        // Parquet to Parquet keeps the arrays as they are.
        let out = dir.join("out.parquet");
        let mut args = vec!["score", input, "-o", &out, "-q"];
        args.extend_from_slice(&lookback);
        let r = morbus(&args);
        assert_eq!(r.code, 0, "{}", r.stderr);
        let file = std::fs::File::open(&out).unwrap();
        let reader = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(file)
            .unwrap()
            .build()
            .unwrap();
        let batch = reader.map(Result::unwrap).next().unwrap();
        let zone = |name: &str| {
            batch
                .schema()
                .field_with_name(name)
                .unwrap()
                .data_type()
                .to_string()
        };
        assert_eq!(zone("admitted"), "Timestamp(µs, \"Asia/Tokyo\")");
        assert_eq!(zone("recorded"), "Timestamp(µs, \"America/New_York\")");
    }

    /// A Parquet file read through a FIFO (as `<(cat f.parquet)` gives) is
    /// read whole into memory, as standard input is.
    #[test]
    fn parquet_through_a_fifo() {
        let dir = TempDir::new("parquet-fifo");
        let input = zoned(&dir);
        let fifo = dir.path().join("pipe");
        assert!(Command::new("mkfifo")
            .arg(&fifo)
            .status()
            .unwrap()
            .success());
        let bytes = std::fs::read(&input).unwrap();
        let fifo_w = fifo.clone();
        let writer = std::thread::spawn(move || std::fs::write(fifo_w, bytes).unwrap());
        let r = morbus(&["score", fifo.to_str().unwrap(), "--dx", "dx1", "-q"]);
        writer.join().unwrap();
        let direct = morbus(&["score", input.to_str().unwrap(), "--dx", "dx1", "-q"]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        assert_eq!(r.stdout, direct.stdout);
        assert_eq!(column(&r.stdout, "dx1"), ["I50.9", "I21.9"]);
    }
}
