"""`morbus.compare` gives the command line's `--json` results, for frames
read as text and with pandas' own dtypes, pandas, polars and Arrow; the
frame's columns reach the engine typed (no CSV in between), with lookback,
the long layout, folds, clusters and providers; typed outcomes read as
their text forms; errors name the frame's rows."""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.csv  # noqa: F401  (pa.csv)
import pytest

import morbus
from test_compare_reference import DEMO, OUTCOME, _binary, run

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


LONG = DEMO.parent / "episodes-long.csv"

# The history options (lookback, long layout with episodes and the
# present-on-admission rule), each with the command line's flags.
HISTORY_RUNS = {
    "wide-lookback": (
        DEMO,
        dict(dx="dx*", outcome=OUTCOME, id="patient_id", date="admission_date", lookback=365,
             adjust="age", adjust_cat="sex", adjust_spline="age:3", by="site", folds=4,
             cluster="patient_id", min_expected=0, index="charlson,hfrs"),
        ["--dx", "dx*", "--outcome", OUTCOME, "--id", "patient_id", "--date", "admission_date",
         "--lookback", "365", "--adjust", "age", "--adjust-cat", "sex", "--adjust-spline", "age:3",
         "--by", "site", "--folds", "4", "--cluster", "patient_id", "--min-expected", "0",
         "--index", "charlson,hfrs"],
    ),
    "long-lookback": (
        LONG,
        dict(dx="code", outcome=OUTCOME, layout="long", id="patient_id", episode="episode_id",
             date="admission_date", lookback=730, poa="present_on_admission",
             adjust="age", folds=3, index="charlson:quan2011,elixhauser"),
        ["--dx", "code", "--outcome", OUTCOME, "--layout", "long", "--id", "patient_id",
         "--episode", "episode_id", "--date", "admission_date", "--lookback", "730",
         "--poa", "present_on_admission", "--adjust", "age", "--folds", "3",
         "--index", "charlson:quan2011,elixhauser"],
    ),
}


def _frame(path: Path, kind: str):
    """The extract as a frame of `kind`, columns typed by the reader (the
    outcome and ages as numbers, dates as text)."""
    if kind == "pandas":
        return pd.read_csv(path)
    if kind == "polars":
        pl = pytest.importorskip("polars")
        # Ages such as 'N/K' make the column text, as pandas and Arrow do.
        return pl.read_csv(path, infer_schema_length=None)
    import pyarrow.csv as pacsv

    return pacsv.read_csv(path)


@pytest.mark.parametrize("kind", ["pandas", "polars", "arrow"])
@pytest.mark.parametrize("name", sorted(HISTORY_RUNS))
def test_history_runs_match_the_command_line(tmp_path: Path, name: str, kind: str):
    """Lookback, the long layout, folds by id, clusters, providers and
    splines: a typed frame gives the command line's JSON and table on the
    CSV file."""
    path, options, flags = HISTORY_RUNS[name]
    if not path.is_file():
        pytest.skip(f"{path} not found")
    out = tmp_path / "c.json"
    cli = run("compare", str(path), *flags, "--json", str(out), "-q")
    got, table = morbus.compare(_frame(path, kind), **options, text=True)
    assert got == json.loads(out.read_text())
    assert table == cli.stdout
    assert got["units"]["analysed"] > 100


def _outcome_frame(values):
    return pa.table({"dx1": ["I21.9", "C78.0", "J18.9", "E11.9", "I50.0", "Z00.0"], "died": values})


@pytest.mark.parametrize(
    "values",
    [
        pa.array([1, 1, 0, None, 0, 1], pa.int64()),
        pa.array([1, 1, 0, None, 0, 1], pa.int8()),
        pa.array([1.0, 1.0, 0.0, None, 0.0, 1.0], pa.float64()),
        pa.array([1.0, 1.0, 0.0, float("nan"), 0.0, 1.0], pa.float64()),
        pa.array([True, True, False, None, False, True]),
        pa.array(["1", "true", "0", "NA", "FALSE", "1.0"]),
    ],
    ids=["int64", "int8", "float", "float-nan", "bool", "text"],
)
def test_typed_outcomes_read_as_their_text(values):
    """Whole numbers 0/1, numbers 0.0/1.0 (NaN missing), true/false and
    text give the same comparison as the text outcome 1,1,0,,0,1."""
    reference = morbus.compare(
        _outcome_frame(pa.array(["1", "1", "0", "", "0", "1"])), dx="dx1", outcome="died",
        index="charlson:count",
    )
    got = morbus.compare(_outcome_frame(values), dx="dx1", outcome="died", index="charlson:count")
    assert got["units"]["missing_outcome"] == 1
    assert got == reference


@pytest.mark.parametrize(
    "values,shown",
    [
        (pa.array([1, 0, 2, 0, 1, 0], pa.int64()), "2"),
        (pa.array([1.0, 0.0, 0.5, 0.0, 1.0, 0.0]), "0.5"),
        (pa.array(["1", "0", "2", "0", "1", "0"]), "2"),
        (pa.array(["1", "0", "yes", "0", "1", "0"]), "yes"),
    ],
    ids=["int", "float", "text", "word"],
)
def test_invalid_outcome_names_the_row(tmp_path: Path, values, shown):
    """An outcome that is not 0/1: the command line's message, naming the
    frame's 0-based row where the command line names the CSV line."""
    message = f"outcome column 'died' holds '{shown}': expected 0 or 1, or true/false"
    with pytest.raises(ValueError) as e:
        morbus.compare(_outcome_frame(values), dx="dx1", outcome="died", index="charlson:count")
    assert str(e.value).startswith(f"row 2: {message}")
    csv = tmp_path / "bad.csv"
    pa.csv.write_csv(_outcome_frame(values), str(csv))
    r = subprocess.run(
        [str(_binary()), "compare", str(csv), "--dx", "dx1", "--outcome", "died",
         "--index", "charlson:count"],
        capture_output=True, text=True,
    )
    assert r.returncode == 1
    assert f"line 4: {message}" in r.stderr


def test_disagreeing_outcome_names_both_rows():
    """Two rows of one long-layout episode with different outcomes: the
    rows named as the frame numbers them (0-based)."""
    frame = pd.DataFrame({
        "id": ["a", "b", "a", "c"],
        "code": ["I21.9", "C78.0", "E11.9", "J18.9"],
        "died": [1, 0, 0, 1],
    })
    with pytest.raises(ValueError) as e:
        morbus.compare(frame, dx="code", outcome="died", layout="long", id="id",
                       index="charlson:count")
    assert str(e.value) == (
        "row 2: column 'died' holds '0' here but '1' on row 0 of the same episode"
    )
