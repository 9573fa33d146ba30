"""The Python package gives what the command line gives: same columns, same
names, same order, same rows, same values, on the same extract."""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Any, Dict, List

import pandas as pd
import polars as pl
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import morbus
from conftest import REPO, cli_args

WIDE_OPTIONS: List[Dict[str, Any]] = [
    {},
    {"index": "charlson:charlson1987"},
    {"index": "charlson:quan2011"},
    {"index": "charlson:count"},
    {"index": "charlson"},
    {"index": "elixhauser:vanwalraven2009"},
    {"index": "elixhauser:count"},
    {"index": "hfrs:gilbert2018"},
    {"index": ["hfrs", "charlson:count"]},
    {"flags": True},
    {"flags": True, "hierarchy": False},
    {"hierarchy": False},
    {"age": "age"},
    {"age": "age", "index": "charlson:charlson1987,elixhauser:count,hfrs", "flags": True, "hierarchy": False},
    {"dx": "codes_list", "dx_sep": ";"},
    {"dx": ["dx1", "dx3", "dx2"], "age": "age"},
]

LONG_OPTIONS: List[Dict[str, Any]] = [
    {"dx": "code", "layout": "long", "id": "patient_id"},
    {"dx": "code", "layout": "long", "id": "patient_id", "age": "age", "flags": True},
    {"dx": "code", "layout": "long", "id": "patient_id", "hierarchy": False, "index": "elixhauser:count"},
]


def cli_frame(run_cli, path: Path, opts: Dict[str, Any]) -> pd.DataFrame:
    code, out, err = run_cli(cli_args(path, opts))
    assert code == 0, err
    return pd.read_csv(io.StringIO(out), dtype=str, keep_default_na=False)


def as_text_frame(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def norm(v: Any) -> Any:
    """A value as comparable text-or-number: missing is None."""
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return None
    if isinstance(v, str):
        if v == "":
            return None
        try:
            return float(v)
        except ValueError:
            return v
    return float(v)


def assert_same(py: pd.DataFrame, cli: pd.DataFrame, score_columns: List[str]) -> None:
    assert list(py.columns) == list(cli.columns)
    assert len(py) == len(cli)
    for c in score_columns:
        got = [norm(v) for v in py[c].tolist()]
        want = [norm(v) for v in cli[c].tolist()]
        bad = [i for i, (g, w) in enumerate(zip(got, want)) if g != w]
        assert not bad, f"column {c}: first differing rows {bad[:5]}: {[got[i] for i in bad[:5]]} != {[want[i] for i in bad[:5]]}"


def score_columns(cli: pd.DataFrame, input_columns: List[str]) -> List[str]:
    cols = [c for c in cli.columns if c not in input_columns]
    assert cols, "the command line added no score columns"
    return cols


def assert_not_trivial(cli: pd.DataFrame, cols: List[str]) -> None:
    """The extract must give the compared columns something to disagree on."""
    for c in cols:
        values = {v for v in cli[c] if v != ""}
        if not c.endswith("_band"):
            assert len(values) > 1, f"{c} is constant: {values}"


@pytest.mark.parametrize("opts", WIDE_OPTIONS, ids=lambda o: ",".join(f"{k}={v}" for k, v in o.items()) or "defaults")
def test_wide_pandas_equals_cli(run_cli, episodes_csv, opts):
    cli = cli_frame(run_cli, episodes_csv, opts)
    df = as_text_frame(episodes_csv)
    before = df.copy()
    py = morbus.score(df, **{"dx": "dx*", **opts})
    pd.testing.assert_frame_equal(df, before)  # the input is not changed
    cols = score_columns(cli, list(df.columns))
    assert_same(py, cli, cols)
    pd.testing.assert_frame_equal(py[list(df.columns)], df)
    if not opts.get("flags"):
        assert_not_trivial(cli, cols)


@pytest.mark.parametrize("reader", ["pandas-default", "polars", "pyarrow"])
@pytest.mark.parametrize("opts", [{}, {"age": "age", "flags": True}], ids=["defaults", "age+flags"])
def test_wide_frames_read_natively_equal_cli(run_cli, episodes_csv, reader, opts):
    """Nulls for empty fields, numeric ages where the reader infers them."""
    cli = cli_frame(run_cli, episodes_csv, opts)
    if reader == "pandas-default":
        frame = pd.read_csv(episodes_csv)
        out = morbus.score(frame, dx="dx*", **opts)
        assert isinstance(out, pd.DataFrame)
        py = out
    elif reader == "polars":
        frame = pl.read_csv(episodes_csv)
        out = morbus.score(frame, dx="dx*", **opts)
        assert isinstance(out, pl.DataFrame)
        assert out.columns[: frame.width] == frame.columns
        assert out.select(frame.columns).equals(frame)
        py = out.to_pandas()
    else:
        frame = pacsv.read_csv(episodes_csv)
        out = morbus.score(frame, dx="dx*", **opts)
        assert isinstance(out, pa.Table)
        assert out.select(frame.column_names).equals(frame)
        py = out.to_pandas()
    cols = score_columns(cli, as_text_frame(episodes_csv).columns.tolist())
    assert list(py.columns) == list(cli.columns)
    assert_same(py, cli, cols)


@pytest.mark.parametrize("opts", LONG_OPTIONS, ids=lambda o: ",".join(f"{k}={v}" for k, v in o.items() if k not in {"dx", "layout", "id"}) or "defaults")
@pytest.mark.parametrize("kind", ["pandas", "polars", "pyarrow"])
def test_long_equals_cli(run_cli, long_csv, opts, kind):
    cli = cli_frame(run_cli, long_csv, opts)
    text = as_text_frame(long_csv)
    assert len(cli) < len(text), "the long extract must group rows"
    frame = {"pandas": lambda: text, "polars": lambda: pl.from_pandas(text), "pyarrow": lambda: pa.table(text)}[kind]()
    out = morbus.score(frame, **opts)
    py = out if kind == "pandas" else out.to_pandas()
    assert list(py.columns) == list(cli.columns)
    assert py["patient_id"].tolist() == cli["patient_id"].tolist()
    assert_same(py, cli, [c for c in cli.columns if c != "patient_id"])


def test_long_over_a_wide_extract_equals_cli(run_cli, episodes_csv):
    """Several diagnosis columns per row, grouped by patient."""
    opts = {"dx": "dx*", "layout": "long", "id": "patient_id", "age": "age"}
    cli = cli_frame(run_cli, episodes_csv, opts)
    py = morbus.score(as_text_frame(episodes_csv), **opts)
    assert py["patient_id"].tolist() == cli["patient_id"].tolist()
    assert_same(py, cli, [c for c in cli.columns if c != "patient_id"])


def test_custom_lists_equal_cli(run_cli, episodes_csv, tmp_path):
    """A directory list replacing a built-in: same numbers both ways."""
    text = (REPO / "code-lists" / "charlson.tsv").read_text(encoding="utf-8")
    lines = [l for l in text.splitlines() if not (l.startswith("code\t") and "\tdementia\t" in l)]
    (tmp_path / "charlson.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    opts = {"lists": str(tmp_path), "index": "charlson", "flags": True}
    cli = cli_frame(run_cli, episodes_csv, opts)
    df = as_text_frame(episodes_csv)
    py = morbus.score(df, dx="dx*", **opts)
    assert_same(py, cli, score_columns(cli, list(df.columns)))
    assert set(cli["charlson_dementia"]) == {"0"}
    builtin = morbus.score(df, dx="dx*", index="charlson", flags=True)
    assert builtin["charlson_dementia"].sum() > 0


@pytest.mark.parametrize(
    "opts",
    [{"age": "age"}, {"flags": True, "hierarchy": False, "index": "hfrs,charlson:count"}, {"dx": "code", "layout": "long", "id": "patient_id", "age": "age"}],
    ids=["age", "flags", "long"],
)
def test_provenance_and_summary_equal_cli(run_cli, episodes_csv, long_csv, tmp_path, opts):
    """The provenance dict is the JSON of `morbus score --provenance`, and
    the report the summary line of its standard error."""
    import json

    path = long_csv if opts.get("layout") == "long" else episodes_csv
    prov_file = tmp_path / "prov.json"
    args = [a for a in cli_args(path, opts) if a != "--quiet"] + ["--provenance", str(prov_file)]
    code, _, err = run_cli(args)
    assert code == 0, err
    cli = json.loads(prov_file.read_text())
    _, prov = morbus.score(as_text_frame(path), provenance=True, **{"dx": "dx*", **opts})
    assert prov.pop("report") == err.strip()
    assert cli.pop("input") == str(path) and prov.pop("input") is None
    assert cli.pop("output") is None and prov.pop("output") is None
    assert prov == cli
    assert prov["codes"]["invalid"] > 0 and prov["codes"]["read"] > 0
    if "age" in opts:
        assert prov["ages"]["unreadable"] > 0 and prov["ages"]["missing"] > 0


@pytest.mark.skipif(not (REPO / "demo-data" / "episodes.csv").exists(), reason="no demo-data/episodes.csv in this checkout")
@pytest.mark.parametrize("opts", [{}, {"flags": True}, {"age": "age", "hierarchy": False}], ids=["defaults", "flags", "age,no-hierarchy"])
def test_demo_data_equals_cli(run_cli, opts):
    path = REPO / "demo-data" / "episodes.csv"
    cli = cli_frame(run_cli, path, opts)
    df = as_text_frame(path)
    py = morbus.score(df, dx="dx*", **opts)
    assert_same(py, cli, score_columns(cli, list(df.columns)))


@pytest.mark.skipif(not (REPO / "demo-data" / "episodes-long.csv").exists(), reason="no demo-data/episodes-long.csv in this checkout")
@pytest.mark.parametrize("kind", ["pandas", "polars"])
def test_demo_long_data_equals_cli(run_cli, kind):
    path = REPO / "demo-data" / "episodes-long.csv"
    opts = {"dx": "code", "layout": "long", "id": "episode_id", "age": "age", "flags": True}
    cli = cli_frame(run_cli, path, opts)
    frame = pd.read_csv(path) if kind == "pandas" else pl.read_csv(path, infer_schema_length=None)
    out = morbus.score(frame, **opts)
    py = out if kind == "pandas" else out.to_pandas()
    assert py["episode_id"].tolist() == cli["episode_id"].tolist()
    assert_same(py, cli, [c for c in cli.columns if c != "episode_id"])


def test_strict_fails_on_the_same_value_as_cli(run_cli, episodes_csv):
    code, _, err = run_cli(cli_args(episodes_csv, {"strict": True}))
    assert code == 3
    df = as_text_frame(episodes_csv)
    with pytest.raises(ValueError) as e:
        morbus.score(df, dx="dx*", strict=True)
    # the CLI names the line (header is line 1), Python the 0-based row
    msg = str(e.value)
    row = int(msg.split(":")[0].removeprefix("row "))
    assert f"line {row + 2}: " in err
    assert msg.split(": ", 1)[1].removesuffix(" (strict=True)") in err


@pytest.fixture(scope="session")
def big_episodes_csv(tmp_path_factory) -> Path:
    """Large enough for the wide layout to be scored on several threads."""
    import synth

    return synth.write_episodes(tmp_path_factory.mktemp("big") / "episodes.csv", rows=56_000, dx_columns=6, seed=11)


@pytest.fixture(scope="session")
def big_cli(run_cli, big_episodes_csv):
    """The command line's output and summary line for the large extract, run
    once."""
    opts = {"age": "age", "flags": True}
    code, out, err = run_cli([a for a in cli_args(big_episodes_csv, opts) if a != "--quiet"])
    assert code == 0, err
    return opts, pd.read_csv(io.StringIO(out), dtype=str, keep_default_na=False), err.strip()


@pytest.mark.parametrize("threads", [1, 3, None])
def test_wide_in_parallel_parts_equals_cli(big_cli, big_episodes_csv, threads):
    """Parts scored on several threads, over Arrow chunks that straddle the
    parts: same rows, values and summary as the command line."""
    opts, cli, report = big_cli
    text = as_text_frame(big_episodes_csv)
    table = pa.Table.from_batches(pa.table(text).to_batches(max_chunksize=9_999))
    assert table.column(0).num_chunks > 3
    out, prov = morbus.score(table, dx="dx*", provenance=True, threads=threads, **opts)
    py = out.to_pandas()
    assert_same(py, cli, score_columns(cli, list(text.columns)))
    assert prov["report"] == report


@pytest.mark.parametrize("threads", [1, 2])
def test_strict_in_parallel_parts_reports_the_first_row(big_episodes_csv, threads):
    text = as_text_frame(big_episodes_csv)
    # one bad code near the end (second part) and one early (first part)
    text.loc[50_000, "dx1"] = "LATE?"
    with pytest.raises(ValueError) as e:
        morbus.score(text, dx="dx*", strict=True, threads=threads)
    msg = str(e.value)
    row = int(msg.split(":")[0].removeprefix("row "))
    assert row < 50_000
    late_only = text.copy()
    for c in [c for c in text.columns if c.startswith("dx")]:
        late_only[c] = "I10"
    late_only.loc[50_000, "dx1"] = "LATE?"
    with pytest.raises(ValueError, match=r"^row 50000: invalid code 'LATE\?' in column 'dx1' \(strict=True\)$"):
        morbus.score(late_only, dx="dx*", strict=True, threads=threads)
