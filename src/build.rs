//! Embeds every code list in `code-lists/*.tsv` into the library: generates a
//! `phf` map from list name (the file stem) to its text, so that the binary
//! needs no files at run time. The lists are parsed at first use by the same
//! parser that reads user lists (see `src/lists/builtin.rs`).
//!
//! Also compiles the ICD-10 code sets of `code-lists/editions/*.txt.gz`
//! (written by `code-lists/editions/generate.py`) into the tables that
//! `src/editions.rs` searches: see [`editions`].

use std::env;
use std::fs;
use std::io::Write;
use std::path::PathBuf;

fn main() {
    let root =
        PathBuf::from(env::var("CARGO_MANIFEST_DIR").expect("cargo sets CARGO_MANIFEST_DIR"));
    let dir = root.join("code-lists");
    println!("cargo:rerun-if-changed={}", dir.display());
    let mut files: Vec<PathBuf> = fs::read_dir(&dir)
        .expect("code-lists/ must exist")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "tsv"))
        // Upper-case names (VERSIONS.tsv) are project files, not lists; the
        // same rule as `morbus::lists::is_list_file`.
        .filter(|p| {
            let stem = p
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_default();
            let reserved = stem.chars().any(|c| c.is_ascii_uppercase())
                && !stem.chars().any(|c| c.is_lowercase());
            !reserved
        })
        .collect();
    files.sort();
    let mut map = phf_codegen::Map::new();
    let mut names = Vec::new();
    for f in &files {
        println!("cargo:rerun-if-changed={}", f.display());
        let stem = f.file_stem().unwrap().to_string_lossy().into_owned();
        let file_name = f.file_name().unwrap().to_string_lossy().into_owned();
        map.entry(
            stem.clone(),
            &format!(
                "({:?}, include_str!({:?}))",
                file_name,
                f.display().to_string()
            ),
        );
        names.push(stem);
    }
    let out =
        PathBuf::from(env::var("OUT_DIR").expect("cargo sets OUT_DIR")).join("builtin_lists.rs");
    let mut w = fs::File::create(&out).expect("write generated file");
    writeln!(
        w,
        "/// Built-in list name -> (file name, text).\npub static FILES: phf::Map<&'static str, (&'static str, &'static str)> = {};",
        map.build()
    )
    .unwrap();
    writeln!(
        w,
        "/// Built-in list names, sorted.\npub static NAMES: &[&str] = &{names:?};"
    )
    .unwrap();
    editions(&root);
}

/// The editions, in the order of their flag bits (bit 0, bit 1).
const EDITION_FILES: [&str; 2] = ["who-2019.txt.gz", "cm-2026.txt.gz"];

/// Three-character slots: 26 letters x 10 digits x 36 letters or digits.
const SLOTS: usize = 26 * 10 * 36;

fn alnum36(c: u8) -> u32 {
    if c.is_ascii_digit() {
        (c - b'0') as u32
    } else {
        (c - b'A') as u32 + 10
    }
}

/// Writes `OUT_DIR/editions.rs`: for every three-character slot, where its
/// entries start (`SLOT_START`, one more than the slots), and the entries
/// (`ENTRIES`, little-endian `u32`s in `editions.bin`), sorted within a slot.
/// An entry packs the characters after the third (up to four), each as its
/// place in `0-9A-Z` plus one in six bits, the first highest (so the order
/// is the characters' order, a shorter code first and the category itself
/// 0), and in bits 24 and 25 whether WHO ICD-10 and ICD-10-CM have the code.
fn editions(root: &std::path::Path) {
    use std::collections::BTreeMap;
    use std::io::Read;
    let dir = root.join("code-lists").join("editions");
    println!("cargo:rerun-if-changed={}", dir.display());
    let mut entries: BTreeMap<(usize, u32), u32> = BTreeMap::new();
    let mut headers = Vec::new();
    for (bit, name) in EDITION_FILES.iter().enumerate() {
        let path = dir.join(name);
        println!("cargo:rerun-if-changed={}", path.display());
        let bytes = fs::read(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let mut text = String::new();
        flate2::read::GzDecoder::new(&bytes[..])
            .read_to_string(&mut text)
            .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let mut header = String::new();
        for line in text.lines() {
            if let Some(h) = line.strip_prefix("# ") {
                header = h.to_string();
                continue;
            }
            let mut words = line.split(' ');
            let cat = words.next().unwrap().as_bytes();
            assert!(
                cat.len() == 3
                    && cat[0].is_ascii_uppercase()
                    && cat[1].is_ascii_digit()
                    && (cat[2].is_ascii_digit() || cat[2].is_ascii_uppercase()),
                "{name}: bad category line {line:?}"
            );
            let slot = (((cat[0] - b'A') as u32 * 10 + (cat[1] - b'0') as u32) * 36
                + alnum36(cat[2])) as usize;
            // The category itself is an entry when it has a line (every
            // category of the package is written, with or without codes).
            *entries.entry((slot, 0)).or_default() |= 1 << (24 + bit);
            for rest in words {
                let r = rest.as_bytes();
                assert!(
                    (1..=4).contains(&r.len())
                        && r.iter()
                            .all(|c| c.is_ascii_digit() || c.is_ascii_uppercase()),
                    "{name}: bad code {rest:?} in {line:?}"
                );
                let mut key = 0u32;
                for i in 0..4 {
                    key <<= 6;
                    if let Some(&c) = r.get(i) {
                        key |= alnum36(c) + 1;
                    }
                }
                *entries.entry((slot, key)).or_default() |= 1 << (24 + bit);
            }
        }
        headers.push(header);
    }
    let mut starts = vec![0u32; SLOTS + 1];
    let mut bin = Vec::with_capacity(entries.len() * 4);
    for (&(slot, key), &flags) in &entries {
        starts[slot + 1] += 1;
        bin.extend_from_slice(&(key | flags).to_le_bytes());
    }
    for i in 0..SLOTS {
        starts[i + 1] += starts[i];
    }
    let out_dir = PathBuf::from(env::var("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(out_dir.join("editions.bin"), &bin).expect("write editions.bin");
    let mut w = fs::File::create(out_dir.join("editions.rs")).expect("write generated file");
    writeln!(
        w,
        "/// Where each slot's entries start in `ENTRIES` (slot `s`: `SLOT_START[s]..SLOT_START[s + 1]`).\n\
         pub(crate) static SLOT_START: [u32; {}] = {starts:?};\n\
         /// The entries, little-endian `u32`s.\n\
         pub(crate) static ENTRIES: &[u8] = include_bytes!(concat!(env!(\"OUT_DIR\"), \"/editions.bin\"));\n\
         /// The first line of each edition's file (what it holds, from which package).\n\
         pub(crate) static HEADERS: [&str; 2] = {headers:?};",
        SLOTS + 1
    )
    .unwrap();
}
