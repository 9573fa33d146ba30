#!/usr/bin/env bash
# Every test of the project, as CI runs it: formatting, lints, the Rust test
# suite, a lint of the build without Parquet, the Python package's tests in a
# fresh virtual environment, the Python wheel installed without a Rust
# toolchain, and the R package's tests (skipped, saying so,
# where R is not installed).
set -euo pipefail
cd "$(dirname "$0")/.."
cargo fmt --all --check
cargo clippy --workspace --all-targets -- -D warnings
# The library and command line without Parquet (feature `parquet` off).
cargo clippy -p morbus --no-default-features --all-targets -- -D warnings
# The library as the Python package builds it (Arrow rows, no Parquet).
cargo clippy -p morbus --no-default-features --features arrow --lib -- -D warnings
cargo test --workspace
bash python/run-tests.sh
bash python/wheel-test.sh
bash r/run-tests.sh
