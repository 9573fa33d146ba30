#!/usr/bin/env bash
# Tests of the R package: builds the morbus command line the tests compare
# with, installs the package (R CMD INSTALL r) into a library of its own
# (r/.lib, or $MORBUS_R_LIB) and runs the testthat tests against it.
#
# The Rust side is built with cargo's dev profile by default
# (MORBUS_R_PROFILE=release for a release build), in the workspace's target
# directory (or $CARGO_TARGET_DIR): after `cargo test --workspace` the engine
# is already compiled and only the small glue crate is built.
#
#   bash r/run-tests.sh                 # everything
#   bash r/run-tests.sh frames          # test files matching a pattern
#
# Needs R (4.2 or later) with the packages testthat and data.table; without
# R it says so and exits 0 (tests/run-all.sh runs it; .ci/run installs R).
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
repo=$(dirname "$here")
if ! command -v Rscript >/dev/null 2>&1; then
    echo "r/run-tests.sh: R is not installed (Rscript not found); the R package's tests are SKIPPED." >&2
    echo "  Install R and the test packages, e.g.: apt-get install r-base-dev r-cran-testthat r-cran-data.table" >&2
    exit 0
fi
export CARGO_TARGET_DIR=${CARGO_TARGET_DIR:-$repo/target}
export MORBUS_R_PROFILE=${MORBUS_R_PROFILE:-dev}
lib=${MORBUS_R_LIB:-$here/.lib}
mkdir -p "$lib"

(cd "$repo" && cargo build --quiet -p morbus --bin morbus)
export MORBUS_BIN="$CARGO_TARGET_DIR/debug/morbus"
export MORBUS_REPO="$repo"

R CMD INSTALL --no-multiarch --library="$lib" "$here" >"$lib/install.log" 2>&1 || {
    cat "$lib/install.log" >&2
    exit 1
}
# Leave no build output in the source tree.
rm -f "$here"/src/*.o "$here"/src/*.so

filter=${1:-}
cd "$here/tests/testthat"
R_LIBS="$lib${R_LIBS:+:$R_LIBS}" exec Rscript -e "
library(testthat)
library(morbus)
filter <- '$filter'
res <- test_dir('.', filter = if (nzchar(filter)) filter else NULL,
                reporter = 'summary', stop_on_failure = TRUE)
"
