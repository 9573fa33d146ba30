"""Dated patient history on frames (date=, lookback=, episode=,
exclude_primary=, primary=, poa=) and morbus.explain give what the command
line gives on the same extract."""

from __future__ import annotations

import datetime as dt
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
from conftest import REPO

WIDE_CSV = REPO / "demo-data" / "episodes.csv"
LONG_CSV = REPO / "demo-data" / "episodes-long.csv"

WIDE = {"dx": "dx*", "id": "patient_id", "date": "admission_date", "lookback": 365}
LONG = {
    "layout": "long",
    "id": "patient_id",
    "episode": "episode_id",
    "date": "admission_date",
    "dx": "code",
    "lookback": 730,
    "exclude_primary": True,
    "primary": "position",
    "poa": "present_on_admission",
}


def cli_args(command: str, path: Path, opts: Dict[str, Any]) -> List[str]:
    """`morbus score|explain` arguments for the keyword options of `morbus.score`."""
    args = [command, str(path), "--quiet"]
    for key, value in opts.items():
        flag = "--" + key.replace("_", "-")
        if value is True:
            args.append(flag)
        elif value is False or value is None:
            continue
        elif isinstance(value, (list, tuple)):
            args += [flag, ",".join(value)]
        else:
            args += [flag, str(value)]
    return args


_CLI_CACHE: Dict[Any, str] = {}


def cli_frame(run_cli, command: str, path: Path, opts: Dict[str, Any]) -> pd.DataFrame:
    """The command line's output (each command run once per session: the
    debug build takes a while on the long extract)."""
    args = cli_args(command, path, opts)
    if tuple(args) not in _CLI_CACHE:
        code, out, err = run_cli(args)
        assert code == 0, err
        _CLI_CACHE[tuple(args)] = out
    return pd.read_csv(io.StringIO(_CLI_CACHE[tuple(args)]), dtype=str, keep_default_na=False)


@pytest.fixture(scope="session")
def long_part(tmp_path_factory) -> Path:
    """The first 6,000 code rows of the long demo extract (whole episodes
    but for the last), for the variants."""
    lines = LONG_CSV.read_text().splitlines(keepends=True)
    path = tmp_path_factory.mktemp("long") / "episodes-long-part.csv"
    path.write_text("".join(lines[:6001]))
    return path


def cell(v: Any) -> Any:
    """A value as comparable text-or-number; missing is None; dates ISO."""
    if v is None or v is pd.NA or v is pd.NaT:
        return None
    if isinstance(v, float) and math.isnan(v):
        return None
    if isinstance(v, (pd.Timestamp, dt.datetime)):
        return v.date().isoformat()
    if isinstance(v, dt.date):
        return v.isoformat()
    if isinstance(v, str):
        if v == "":
            return None
        try:
            return float(v)
        except ValueError:
            return v
    return float(v)


def as_pandas(out: Any) -> pd.DataFrame:
    if isinstance(out, pd.DataFrame):
        return out
    if isinstance(out, pl.DataFrame):
        return out.to_pandas()
    return out.to_pandas()


def assert_same(py: Any, cli: pd.DataFrame, columns: List[str]) -> None:
    py = as_pandas(py)
    assert list(py.columns) == list(cli.columns)
    assert len(py) == len(cli)
    for c in columns:
        got = [cell(v) for v in py[c].tolist()]
        want = [cell(v) for v in cli[c].tolist()]
        bad = [i for i, (g, w) in enumerate(zip(got, want)) if g != w]
        assert not bad, f"column {c}: rows {bad[:5]}: {[got[i] for i in bad[:5]]} != {[want[i] for i in bad[:5]]}"


def added_columns(cli: pd.DataFrame, input_columns: List[str]) -> List[str]:
    cols = [c for c in cli.columns if c not in input_columns]
    assert cols
    return cols


def read(reader: str, path: Path) -> Any:
    """The extract as each library reads it by default (dates typed where
    the reader infers them)."""
    if reader == "pandas-text":
        return pd.read_csv(path, dtype=str, keep_default_na=False)
    if reader == "pandas":
        return pd.read_csv(path)
    if reader == "pandas-dates":
        return pd.read_csv(path, parse_dates=["admission_date"])
    if reader == "polars":
        return pl.read_csv(path, try_parse_dates=True, infer_schema_length=None)
    if reader == "pyarrow":
        return pacsv.read_csv(path)
    raise AssertionError(reader)


READERS = ["pandas-text", "pandas", "pandas-dates", "polars", "pyarrow"]


@pytest.mark.parametrize("reader", READERS)
@pytest.mark.parametrize("exclude", [False, True], ids=["all-codes", "exclude-primary"])
def test_wide_lookback_equals_cli(run_cli, reader, exclude):
    opts = {**WIDE, "exclude_primary": exclude}
    cli = cli_frame(run_cli, "score", WIDE_CSV, opts)
    frame = read(reader, WIDE_CSV)
    if reader == "pandas-dates":
        assert str(frame["admission_date"].dtype).startswith("datetime64")
    if reader == "polars":
        assert frame.schema["admission_date"] == pl.Date
    out = morbus.score(frame, **opts)
    assert type(out) is (pa.Table if reader == "pyarrow" else type(frame))
    cols = added_columns(cli, list(as_pandas(frame).columns))
    assert_same(out, cli, cols)
    # every input row, in order, unchanged
    got = as_pandas(out)[list(as_pandas(frame).columns)]
    pd.testing.assert_frame_equal(got, as_pandas(frame))


@pytest.mark.parametrize("reader", ["pandas-text", "polars"])
@pytest.mark.parametrize(
    "windows",
    [
        {"lookback": "charlson=365,hfrs=730"},
        {"lookback": "90,elixhauser=all", "window": "earlier-only"},
        {"lookback": "365", "window": "earlier-only", "exclude_primary": True},
    ],
    ids=["per-list", "mixed-earlier-only", "earlier-only-exclude"],
)
def test_windows_equal_cli(run_cli, reader, windows):
    opts = {**WIDE, **windows}
    cli = cli_frame(run_cli, "score", WIDE_CSV, opts)
    frame = read(reader, WIDE_CSV)
    out = morbus.score(frame, **opts)
    assert_same(out, cli, added_columns(cli, list(as_pandas(frame).columns)))
    # The same windows as a dict.
    if windows["lookback"] == "charlson=365,hfrs=730":
        as_dict = morbus.score(frame, **{**opts, "lookback": {"charlson": 365, "hfrs": 730}})
        assert_same(as_dict, cli, added_columns(cli, list(as_pandas(frame).columns)))


def test_windows_change_scores(run_cli):
    """Per-list windows and earlier-only scoring differ from one window for
    all on the demo extract (else the comparisons above could not fail)."""
    one = cli_frame(run_cli, "score", WIDE_CSV, {**WIDE, "lookback": "365"})
    per_list = cli_frame(run_cli, "score", WIDE_CSV, {**WIDE, "lookback": "charlson=365,hfrs=730"})
    earlier = cli_frame(run_cli, "score", WIDE_CSV, {**WIDE, "lookback": "365", "window": "earlier-only"})
    assert (one["hfrs_gilbert2018"] != per_list["hfrs_gilbert2018"]).sum() > 10
    assert (one["charlson_quan2011"] == per_list["charlson_quan2011"]).all()
    assert (one["charlson_quan2011"] != earlier["charlson_quan2011"]).sum() > 100


def test_wide_lookback_changes_scores(run_cli):
    """The lookback and the exclusion matter on the demo extract (else the
    comparisons above could not fail on them)."""
    plain = cli_frame(run_cli, "score", WIDE_CSV, {"dx": "dx*"})
    hist = cli_frame(run_cli, "score", WIDE_CSV, WIDE)
    excl = cli_frame(run_cli, "score", WIDE_CSV, {**WIDE, "exclude_primary": True})
    for c in ["charlson_quan2011", "elixhauser_vanwalraven2009", "hfrs_gilbert2018"]:
        assert (plain[c] != hist[c]).sum() > 100, c
        assert (hist[c] != excl[c]).sum() > 10, c
    df = read("pandas-text", WIDE_CSV)
    py = morbus.score(df, **WIDE)
    assert (py["charlson_quan2011"].astype(str) != plain["charlson_quan2011"]).sum() > 100


@pytest.mark.parametrize("reader", ["pandas-text", "pandas", "polars", "pyarrow"])
def test_long_episodes_lookback_equals_cli(run_cli, reader):
    cli = cli_frame(run_cli, "score", LONG_CSV, LONG)
    assert list(cli.columns[:2]) == ["patient_id", "episode_id"]
    frame = read(reader, LONG_CSV)
    out = morbus.score(frame, **LONG)
    assert_same(out, cli, list(cli.columns))
    py = as_pandas(out)
    # the id and episode columns keep the frame's dtype
    assert py["patient_id"].dtype == as_pandas(frame)["patient_id"].dtype
    assert len(py) == cli["episode_id"].nunique()


def test_long_options_matter(run_cli, long_part):
    base = {k: v for k, v in LONG.items() if k not in ("exclude_primary", "primary", "poa", "lookback")}
    variants = [
        cli_frame(run_cli, "score", long_part, base),
        cli_frame(run_cli, "score", long_part, {**base, "lookback": 730}),
        cli_frame(run_cli, "score", long_part, LONG),
    ]
    c = "charlson_quan2011"
    assert (variants[0][c] != variants[1][c]).sum() > 10
    assert (variants[1][c] != variants[2][c]).sum() > 10
    df = read("pandas-text", long_part)
    for opts, cli in zip([base, {**base, "lookback": 730}, LONG], variants):
        assert_same(morbus.score(df, **opts), cli, list(cli.columns))


@pytest.mark.parametrize("opts", [{"lookback": "all"}, {"lookback": 0}, {"poa_values": ["y"]}, {"age": "age", "flags": True}])
def test_long_variants_equal_cli(run_cli, long_part, opts):
    o = {**LONG, **opts}
    cli = cli_frame(run_cli, "score", long_part, o)
    out = morbus.score(read("pandas", long_part), **o)
    assert_same(out, cli, list(cli.columns))


@pytest.mark.parametrize("reader", ["pandas-text", "polars", "pyarrow"])
@pytest.mark.parametrize("exclude", [False, True], ids=["all-codes", "exclude-primary"])
def test_explain_wide_equals_cli(run_cli, reader, exclude):
    opts = {**WIDE, "exclude_primary": exclude, "age": "age"}
    cli = cli_frame(run_cli, "explain", WIDE_CSV, opts)
    out = morbus.explain(read(reader, WIDE_CSV), **opts)
    assert type(out) is (pa.Table if reader == "pyarrow" else type(read(reader, WIDE_CSV)))
    assert_same(out, cli, list(cli.columns))
    statuses = set(cli["status"])
    assert {"counted", "repeated", "total"} <= statuses
    assert any(s.startswith("total_with_age:") for s in statuses)
    assert ("excluded:primary_diagnosis" in statuses) == exclude
    # earlier episodes of the window appear as sources
    dated = cli[cli["source_row"] != ""]
    assert (dated["source_row"] != dated["row"]).any()


@pytest.mark.parametrize("reader", ["pandas"])
def test_explain_long_equals_cli(run_cli, reader):
    cli = cli_frame(run_cli, "explain", LONG_CSV, LONG)
    out = morbus.explain(read(reader, LONG_CSV), **LONG)
    assert_same(out, cli, list(cli.columns))
    assert {"excluded:primary_diagnosis", "excluded:not_present_on_admission"} <= set(cli["status"])
    py = as_pandas(out)
    assert str(py["source_date"].dtype).startswith("datetime64")
    assert py["weight"].dtype == "float64"  # hfrs (a default index) has decimals



def test_explain_long_whole_weights(run_cli, long_part):
    """Whole-number weightings only: int64 weights."""
    opts = {**LONG, "index": "charlson:quan2011,elixhauser:vanwalraven2009"}
    cli = cli_frame(run_cli, "explain", long_part, opts)
    out = morbus.explain(read("polars", long_part), **opts)
    assert_same(out, cli, list(cli.columns))
    assert as_pandas(out)["weight"].dtype == "int64"


def test_explain_totals_are_the_scores():
    df = read("pandas-text", WIDE_CSV)
    scored = morbus.score(df, **WIDE)
    ex = morbus.explain(df, **WIDE, index="charlson:quan2011")
    totals = ex[ex["status"] == "total"]
    assert len(totals) == len(df)
    assert totals["weight"].tolist() == scored["charlson_quan2011"].tolist()
    assert (totals["patient_id"].tolist()) == df["patient_id"].tolist()


def small() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "pid": ["a", "a", "a", "b"],
            "day": ["2024-01-01", "2024-06-01", "2025-06-02", "2024-06-01"],
            "dx1": ["I21.9", "J18.9", "J18.9", "E11.9"],
            "dx2": [None, "I50.0", None, None],
        }
    )


def charlson(out) -> List[int]:
    return as_pandas(out)["charlson_charlson1987"].tolist()


def test_window_semantics():
    df = small()
    kw = dict(dx="dx*", id="pid", date="day", index="charlson:charlson1987")
    assert charlson(morbus.score(df, **kw, lookback=0)) == [1, 1, 0, 1]
    assert charlson(morbus.score(df, **kw, lookback=152)) == [1, 2, 0, 1]
    assert charlson(morbus.score(df, **kw, lookback=151)) == [1, 1, 0, 1]
    assert charlson(morbus.score(df, **kw, lookback="all")) == [1, 2, 2, 1]
    assert charlson(morbus.score(df, **kw, lookback="all", exclude_primary=True)) == [0, 2, 2, 0]


@pytest.mark.parametrize(
    "dates",
    [
        pd.to_datetime(["2024-01-01", "2024-06-01", "2025-06-02", "2024-06-01"]),
        pd.to_datetime(["2024-01-01 23:59", "2024-06-01 00:01", "2025-06-02 12:00", "2024-06-01 08:00"]),
        pd.to_datetime(["2024-01-01 23:30", "2024-06-01 00:30", "2025-06-02 12:00", "2024-06-01 08:00"]).tz_localize("Europe/Berlin"),
        [dt.date(2024, 1, 1), dt.date(2024, 6, 1), dt.date(2025, 6, 2), dt.date(2024, 6, 1)],
    ],
    ids=["datetime64", "with-times", "tz-aware", "date-objects"],
)
def test_typed_dates_equal_text_dates(dates):
    text = small()
    typed = text.assign(day=dates)
    kw = dict(dx="dx*", id="pid", date="day", lookback=152)
    want = morbus.score(text, **kw)
    for frame in [typed, pl.from_pandas(typed), pa.Table.from_pandas(typed, preserve_index=False)]:
        got = as_pandas(morbus.score(frame, **kw))
        assert got["charlson_quan2011"].tolist() == want["charlson_quan2011"].tolist()
        assert got["hfrs_gilbert2018"].tolist() == want["hfrs_gilbert2018"].tolist()


def test_date_format_and_missing_dates():
    df = small().assign(day=["01/01/2024", "01/06/2024", "02/06/2025", ""])
    kw = dict(dx="dx*", id="pid", date="day", lookback=152, index="charlson:charlson1987")
    out, prov = morbus.score(df, **kw, date_format="%d/%m/%Y", provenance=True)
    assert charlson(out) == [1, 2, 0, 1]
    assert prov["options"]["date_format"] == "%d/%m/%Y"
    assert prov["options"]["lookback"] is not None
    assert "dates missing: 1" in prov["report"]
    # read as ISO, none of them is a date: the run stops (more than 1%
    # unreadable); allowed, every episode is scored alone
    with pytest.raises(ValueError, match=r"^3 of 3 episodes with a date \(100\.00%\) have an unreadable date"):
        morbus.score(df, **kw)
    out, prov = morbus.score(df, **kw, max_unreadable_dates=100, provenance=True)
    assert charlson(out) == [1, 1, 0, 1]
    assert "unreadable: 3" in prov["report"]
    with pytest.raises(ValueError, match=r"row 0: unreadable date '01/01/2024' \(expected the date_format"):
        morbus.score(df, **kw, strict=True)
    # The same dates as whole numbers (pandas: a float column, NaN for the
    # missing one) read by their digits with a packed date_format; the
    # leading zero %d%m%Y needs is restored.
    numbers = df.assign(day=[1012024, 1062024, 2062025, float("nan")])
    out = morbus.score(numbers, **kw, date_format="%d%m%Y")
    assert charlson(out) == [1, 2, 0, 1]
    with pytest.raises(ValueError, match=r"holds \w+ values; dates must be text, dates or date-times \(or whole numbers"):
        morbus.score(numbers, **kw, date_format="%d/%m/%Y")


def test_errors_carry_the_command_line_messages():
    df = small()
    with pytest.raises(ValueError, match=r"lookback= needs id= \(the patient column\) and date="):
        morbus.score(df, dx="dx*", date="day", lookback=30)
    with pytest.raises(ValueError, match=r"date= is used with lookback=DAYS"):
        morbus.score(df, dx="dx*", id="pid", date="day")
    with pytest.raises(ValueError, match=r"lookback takes a whole number of days or 'all' \(or LIST=DAYS pairs\), not 'soon'"):
        morbus.score(df, dx="dx*", id="pid", date="day", lookback="soon")
    with pytest.raises(ValueError, match="not '-3'"):
        morbus.score(df, dx="dx*", id="pid", date="day", lookback=-3)
    with pytest.raises(KeyError, match="date column 'when' not found; columns in the input: pid, day, dx1, dx2"):
        morbus.score(df, dx="dx*", id="pid", date="when", lookback=30)
    with pytest.raises(ValueError, match="episode= is for the long layout"):
        morbus.score(df, dx="dx*", id="pid", episode="pid")
    with pytest.raises(ValueError, match="primary= is for the long layout"):
        morbus.score(df, dx="dx*", primary="dx2")
    with pytest.raises(ValueError, match="column 'dx2' is named by both poa= and dx="):
        morbus.score(df, dx="dx*", poa="dx2")
    with pytest.raises(ValueError, match="exclude_primary=True in the long layout needs primary=COLUMN"):
        morbus.score(df, dx="dx1", layout="long", id="pid", exclude_primary=True)
    with pytest.raises(ValueError, match="date_format '%Y' must hold"):
        morbus.score(df, dx="dx*", id="pid", date="day", lookback=1, date_format="%Y")
    with pytest.raises(ValueError, match="date column 'day' holds Int64 values; dates must be text, dates or date-times"):
        morbus.score(df.assign(day=[1, 2, 3, 4]), dx="dx*", id="pid", date="day", lookback=1)
    with pytest.raises(ValueError, match="date_format is for dates written as text"):
        morbus.score(df.assign(day=pd.to_datetime(df["day"])), dx="dx*", id="pid", date="day", lookback=1, date_format="%d/%m/%Y")
    with pytest.raises(ValueError, match="output column 'charlson_quan2011' already exists"):
        morbus.score(df.assign(charlson_quan2011=1), dx="dx*", id="pid", date="day", lookback=1)
    with pytest.raises(ValueError, match=r"row 2: invalid code 'X' in column 'dx2' \(strict=True\)"):
        morbus.score(df.assign(dx2=[None, None, "X", None]), dx="dx*", id="pid", date="day", lookback=1, strict=True)
    with pytest.raises(ValueError, match=r"row 1: missing id \(column 'pid' is empty\) \(strict=True\)"):
        morbus.explain(df.assign(pid=["a", None, "b", "c"]), dx="dx*", id="pid", date="day", lookback=1, strict=True)


def test_strict_rows_count_multiline_fields():
    """Row numbers stay frame rows when a field holds line breaks."""
    df = small().assign(dx2=["a\nb", None, "c\n\nd", "bad"])
    with pytest.raises(ValueError, match=r"row 0: invalid code 'a\\nb'"):
        morbus.score(df, dx="dx*", id="pid", date="day", lookback=1, strict=True)
    out, prov = morbus.score(df, dx="dx*", id="pid", date="day", lookback=1, provenance=True)
    assert len(out) == 4 and prov["codes"]["invalid"] == 3
    # a valid id with line breaks before the failing row
    df = small().assign(pid=["a\nz", "a", "a\n\nz", "b"], dx2=[None, None, None, "bad"])
    with pytest.raises(ValueError, match=r"row 3: invalid code 'bad' in column 'dx2'"):
        morbus.score(df, dx="dx*", id="pid", date="day", lookback=1, strict=True)


def test_empty_and_null_rows():
    df = pd.DataFrame({"pid": ["a", None, "a"], "day": ["2024-01-01", "2024-01-02", None], "dx1": [None, "I21.9", "I21.9"]})
    out, prov = morbus.score(df, dx="dx1", id="pid", date="day", lookback="all", index="charlson:charlson1987", provenance=True)
    assert charlson(out) == [0, 1, 1]
    assert "rows without an id: 1" in prov["report"]
    empty = df.iloc[:0]
    out = morbus.score(empty, dx="dx1", id="pid", date="day", lookback=30)
    assert len(out) == 0 and "charlson_quan2011" in out.columns
    ex = morbus.explain(empty, dx="dx1", id="pid", date="day", lookback=30)
    assert len(ex) == 0 and list(ex.columns)[:2] == ["pid", "row"]


def test_flags_and_ints_as_primary_and_poa():
    df = pd.DataFrame(
        {
            "pid": [7, 7, 7],
            "ep": [1, 1, 2],
            "day": ["2024-01-01", "2024-01-01", "2024-02-01"],
            "code": ["I21.9", "I50.0", "E11.9"],
            "first": [True, False, True],
            "poa": ["y", "N", "Y"],
        }
    )
    kw = dict(dx="code", layout="long", id="pid", episode="ep", date="day", index="charlson:charlson1987")
    out = morbus.score(df, **kw, lookback=31, exclude_primary=True, primary="first")
    assert out["pid"].tolist() == [7, 7] and out["ep"].tolist() == [1, 2]
    assert out["pid"].dtype == df["pid"].dtype
    assert charlson(out) == [1, 2]
    out = morbus.score(df, **kw, lookback=31, poa="poa")
    assert charlson(out) == [1, 3]
    out = morbus.score(df, **kw, lookback=31, poa="poa", poa_values="N")
    assert charlson(out) == [1, 2]
    out = morbus.score(df.assign(first=[1.0, float("nan"), 1.0]), **kw, lookback=31, exclude_primary=True, primary="first")
    assert charlson(out) == [1, 2]


def test_gil_released_while_scoring_history():
    import threading
    import time

    df = pd.concat([read("pandas-text", WIDE_CSV)] * 5, ignore_index=True)
    ticks = []
    stop = threading.Event()

    def tick():
        while not stop.is_set():
            ticks.append(time.perf_counter())
            time.sleep(0.001)

    t = threading.Thread(target=tick)
    t.start()
    try:
        start = time.perf_counter()
        morbus.score(df, **WIDE)
        end = time.perf_counter()
    finally:
        stop.set()
        t.join()
    during = [x for x in ticks if start < x < end]
    assert end - start < 0.05 or len(during) > 3


def test_docstring_examples():
    import doctest

    import morbus._history

    for module in (morbus, morbus._history):
        failed, attempted = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
        assert attempted > 0 and failed == 0, module.__name__


def long_with_gaps(tmp_path: Path) -> Path:
    """The long demo extract with the first row of a few episodes' kept
    columns emptied (their unit then carries its first non-empty value)
    and one later row disagreeing (counted, as on the command line)."""
    df = pd.read_csv(LONG_CSV, dtype=str, keep_default_na=False)
    first = df.drop_duplicates("episode_id").index[:5]
    df.loc[first, "died_within_30_days"] = ""
    df.loc[first, "admission_date"] = ""
    later = df.index[(df["episode_id"] == df.loc[first[0], "episode_id"])][-1]
    df.loc[later, "died_within_30_days"] = "7"
    path = tmp_path / "long-gaps.csv"
    df.to_csv(path, index=False)
    return path


@pytest.mark.parametrize("reader", ["pandas-text", "pandas", "polars", "pyarrow"])
def test_keep_equals_cli_typed(run_cli, reader, tmp_path):
    path = long_with_gaps(tmp_path)
    opts = {k: v for k, v in LONG.items() if k not in ("lookback", "date")}
    opts["keep"] = ["admission_date", "died_within_30_days"]
    code, out, err = run_cli(cli_args("score", path, opts) + ["--provenance", str(tmp_path / "p.json")])
    assert code == 0, err
    cli = pd.read_csv(io.StringIO(out), dtype=str, keep_default_na=False)
    assert list(cli.columns[:4]) == ["patient_id", "episode_id", "admission_date", "died_within_30_days"]
    frame = read(reader, path)
    got, prov = morbus.score(frame, **opts, provenance=True)
    assert_same(got, cli, list(cli.columns))
    # the kept columns keep the frame's dtype (numbers stay numbers)
    py, fr = as_pandas(got), as_pandas(frame)
    if reader != "pandas-text":
        assert py["died_within_30_days"].dtype.kind in "fi"
        assert fr["died_within_30_days"].dtype.kind in "fi"
    # a unit whose rows disagree is counted, as by the command line
    import json

    cli_prov = json.loads((tmp_path / "p.json").read_text())
    assert prov["rows"]["disagreeing_units"] == cli_prov["rows"]["disagreeing_units"] >= 1


def test_keep_options_and_messages(run_cli):
    df = read("pandas-text", LONG_CSV)
    long = {"layout": "long", "dx": "code", "id": "patient_id", "episode": "episode_id"}
    # comma-separated names as on the command line, or a list
    a = morbus.score(df, **long, keep="age,admission_date")
    b = morbus.score(df, **long, keep=["age", "admission_date"])
    pd.testing.assert_frame_equal(a, b)
    assert list(a.columns[:4]) == ["patient_id", "episode_id", "age", "admission_date"]
    with pytest.raises(ValueError, match=r"^keep= is for the long layout; a wide output keeps every input column already$"):
        morbus.score(df, dx="code", keep="age")
    with pytest.raises(ValueError, match=r"^column 'episode_id' is already in the output; keep it once$"):
        morbus.score(df, **long, keep="episode_id")
    with pytest.raises(KeyError, match=r"kept column 'ward' not found; columns in the input: "):
        morbus.score(df, **long, keep="ward")
    # the command line says the same
    code, _, err = run_cli(cli_args("score", LONG_CSV, {**long, "keep": "episode_id"}))
    assert code == 2 and "column 'episode_id' is already in the output; keep it once" in err


@pytest.mark.parametrize("reader", ["pandas-text", "polars", "pyarrow"])
def test_explain_label_equals_cli(run_cli, reader, tmp_path):
    opts = {**WIDE, "label": "episode_id", "age": "age"}
    cli = cli_frame(run_cli, "explain", WIDE_CSV, opts)
    assert list(cli.columns[:3]) == ["patient_id", "episode_id", "row"]
    out = morbus.explain(read(reader, WIDE_CSV), **opts)
    assert_same(out, cli, list(cli.columns))
    # long layout: the episode's first non-empty value, typed
    path = long_with_gaps(tmp_path)
    lopts = {**{k: v for k, v in LONG.items() if k != "lookback"}, "lookback": 365,
             "label": "died_within_30_days"}
    code, text, err = run_cli(cli_args("explain", path, lopts))
    assert code == 0, err
    cli = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False)
    got = morbus.explain(read(reader, path), **lopts)
    assert_same(got, cli, list(cli.columns))
    with pytest.raises(ValueError, match=r"^label column 'patient_id' is already a column of explain's output$"):
        morbus.explain(read(reader, WIDE_CSV), **{**WIDE, "label": "patient_id"})
