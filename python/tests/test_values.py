"""Values that could give a quietly wrong number, from Python: all-null
columns of every input kind, present-on-admission indicators (wide and long),
unreadable dates, date patterns, ages past 130.

Weights in the hand-worked scores: Charlson et al., J Chronic Dis
1987;40:373-83 (from memory, as in code-lists/charlson.tsv): myocardial
infarction 1, congestive heart failure 1, metastatic solid tumour 6.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa
import pytest

import morbus

KINDS = ["pandas", "polars", "pyarrow"]


def frame(kind: str, columns: dict, null: tuple = ()):
    """A frame of `kind` from text columns; the columns named in `null` hold
    no values at all (pandas: object None, polars: dtype Null, Arrow: null)."""
    n = len(next(iter(columns.values())))
    if kind == "pandas":
        data = {k: (pd.Series([None] * n, dtype=object) if k in null else v) for k, v in columns.items()}
        return pd.DataFrame(data)
    if kind == "polars":
        out = pl.DataFrame({k: (pl.Series(k, [None] * n) if k in null else v) for k, v in columns.items()})
        for k in null:
            assert out.schema[k] == pl.Null
        return out
    return pa.table({k: (pa.nulls(n) if k in null else pa.array(v)) for k, v in columns.items()})


def column(out, name):
    if isinstance(out, pa.Table):
        return out.column(name).to_pylist()
    if isinstance(out, pl.DataFrame):
        return out.get_column(name).to_list()
    return [None if pd.isna(v) else v for v in out[name].tolist()]


BASE = {
    "pid": ["p1", "p1", "p2"],
    "day": ["2024-01-10", "2024-03-01", "2024-03-01"],
    "age": ["81", "40", "72"],
    "dx1": ["I21.9", "I50.9", "C78.0"],
    "dx2": ["I50.9", "", ""],
}
C87 = "charlson:charlson1987"


@pytest.mark.parametrize("kind", KINDS)
def test_all_null_diagnosis_column(kind):
    # dx2 with no values reads as empty: the scores of dx1 alone.
    df = frame(kind, BASE, null=("dx2",))
    out = morbus.score(df, dx="dx*", index=C87)
    assert column(out, "charlson_charlson1987") == [1, 1, 6]  # dx1 alone: I21.9, I50.9, C78.0
    # Not vacuous: with dx2's value the first episode scores 2.
    full = morbus.score(frame(kind, BASE), dx="dx*", index=C87)
    assert column(full, "charlson_charlson1987") == [2, 1, 6]
    # Every front end: patient history, long layout, explain.
    hist = morbus.score(df, dx="dx*", id="pid", date="day", lookback=365, index=C87)
    assert column(hist, "charlson_charlson1987") == [1, 2, 6]
    long = morbus.score(df, dx="dx*", layout="long", id="pid", index=C87)
    assert column(long, "charlson_charlson1987") == [2, 6]
    why = morbus.explain(df, dx="dx*", index=C87)
    assert len(column(why, "row")) == 3 + 3  # one code and one total per row


@pytest.mark.parametrize("kind", KINDS)
def test_all_null_age_column(kind):
    df = frame(kind, BASE, null=("age",))
    out, prov = morbus.score(df, dx="dx1", age="age", index=C87, provenance=True)
    assert column(out, "charlson_charlson1987") == [1, 1, 6]
    assert column(out, "charlson_charlson1987_age") == [None, None, None]
    assert prov["ages"] == {"missing": 3, "unreadable": 0}
    hist, prov = morbus.score(df, dx="dx1", age="age", id="pid", date="day", lookback=365, index=C87,
                              provenance=True)
    assert column(hist, "charlson_charlson1987_age") == [None, None, None]
    assert prov["ages"] == {"missing": 3, "unreadable": 0}
    why = morbus.explain(df, dx="dx1", age="age", index=C87)
    assert len(column(why, "row")) == 6


@pytest.mark.parametrize("kind", KINDS)
def test_all_null_date_column(kind):
    # No dates: every episode scored alone, counted as missing (not
    # unreadable: the run goes on).
    df = frame(kind, BASE, null=("day",))
    out, prov = morbus.score(df, dx="dx1", id="pid", date="day", lookback=365, index=C87, provenance=True)
    assert column(out, "charlson_charlson1987") == [1, 1, 6]
    assert prov["dates"]["missing"] == 3
    assert prov["dates"]["unreadable"] == 0
    dated = morbus.score(frame(kind, BASE), dx="dx1", id="pid", date="day", lookback=365, index=C87)
    assert column(dated, "charlson_charlson1987") == [1, 2, 6]
    why = morbus.explain(df, dx="dx1", id="pid", date="day", lookback=365, index=C87)
    assert len(column(why, "row")) == 6


@pytest.mark.parametrize("kind", KINDS)
def test_all_null_poa_column_is_blank(kind):
    # A site that records no indicator: blank counts (exempt by convention),
    # so the scores are those without poa=.
    cols = dict(BASE, poa1=["Y", "Y", "Y"], poa2=["Y", "Y", "Y"])
    df = frame(kind, cols, null=("poa1", "poa2"))
    out = morbus.score(df, dx="dx*", poa="poa*", index=C87)
    assert column(out, "charlson_charlson1987") == [2, 1, 6]


WIDE_POA = {
    "id": ["1", "2", "3"],
    "dx1": ["I21.9", "I50.9", "I21"],
    "dx2": ["I50.9", "C78.0", "I50"],
    "poa1": ["Y", "", "E"],
    "poa2": ["N", "1", "u"],
}


@pytest.mark.parametrize("kind", KINDS)
def test_wide_poa_pairs_columns(kind):
    df = frame(kind, WIDE_POA)
    out, prov = morbus.score(df, dx="dx*", poa="poa*", index=C87, provenance=True)
    # 1: I21.9 (Y) 1, I50.9 (N) out. 2: blank and '1' count: 1 + 6. 3: 'E'
    # unrecognised and U do not count.
    assert column(out, "charlson_charlson1987") == [1, 7, 0]
    poa = prov["present_on_admission"]
    assert poa["values_counting"] == ["Y", "W", "1", "BLANK"]
    assert poa["unrecognised"] == 1
    assert sum(v["count"] for v in poa["indicators"]) == 6
    assert "present-on-admission indicators: " in prov["report"]
    only_y = morbus.score(df, dx="dx*", poa="poa*", poa_values="Y", index=C87)
    assert column(only_y, "charlson_charlson1987") == [1, 0, 0]


def test_wide_poa_errors_carry_the_command_line_messages():
    df = pd.DataFrame(WIDE_POA)
    with pytest.raises(ValueError, match=r"^poa= 'poa1' names 1 present-on-admission columns \(poa1\) but dx= "
                                         r"names 2 diagnosis columns \(dx1, dx2\); in the wide layout they pair "
                                         r"in order, one each$"):
        morbus.score(df, dx="dx*", poa="poa1")
    with pytest.raises(ValueError, match=r"^row 2: unrecognised present-on-admission value 'E' \(not Y, N, U, W, "
                                         r"1, blank or one of poa_values\) in column 'poa1' \(strict=True\)$"):
        morbus.score(df, dx="dx*", poa="poa*", strict=True)


def test_long_poa_applies_to_the_current_episode_only():
    df = pd.DataFrame({
        "pid": ["p1", "p1"], "ep": ["e1", "e2"], "day": ["2024-01-10", "2024-03-01"],
        "code": ["I21", "I50"], "poa": ["N", "Y"],
    })
    out = morbus.score(df, dx="code", layout="long", id="pid", episode="ep", date="day", lookback=365,
                       poa="poa", index=C87)
    # e1: I21 (N) out -> 0; e2: I50 1 + I21 of e1, regardless of its indicator -> 2.
    assert out["charlson_charlson1987"].tolist() == [0, 2]


def test_unreadable_dates_stop_above_the_limit():
    df = pd.DataFrame({"pid": ["p1"] * 3, "day": ["2024-01-01", "05/01/2024", "2024-02-01"],
                       "dx1": ["I21", "I50", "I10"]})
    with pytest.raises(ValueError, match=r"^1 of 3 episodes with a date \(33\.33%\) have an unreadable date, more "
                                         r"than the 1% allowed by max_unreadable_dates; e\.g\. '05/01/2024' "
                                         r"\(expected %Y-%m-%d\); give the dates' format with date_format, or "
                                         r"raise max_unreadable_dates$"):
        morbus.score(df, dx="dx1", id="pid", date="day", lookback=365)
    out, prov = morbus.score(df, dx="dx1", id="pid", date="day", lookback=365, max_unreadable_dates=50,
                             provenance=True)
    assert len(out) == 3
    assert prov["dates"]["unreadable_examples"] == ["05/01/2024"]
    assert "(e.g. '05/01/2024'; expected %Y-%m-%d)" in prov["report"]
    with pytest.raises(ValueError, match=r"^date_format '%d/%m/%d/%Y' names %d twice; give each of %Y, %m \(or %b\) "
                                         r"and %d once$"):
        morbus.score(df, dx="dx1", id="pid", date="day", lookback=365, date_format="%d/%m/%d/%Y")


@pytest.mark.parametrize(
    "ages",
    [
        [4294967366, 130, 131],
        [4294967366.0, 130.0, 131.0],
        ["4294967366", "130", "131"],
    ],
    ids=["int64", "float", "text"],
)
def test_ages_past_130_are_unreadable(ages):
    df = pd.DataFrame({"dx1": ["I21"] * 3, "age": ages})
    out, prov = morbus.score(df, dx="dx1", age="age", index=C87, provenance=True)
    # 130: I21 1 + 4 age points (80 and over; Charlson et al., J Clin
    # Epidemiol 1994;47:1245-51, from memory).
    assert [None if pd.isna(v) else int(v) for v in out["charlson_charlson1987_age"]] == [None, 5, None]
    assert prov["ages"] == {"missing": 0, "unreadable": 2}
    hist, prov = morbus.score(df.assign(pid="p", day="2024-01-01"), dx="dx1", age="age", id="pid", date="day",
                              lookback=1, index=C87, provenance=True)
    assert prov["ages"] == {"missing": 0, "unreadable": 2}
