#!/usr/bin/env bash
# The Python package as a wheel: builds one abi3 wheel with maturin, installs
# it into a fresh virtual environment whose PATH has no Rust toolchain (no
# cargo, no rustc), scores the demo data with it and compares the numbers with
# the command line's.
#
#   bash python/wheel-test.sh                  # debug wheel (quick after run-tests.sh)
#   MORBUS_RELEASE=1 bash python/wheel-test.sh # the release wheel one would share
#
# The debug wheel reuses the extension that python/run-tests.sh compiled; a
# release wheel compiles the engine in release mode (minutes on a 2-core
# machine), so the test suite uses the debug one: the wheel's packaging, its
# abi3 tag and its installation without a toolchain are the same.
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
repo=$(dirname "$here")
python=${PYTHON:-python3}
export CARGO_TARGET_DIR=${CARGO_TARGET_DIR:-$repo/target}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# maturin from the test environment of python/run-tests.sh, or a small one.
build_venv=${MORBUS_VENV:-$here/.venv}
if [ ! -x "$build_venv/bin/maturin" ]; then
    build_venv="$work/build"
    "$python" -m venv "$build_venv"
    "$build_venv/bin/python" -m pip install --quiet --disable-pip-version-check \
        "$(grep '^maturin' "$here/requirements-test.txt")"
fi

profile=()
if [ -n "${MORBUS_RELEASE:-}" ]; then profile=(--release); fi
(cd "$here" && "$build_venv/bin/maturin" build --quiet "${profile[@]}" --out "$work/wheels")
wheels=("$work"/wheels/*.whl)
[ "${#wheels[@]}" -eq 1 ] || { echo "expected one wheel, got: ${wheels[*]}" >&2; exit 1; }
wheel=${wheels[0]}
case $(basename "$wheel") in
    *-abi3-*) ;;
    *) echo "not an abi3 wheel: $(basename "$wheel")" >&2; exit 1 ;;
esac

# The command line's numbers, for comparison.
(cd "$repo" && cargo build --quiet -p morbus --bin morbus)
"$CARGO_TARGET_DIR/debug/morbus" score "$repo/demo-data/episodes.csv" --dx 'dx*' --age age \
    -q -o "$work/cli.csv"

# A fresh environment whose PATH holds the venv, python and the basic tools
# only: no cargo or rustc.
"$python" -m venv "$work/venv"
mkdir "$work/bin"
for tool in sh env; do ln -s "$(command -v $tool)" "$work/bin/$tool"; done
clean_path="$work/venv/bin:$work/bin"
env -i HOME="$HOME" PATH="$clean_path" "$work/venv/bin/python" -m pip install --quiet \
    --disable-pip-version-check "$wheel" "pandas>=2"
cd "$work"
env -i HOME="$HOME" PATH="$clean_path" "$work/venv/bin/python" - "$repo/demo-data/episodes.csv" "$work/cli.csv" <<'PY'
import shutil
import sys

assert shutil.which("cargo") is None and shutil.which("rustc") is None, "a Rust toolchain is on the PATH"
import pandas as pd

import morbus

print(f"morbus {morbus.__version__ if hasattr(morbus, '__version__') else ''} from {morbus.__file__}")
episodes = pd.read_csv(sys.argv[1], dtype=str, keep_default_na=False)
scored = morbus.score(episodes, dx="dx*", age="age")
cli = pd.read_csv(sys.argv[2], dtype=str, keep_default_na=False)
columns = [c for c in cli.columns if c not in episodes.columns]
assert len(columns) == 5, columns
assert len(scored) == len(cli) == 4000
for c in columns:
    got = scored[c].astype("string").fillna("")
    want = cli[c]
    if c == "hfrs_gilbert2018":
        got = scored[c].map(lambda x: f"{x:.1f}")
    assert (got.to_numpy() == want.to_numpy()).all(), c
print(f"wheel: {len(scored)} demo episodes scored without a Rust toolchain, {len(columns)} columns equal to the command line's")
PY
