//! The command line's help teaches: every command's `--help` ends with
//! examples that run as written (on the repository's demo data), `--index`
//! lists the available lists and weightings, and a command waiting for
//! standard input on a terminal says so.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

use morbus::lists::Catalogue;
use morbus::score::DEFAULT_INDICES;

fn help(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_morbus"))
        .args(args)
        .arg("--help")
        .output()
        .expect("run morbus");
    assert!(out.status.success(), "{args:?} --help failed");
    String::from_utf8(out.stdout).unwrap()
}

/// The lines of the help's final `Examples` section.
fn examples(text: &str) -> Vec<String> {
    let at = text
        .rfind("Examples")
        .unwrap_or_else(|| panic!("no Examples section in:\n{text}"));
    let rest = &text[at..];
    let lines: Vec<String> = rest
        .lines()
        .skip(1)
        .map(str::trim)
        .filter(|l| !l.is_empty())
        .map(String::from)
        .collect();
    assert!(
        lines.iter().all(|l| l.starts_with("morbus ")),
        "the help does not end with its examples:\n{rest}"
    );
    lines
}

/// A directory where the examples' relative paths (demo-data/,
/// code-lists/) lead to the repository's.
fn sandbox() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("morbus-help-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let repo = Path::new(env!("CARGO_MANIFEST_DIR"));
    for d in ["demo-data", "code-lists"] {
        let link = dir.join(d);
        if !link.exists() {
            std::os::unix::fs::symlink(repo.join(d), &link).unwrap();
        }
    }
    dir
}

#[test]
fn every_command_ends_with_examples_that_run() {
    let dir = sandbox();
    let bin = env!("CARGO_BIN_EXE_morbus");
    let commands: &[&[&str]] = &[
        &[],
        &["score"],
        &["explain"],
        &["compare"],
        &["lists"],
        &["lists", "show"],
        &["lists", "export"],
        &["lists", "check"],
        &["lists", "diff"],
    ];
    for args in commands {
        let ex = examples(&help(args));
        assert!(
            (2..=3).contains(&ex.len()),
            "{args:?}: {} examples",
            ex.len()
        );
        for e in &ex {
            if !args.is_empty() {
                let called = format!("morbus {}", args.join(" "));
                assert!(
                    e == &called || e.starts_with(&format!("{called} ")),
                    "{e} is not an example of {called}"
                );
            }
            let cmd = format!("{bin} {}", &e["morbus ".len()..]);
            let out = Command::new("sh")
                .arg("-c")
                .arg(&cmd)
                .current_dir(&dir)
                .stdin(Stdio::null())
                .output()
                .unwrap();
            assert!(
                out.status.success(),
                "example failed: {e}\n{}",
                String::from_utf8_lossy(&out.stderr)
            );
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn index_help_lists_the_lists_weightings_and_default() {
    for command in ["score", "explain", "compare"] {
        let text = help(&[command]);
        let flat = text.split_whitespace().collect::<Vec<_>>().join(" ");
        for l in Catalogue::builtin().lists() {
            let default = format!("{} (default)", l.default_weighting);
            let line = text
                .lines()
                .map(str::trim)
                .find(|x| x.starts_with(&format!("{}: ", l.name)))
                .unwrap_or_else(|| panic!("{command}: no line for {}", l.name));
            for w in &l.weightings {
                assert!(line.contains(&w.name), "{command}: {line} lacks {}", w.name);
            }
            assert!(line.contains(&default), "{command}: {line}");
        }
        assert!(
            flat.contains(&format!("Without --index: {DEFAULT_INDICES}")),
            "{command}"
        );
    }
}

#[test]
fn waiting_on_a_terminal_for_standard_input_says_so() {
    // Python's pty module runs the command on a pseudo-terminal, reads what
    // it writes for up to 5 s, then stops it.
    const RUN_ON_A_TERMINAL: &str = r#"
import os, pty, select, signal, sys, time
pid, fd = pty.fork()
if pid == 0:
    os.environ["MORBUS_STDIN_NOTICE_MS"] = "50"
    os.execv(sys.argv[1], sys.argv[1:])
out = b""
end = time.time() + 5
while time.time() < end and b"FILE.csv" not in out:
    ready, _, _ = select.select([fd], [], [], 0.1)
    if ready:
        try:
            out += os.read(fd, 4096)
        except OSError:
            break
os.kill(pid, signal.SIGKILL)
sys.stdout.write(out.decode("utf-8", "replace"))
"#;
    let bin = env!("CARGO_BIN_EXE_morbus");
    let out = match Command::new("python3")
        .args(["-c", RUN_ON_A_TERMINAL, bin, "score", "--dx", "dx1"])
        .stdin(Stdio::null())
        .output()
    {
        Ok(o) => o,
        Err(_) => {
            eprintln!("SKIPPED: python3 is not installed (needed for a pseudo-terminal)");
            return;
        }
    };
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("waiting for CSV on standard input")
            && text.contains("morbus score FILE.csv"),
        "{text}"
    );
    // Data on a pipe: no notice.
    let mut child = Command::new(bin)
        .args(["score", "--dx", "dx1", "-q"])
        .env("MORBUS_STDIN_NOTICE_MS", "0")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    use std::io::Write;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(b"dx1\nI21\n")
        .unwrap();
    let out = child.wait_with_output().unwrap();
    assert!(out.status.success());
    assert!(!String::from_utf8_lossy(&out.stderr).contains("waiting"));
}
