//! Embeds every code list in `code-lists/*.tsv` into the library: generates a
//! `phf` map from list name (the file stem) to its text, so that the binary
//! needs no files at run time. The lists are parsed at first use by the same
//! parser that reads user lists (see `src/lists/builtin.rs`).

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
}
