from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path
from typing import Dict, List

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

import synth  # noqa: E402

REPO = synth.REPO


def _find_cli() -> Path:
    """The `morbus` command line: $MORBUS_BIN, or built with cargo."""
    env = os.environ.get("MORBUS_BIN")
    if env:
        p = Path(env)
        if not p.is_file():
            pytest.fail(f"MORBUS_BIN={env} is not a file")
        return p
    cargo = shutil.which("cargo")
    if cargo is None:
        pytest.fail("the tests compare with the morbus command line: set MORBUS_BIN or install cargo")
    subprocess.run(
        [cargo, "build", "--quiet", "-p", "morbus", "--bin", "morbus"], cwd=REPO, check=True
    )
    target = Path(os.environ.get("CARGO_TARGET_DIR", REPO / "target"))
    return target / "debug" / "morbus"


@pytest.fixture(scope="session")
def morbus_bin() -> Path:
    return _find_cli()


@pytest.fixture(scope="session")
def episodes_csv(tmp_path_factory) -> Path:
    return synth.write_episodes(tmp_path_factory.mktemp("data") / "episodes.csv")


@pytest.fixture(scope="session")
def long_csv(tmp_path_factory) -> Path:
    return synth.write_long(tmp_path_factory.mktemp("data") / "codes.csv")


@pytest.fixture(scope="session")
def run_cli(morbus_bin):
    """Runs `morbus ARGS` and returns (exit code, stdout, stderr)."""

    def run(args: List[str]):
        p = subprocess.run([str(morbus_bin), *args], capture_output=True, text=True)
        return p.returncode, p.stdout, p.stderr

    return run


def cli_args(path: Path, opts: Dict) -> List[str]:
    """The command line of `morbus score` for the keyword options of
    `morbus.score`."""
    args = ["score", str(path), "--quiet"]
    dx = opts.get("dx", "dx*")
    args += ["--dx", dx if isinstance(dx, str) else ",".join(dx)]
    for key, flag in [("layout", "--layout"), ("id", "--id"), ("age", "--age"), ("dx_sep", "--dx-sep"), ("lists", "--lists")]:
        if opts.get(key) is not None:
            args += [flag, str(opts[key])]
    if opts.get("index") is not None:
        index = opts["index"]
        args += ["--index", index if isinstance(index, str) else ",".join(index)]
    if opts.get("flags"):
        args.append("--flags")
    if opts.get("hierarchy") is False:
        args.append("--no-hierarchy")
    if opts.get("strict"):
        args.append("--strict")
    return args
