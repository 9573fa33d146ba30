"""`morbus.compare` gives the command line's `--json` results, for frames
read as text and with pandas' own dtypes, pandas, polars and Arrow."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pytest

import morbus
from test_compare_reference import DEMO, OUTCOME, run

OPTIONS = dict(
    dx="dx*", outcome=OUTCOME, adjust="age", adjust_cat="sex", by="site", folds=5,
    id="patient_id", overdispersion="additive", reference="charlson:quan2011",
    adjust_spline="age:4", cluster="patient_id",
)
CLI = [
    "--dx", "dx*", "--outcome", OUTCOME, "--adjust", "age", "--adjust-cat", "sex",
    "--by", "site", "--folds", "5", "--id", "patient_id", "--overdispersion", "additive",
    "--reference", "charlson:quan2011", "--adjust-spline", "age:4", "--cluster", "patient_id",
]


@pytest.fixture(scope="module")
def cli_json(tmp_path_factory) -> dict:
    if not DEMO.is_file():
        pytest.skip(f"{DEMO} not found")
    out = tmp_path_factory.mktemp("cmp") / "c.json"
    run("compare", str(DEMO), *CLI, "--json", str(out), "-q")
    return json.loads(out.read_text())


@pytest.mark.parametrize("kind", ["text", "pandas-dtypes", "polars", "arrow"])
def test_same_numbers_as_the_command_line(cli_json, kind):
    if kind == "text":
        frame = pd.read_csv(DEMO, dtype=str, keep_default_na=False)
    elif kind == "pandas-dtypes":
        frame = pd.read_csv(DEMO)  # age float with NaN, the outcome int
    elif kind == "polars":
        pl = pytest.importorskip("polars")
        frame = pl.read_csv(DEMO, infer_schema_length=0)
    else:
        frame = pa.Table.from_pandas(pd.read_csv(DEMO, dtype=str, keep_default_na=False))
    got = morbus.compare(frame, **OPTIONS)
    if kind == "pandas-dtypes":
        # pandas reads 'NA' and 'N/K' as missing, as morbus does: same units.
        assert got["units"] == cli_json["units"]
    assert got == cli_json


def test_report_and_text(tmp_path: Path):
    if not DEMO.is_file():
        pytest.skip(f"{DEMO} not found")
    frame = pd.read_csv(DEMO, dtype=str, keep_default_na=False)
    page = tmp_path / "r.html"
    result, text = morbus.compare(frame, **OPTIONS, report=page, text=True)
    html = page.read_text()
    assert html.startswith("<!DOCTYPE html>")
    assert html.count('aria-label="funnel plot') == len(result["providers"]["specifications"])
    assert "Providers by 'site'" in text

    # A report that cannot be put in place (its path is a directory) raises
    # and leaves no temporary file beside it; the directory is untouched.
    target = tmp_path / "taken"
    target.mkdir()
    (target / "inside.txt").write_text("kept")
    with pytest.raises(OSError):
        morbus.compare(frame, **OPTIONS, report=target)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.html", "taken"]
    assert (target / "inside.txt").read_text() == "kept"


def test_errors_carry_the_command_line_messages():
    frame = pd.DataFrame({"dx1": ["I21.9", "E11.9"], "died": [1, 0]})
    with pytest.raises(KeyError, match="nowhere"):
        morbus.compare(frame, dx="dx1", outcome="died", by="nowhere")
    with pytest.raises(ValueError, match="needs --by"):
        morbus.compare(frame, dx="dx1", outcome="died", overdispersion="additive")
    with pytest.raises(ValueError, match="overdispersion must be"):
        morbus.compare(frame, dx="dx1", outcome="died", by="dx1", overdispersion="lots")


def test_docstring_examples():
    import doctest

    import morbus._compare as module

    failed, attempted = doctest.testmod(module)
    assert attempted > 0 and failed == 0
