#!/usr/bin/env bash
# Tests of the Python package, from nothing: creates a virtual environment
# (python/.venv, or $MORBUS_VENV), installs maturin, pytest and the test
# dependencies from PyPI, builds and installs the extension (debug build;
# MORBUS_RELEASE=1 for a release build), builds the `morbus` command line the
# tests compare with, and runs pytest. Extra arguments go to pytest.
#
#   bash python/run-tests.sh            # everything
#   bash python/run-tests.sh -k long    # some tests
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
repo=$(dirname "$here")
venv=${MORBUS_VENV:-$here/.venv}
python=${PYTHON:-python3}
export CARGO_TARGET_DIR=${CARGO_TARGET_DIR:-$repo/target}

if [ ! -x "$venv/bin/python" ]; then
    "$python" -m venv "$venv"
fi
"$venv/bin/python" -m pip install --quiet --disable-pip-version-check -r "$here/requirements-test.txt"

profile=()
if [ -n "${MORBUS_RELEASE:-}" ]; then profile=(--release); fi
(cd "$here" && VIRTUAL_ENV="$venv" PATH="$venv/bin:$PATH" maturin develop --quiet "${profile[@]}")

(cd "$repo" && cargo build --quiet -p morbus --bin morbus)
export MORBUS_BIN="$CARGO_TARGET_DIR/debug/morbus"

cd "$here"
exec "$venv/bin/python" -m pytest -q -rs "$@"
