//! Helpers shared by the integration tests: running the built binary,
//! temporary directories, and an invented extract.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::atomic::{AtomicUsize, Ordering};

/// The result of one run of the binary.
pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

impl Run {
    fn from(o: Output) -> Run {
        Run {
            code: o.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&o.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&o.stderr).into_owned(),
        }
    }
}

/// Runs `morbus ARGS` in the crate root.
pub fn morbus(args: &[&str]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_morbus"))
        .args(args)
        .current_dir(root())
        .output()
        .expect("the morbus binary runs");
    Run::from(out)
}

/// The values of column `name` of a CSV text (header first).
pub fn column(text: &str, name: &str) -> Vec<String> {
    let mut rdr = csv::Reader::from_reader(text.as_bytes());
    let idx = rdr
        .headers()
        .unwrap()
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name}"));
    rdr.records()
        .map(|r| r.unwrap().get(idx).unwrap().to_string())
        .collect()
}

pub fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// A fresh directory under the system temporary directory, removed on drop.
pub struct TempDir(PathBuf);

impl TempDir {
    pub fn new(tag: &str) -> TempDir {
        static N: AtomicUsize = AtomicUsize::new(0);
        let p = std::env::temp_dir().join(format!(
            "morbus-test-{tag}-{}-{}",
            std::process::id(),
            N.fetch_add(1, Ordering::SeqCst)
        ));
        let _ = std::fs::remove_dir_all(&p);
        std::fs::create_dir_all(&p).expect("create temp dir");
        TempDir(p)
    }

    pub fn path(&self) -> &Path {
        &self.0
    }

    /// Writes a file in the directory and returns its path as text.
    pub fn write(&self, name: &str, text: &str) -> String {
        let p = self.0.join(name);
        std::fs::write(&p, text).expect("write temp file");
        p.display().to_string()
    }

    pub fn join(&self, name: &str) -> String {
        self.0.join(name).display().to_string()
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// A small deterministic generator (SplitMix64).
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Rng {
        Rng(seed)
    }
    pub fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    pub fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }
    pub fn chance(&mut self, percent: u64) -> bool {
        self.next() % 100 < percent
    }
}

/// Values in the invented extract that are not ICD-10 codes.
pub const INVALID_VALUES: &[&str] = &["??", "12345", "N/A", "I2"];
/// Age values that are not ages.
pub const UNREADABLE_AGES: &[&str] = &["unknown", "-4"];

/// Writes a code as an extract might hold it: with a dot after the
/// category, sometimes in lower case.
pub fn spell(code: &str, rng: &mut Rng) -> String {
    let mut s = if code.len() > 3 && rng.chance(70) {
        format!("{}.{}", &code[..3], &code[3..])
    } else {
        code.to_string()
    };
    if rng.chance(15) {
        s = s.to_lowercase();
    }
    s
}

/// Codes drawn from every entry of the built-in lists (first and last code
/// of each range, and a longer child code), plus codes no list claims.
pub fn code_pool() -> Vec<String> {
    let mut pool = Vec::new();
    for l in morbus::lists::builtin::all() {
        for e in &l.codes {
            let first = e.first.to_string();
            if first.len() < 7 {
                pool.push(format!("{first}1"));
            }
            pool.push(first);
            if let Some(last) = &e.last {
                pool.push(last.to_string());
            }
        }
    }
    for c in ["A09", "B34.9", "H52.1", "L03.1", "S72.00", "Z00.0"] {
        pool.push(c.replace('.', ""));
    }
    pool.sort();
    pool.dedup();
    pool
}

/// Counts of what an invented extract holds.
#[derive(Default, Debug)]
pub struct ExtractFacts {
    pub rows: usize,
    pub invalid: usize,
    pub missing_ages: usize,
    pub unreadable_ages: usize,
}

/// An invented wide extract: `episode,age,dx1..dx6`, every code spelled as
/// an extract might, with invalid values, empty fields and unreadable ages.
pub fn invented_extract(seed: u64, rows: usize) -> (String, ExtractFacts) {
    let pool = code_pool();
    let mut rng = Rng::new(seed);
    let mut facts = ExtractFacts {
        rows,
        ..ExtractFacts::default()
    };
    let mut out = String::from("episode,age,dx1,dx2,dx3,dx4,dx5,dx6\n");
    for i in 0..rows {
        let age = if rng.chance(5) {
            facts.missing_ages += 1;
            String::new()
        } else if rng.chance(3) {
            facts.unreadable_ages += 1;
            UNREADABLE_AGES[rng.below(UNREADABLE_AGES.len())].to_string()
        } else {
            (18 + rng.below(85)).to_string()
        };
        let n = rng.below(7);
        let mut fields = Vec::new();
        for k in 0..6 {
            if k >= n {
                fields.push(String::new());
            } else if rng.chance(4) {
                facts.invalid += 1;
                fields.push(INVALID_VALUES[rng.below(INVALID_VALUES.len())].to_string());
            } else {
                fields.push(spell(&pool[rng.below(pool.len())], &mut rng));
            }
        }
        out.push_str(&format!("ep{i:05},{age},{}\n", fields.join(",")));
    }
    (out, facts)
}
