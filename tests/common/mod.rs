//! Helpers shared by the integration tests: running the built binary,
//! temporary directories and files, seeded generators, an invented extract,
//! and writing Parquet files.

#![allow(dead_code)]

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::sync::atomic::{AtomicUsize, Ordering};

/// The result of one run of the binary.
pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

impl Run {
    pub fn from(o: Output) -> Run {
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

/// Runs `morbus ARGS` in the crate root with `stdin` on its standard input
/// (written from another thread, so that a large output cannot block it).
/// A run that exits without reading all of its input may close the pipe
/// first: a broken pipe is the only write error allowed.
pub fn pipe(args: &[&str], stdin: &[u8]) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_morbus"))
        .args(args)
        .current_dir(root())
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the morbus binary runs");
    let mut input = child.stdin.take().unwrap();
    let data = stdin.to_vec();
    let writer = std::thread::spawn(move || input.write_all(&data));
    let out = child.wait_with_output().unwrap();
    if let Err(e) = writer.join().unwrap() {
        assert_eq!(e.kind(), std::io::ErrorKind::BrokenPipe, "{e}");
    }
    out
}

/// The arguments of a command line written as one line: its words
/// (split at white space), each `{}` replaced by the next of `values` (which
/// may hold spaces, as paths may).
pub fn words<'a>(line: &'a str, values: &[&'a str]) -> Vec<&'a str> {
    let mut values = values.iter();
    let args: Vec<&str> = line
        .split_whitespace()
        .map(|w| match w {
            "{}" => values.next().expect("a value for every {}"),
            w => w,
        })
        .collect();
    assert!(values.next().is_none(), "more values than {{}} in {line:?}");
    args
}

/// [`morbus`] with the command line written as one line (see [`words`]).
pub fn run(line: &str, values: &[&str]) -> Run {
    morbus(&words(line, values))
}

/// [`pipe`] as a [`Run`].
pub fn morbus_with_input(args: &[&str], stdin: &[u8]) -> Run {
    Run::from(pipe(args, stdin))
}

/// A path `name` in a directory of this test process (`tag` names the
/// test file), made if missing and left for the system to clear.
pub fn scratch(tag: &str, name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("morbus-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// A JSON file, parsed.
pub fn json_file(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
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

/// A 64-bit linear congruential generator (Knuth's MMIX constants) that
/// draws from the top `bits` bits of its state.
pub struct Lcg {
    state: u64,
    bits: u32,
}

impl Lcg {
    pub fn new(seed: u64, bits: u32) -> Lcg {
        assert!((1..=64).contains(&bits));
        Lcg { state: seed, bits }
    }
    pub fn next(&mut self) -> u64 {
        self.state = self
            .state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        self.state >> (64 - self.bits)
    }
    pub fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }
    /// A value in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        self.next() as f64 / 2f64.powi(self.bits as i32)
    }
    pub fn pick<T: Copy>(&mut self, items: &[T]) -> T {
        items[self.below(items.len() as u64) as usize]
    }
}

/// Writes `batch` as a Parquet file, in row groups of at most `group` rows
/// (`None`: the writer's default).
#[cfg(feature = "parquet")]
pub fn write_parquet(path: &Path, batch: &arrow_array::RecordBatch, group: Option<usize>) {
    let props = group.map(|g| {
        parquet::file::properties::WriterProperties::builder()
            .set_max_row_group_row_count(Some(g))
            .build()
    });
    let file = std::fs::File::create(path).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(file, batch.schema(), props).unwrap();
    w.write(batch).unwrap();
    w.close().unwrap();
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

/// Every row of the Parquet file `bytes`, as one batch.
#[cfg(feature = "parquet")]
pub fn parquet_batch(bytes: &[u8]) -> arrow_array::RecordBatch {
    let b = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(
        bytes::Bytes::from(bytes.to_vec()),
    )
    .unwrap();
    let schema = b.schema().clone();
    let batches: Vec<arrow_array::RecordBatch> = b.build().unwrap().map(Result::unwrap).collect();
    arrow_select::concat::concat_batches(&schema, &batches).unwrap()
}

/// Checks that `batch`, the Parquet output of an `explain` run, holds the
/// cells of the CSV output of the same run (`csv`, header first), typed:
/// the same columns in the same order, each nullable; `row` and
/// `source_row` `Int64`, `source_date` `Date32` (the CSV's ISO day),
/// `weight` and `age_points` of type `weights` (`Int64`: the CSV's whole
/// number; `Float64`: the number the CSV's decimal text stands for), the
/// columns named in `kept` of their type, every other column text; an
/// empty CSV cell is null. Panics at the first difference.
#[cfg(feature = "parquet")]
pub fn assert_explain_cells(
    csv: &str,
    batch: &arrow_array::RecordBatch,
    weights: &arrow_schema::DataType,
    kept: &[(&str, arrow_schema::DataType)],
    what: &str,
) {
    use arrow_array::cast::AsArray;
    use arrow_array::types::{Float64Type, Int64Type};
    use arrow_array::Array;
    use arrow_schema::DataType;
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_reader(csv.as_bytes());
    let records: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
    let header: Vec<&str> = records[0].iter().collect();
    let schema = batch.schema();
    let names: Vec<&str> = schema.fields().iter().map(|f| f.name().as_str()).collect();
    assert_eq!(names, header, "{what}: columns");
    assert_eq!(batch.num_rows(), records.len() - 1, "{what}: rows");
    for (k, field) in schema.fields().iter().enumerate() {
        let name = field.name().as_str();
        assert!(field.is_nullable(), "{what}: {name} not nullable");
        let want = match name {
            "row" | "source_row" => DataType::Int64,
            "source_date" => DataType::Date32,
            "weight" | "age_points" => weights.clone(),
            _ => kept
                .iter()
                .find(|(n, _)| *n == name)
                .map_or(DataType::Utf8, |(_, t)| t.clone()),
        };
        assert_eq!(field.data_type(), &want, "{what}: type of {name}");
        let a = batch.column(k);
        let shown =
            arrow_cast::display::ArrayFormatter::try_new(a.as_ref(), &Default::default()).unwrap();
        for (i, r) in records[1..].iter().enumerate() {
            let cell = &r[k];
            let ok = if a.is_null(i) {
                cell.is_empty()
            } else {
                match a.data_type() {
                    DataType::Float64 => {
                        cell.parse::<f64>().ok() == Some(a.as_primitive::<Float64Type>().value(i))
                    }
                    DataType::Int64 => {
                        cell.parse::<i64>().ok() == Some(a.as_primitive::<Int64Type>().value(i))
                    }
                    DataType::Utf8 => cell == a.as_string::<i32>().value(i),
                    _ => cell == shown.value(i).to_string(),
                }
            };
            assert!(
                ok,
                "{what}: row {}, column {name}: Parquet holds {}, the CSV '{cell}'",
                i + 1,
                if a.is_null(i) {
                    "null".to_string()
                } else {
                    shown.value(i).to_string()
                }
            );
        }
    }
}
