"""pandas, polars and pyarrow inputs: dtypes, nulls, categoricals, chunks,
refused dtypes, errors and their messages, the API around `score`."""

from __future__ import annotations

import doctest
import threading
import time

import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa
import pytest

import morbus

DX1 = ["I21.9", None, "f00.1", "C78.0", "", "N/A", "I50.0"]
DX2 = ["E11.2", "R29.6", None, "C18.7", None, "J44.1", "N18.5"]


def reference(**opts):
    """Scores of the plain-string frame (empty strings for the nulls)."""
    df = pd.DataFrame({"dx1": [v or "" for v in DX1], "dx2": [v or "" for v in DX2]}, dtype=object)
    return morbus.score(df, dx="dx*", **opts)


SCORES = ["charlson_quan2011", "elixhauser_vanwalraven2009", "hfrs_gilbert2018", "hfrs_gilbert2018_band"]


def check(out, opts=None):
    if not isinstance(out, pd.DataFrame):
        out = out.to_pandas()
    ref = reference(**(opts or {}))
    for c in [c for c in ref.columns if c not in ("dx1", "dx2")]:
        assert out[c].tolist() == ref[c].tolist(), c
    # the reference scores something: the comparison is not vacuous
    # I21.9 + E11.2: 0 + 1 (quan2011); R29.6: 0; F00.1: 2; C78.0 + C18.7: 6
    assert ref["charlson_quan2011"].tolist()[:4] == [1, 0, 2, 6]


def test_pandas_object_str_and_arrow_backed_columns():
    for dtype in [object, "str", pd.ArrowDtype(pa.string()), pd.ArrowDtype(pa.large_string()), "string[pyarrow]"]:
        df = pd.DataFrame({"dx1": pd.Series(DX1, dtype=dtype), "dx2": pd.Series(DX2, dtype=dtype)})
        check(morbus.score(df, dx="dx*"))


def test_pandas_nan_and_categorical():
    df = pd.DataFrame({"dx1": pd.Categorical(DX1), "dx2": pd.Series([np.nan if v is None else v for v in DX2], dtype=object)})
    check(morbus.score(df, dx="dx*", flags=True), {"flags": True})


def test_pandas_keeps_index_order_and_columns():
    df = pd.DataFrame({"zeta": range(7), "dx1": DX1, "dx2": DX2}, index=[10, 3, 7, 1, 99, 5, 0])
    out = morbus.score(df, dx="dx*")
    assert list(out.index) == [10, 3, 7, 1, 99, 5, 0]
    assert list(out.columns[:3]) == ["zeta", "dx1", "dx2"]
    assert out["zeta"].tolist() == list(range(7))
    check(out)
    shuffled = df.iloc[::-1]
    back = morbus.score(shuffled, dx="dx*")
    assert back["charlson_quan2011"].tolist() == out["charlson_quan2011"].tolist()[::-1]


def test_polars_strings_nulls_categorical_and_enum():
    check(morbus.score(pl.DataFrame({"dx1": DX1, "dx2": DX2}), dx="dx*"))
    cats = sorted({v for v in DX1 + DX2 if v is not None})
    for dtype in [pl.Categorical, pl.Enum(cats)]:
        frame = pl.DataFrame({"dx1": pl.Series(DX1, dtype=dtype), "dx2": pl.Series(DX2, dtype=dtype)})
        out = morbus.score(frame, dx="dx*")
        assert isinstance(out, pl.DataFrame)
        assert out.schema["dx1"] == frame.schema["dx1"]
        check(out)


def test_pyarrow_string_types_dictionaries_and_misaligned_chunks():
    for t in [pa.string(), pa.large_string(), pa.string_view(), pa.binary()]:
        table = pa.table({"dx1": pa.array(DX1, t), "dx2": pa.array(DX2, t)})
        check(morbus.score(table, dx="dx*"))
    table = pa.table({"dx1": pa.array(DX1).dictionary_encode(), "dx2": pa.array(DX2, pa.large_string()).dictionary_encode()})
    check(morbus.score(table, dx="dx*"))
    chunked = pa.table(
        {
            "dx1": pa.chunked_array([DX1[:2], DX1[2:5], DX1[5:]]),
            "dx2": pa.chunked_array([DX2[:4], DX2[4:]]),
        }
    )
    out = morbus.score(chunked, dx="dx*")
    assert isinstance(out, pa.Table)
    assert out.column("dx1").num_chunks == 3  # input columns untouched
    check(out)


def test_any_arrow_c_stream_gives_a_pyarrow_table():
    class Stream:
        def __init__(self, table):
            self.table = table

        def __arrow_c_stream__(self, requested_schema=None):
            return self.table.__arrow_c_stream__(requested_schema)

    out = morbus.score(Stream(pa.table({"dx1": DX1, "dx2": DX2})), dx="dx*")
    assert isinstance(out, pa.Table)
    check(out)
    batch = pa.record_batch({"dx1": DX1, "dx2": DX2})
    check(morbus.score(batch, dx="dx*"))


@pytest.mark.parametrize(
    "column",
    [
        pd.Series([1, 2, 3, 4, 5, 6, 7]),
        pd.Series([1.5] * 7),
        pd.Series([True] * 7),
        pd.Series(pd.to_datetime(["2026-01-01"] * 7)),
    ],
    ids=["int", "float", "bool", "datetime"],
)
def test_non_text_diagnosis_columns_are_refused_naming_the_column(column):
    df = pd.DataFrame({"dx1": DX1, "dx2": column})
    with pytest.raises(ValueError, match="diagnosis column 'dx2' holds .* not text"):
        morbus.score(df, dx="dx*")
    with pytest.raises(ValueError, match="diagnosis column 'dx2'"):
        morbus.score(pl.from_pandas(df), dx="dx*")


def test_mixed_object_column_is_refused_naming_the_column():
    df = pd.DataFrame({"dx1": DX1, "dx2": pd.Series(["I10", 5, None, "E11", None, None, None], dtype=object)})
    with pytest.raises(ValueError, match="column 'dx2' .*cannot be read"):
        morbus.score(df, dx="dx*")


def test_all_null_numeric_column_is_an_empty_column():
    """An empty diagnosis column read from a file comes as all-NaN floats."""
    df = pd.DataFrame({"dx1": DX1, "dx2": DX2, "dx3": [np.nan] * 7, "dx4": [None] * 7})
    out = morbus.score(df, dx="dx*")
    check(out)
    assert pa.table(df).schema.field("dx4").type == pa.null()


@pytest.mark.parametrize(
    "ages",
    [
        [81, 40, 72, None, 55, 64, 90],
        [81.0, 40.9, 72.2, np.nan, 55.0, 64.5, 90.0],
        ["81", "40.9", " 72 ", "", "55", "64", "90"],
        pd.array([81, 40, 72, None, 55, 64, 90], dtype="Int64"),
        pd.Categorical(["81", "40", "72", None, "55", "64", "90"]),
    ],
    ids=["int-with-none", "float-nan", "text", "Int64", "categorical"],
)
def test_age_columns_of_every_kind(ages):
    df = pd.DataFrame({"dx1": DX1, "dx2": DX2, "age": ages})
    out, prov = morbus.score(df, dx="dx*", age="age", index="charlson:charlson1987", provenance=True)
    got = out["charlson_charlson1987_age"]
    assert str(got.dtype) == "Int64"
    base = out["charlson_charlson1987"].tolist()
    points = [4, 0, 3, None, 1, 2, 4]
    want = [None if p is None else b + p for b, p in zip(base, points)]
    assert [None if pd.isna(v) else int(v) for v in got] == want
    assert prov["ages"] == {"missing": 1, "unreadable": 0}


def test_arrow_decimals_and_unsigned_integers_read_as_the_numbers_they_hold():
    """Frames are read by the library's one Arrow reader, that of Parquet
    inputs: decimals and unsigned integers are numbers, other types are
    refused by name, and a value no number holds exactly names its row."""
    from decimal import Decimal

    ages = [81, 40, 72, None, 55, 64, 90]
    opts = dict(dx="dx*", age="age", index="charlson:charlson1987")
    ref = morbus.score(pd.DataFrame({"dx1": DX1, "dx2": DX2, "age": ages}), **opts)
    plain = lambda col: [None if pd.isna(v) else int(v) for v in col]  # noqa: E731
    want = plain(ref["charlson_charlson1987_age"])
    # the age points of test_age_columns_of_every_kind (Charlson et al. 1987)
    assert want == [b + p if p is not None else None for b, p in zip(plain(ref["charlson_charlson1987"]), [4, 0, 3, None, 1, 2, 4])]
    base = pa.table({"dx1": DX1, "dx2": DX2})
    halves = [None if a is None else Decimal(a) + Decimal("0.5") for a in ages]
    for age in (pa.array(halves, type=pa.decimal128(5, 1)), pa.array(ages, type=pa.uint64())):
        out = morbus.score(base.append_column("age", age), **opts)
        if not isinstance(out, pd.DataFrame):
            out = out.to_pandas()
        assert plain(out["charlson_charlson1987_age"]) == want, age.type
    listed = base.append_column("dx3", pa.array([["I10"]] * 7))
    with pytest.raises(ValueError, match=r"column 'dx3' holds lists .*which morbus cannot read"):
        morbus.score(listed, dx="dx*")
    huge = base.append_column("id", pa.array([1, 2, 2**64 - 1, 4, 5, 6, 7], type=pa.uint64()))
    with pytest.raises(ValueError, match=r"^row 2: column 'id' holds the whole number 18446744073709551615"):
        morbus.score(huge, dx="dx*", layout="long", id="id")


def test_unreadable_ages_are_counted_and_strict_refuses_them():
    df = pd.DataFrame({"dx1": DX1, "dx2": DX2, "age": [-1, 151, 80, 200.5, np.inf, 3, 0]})
    out, prov = morbus.score(df, dx="dx*", age="age", provenance=True)
    assert prov["ages"]["unreadable"] == 4
    assert out["charlson_quan2011_age"].isna().tolist() == [True, True, False, True, True, False, False]
    with pytest.raises(ValueError, match=r"^row 0: unreadable age '-1' \(strict=True\)$"):
        morbus.score(df, dx="dx*", age="age", strict=True)
    with pytest.raises(ValueError, match="age column 'age' holds"):
        morbus.score(pd.DataFrame({"dx1": DX1, "age": [True] * 7}), dx="dx1", age="age")


def test_strict_names_row_and_column():
    df = pd.DataFrame({"dx1": DX1, "dx2": DX2})
    with pytest.raises(ValueError, match=r"^row 5: invalid code 'N/A' in column 'dx1' \(strict=True\)$"):
        morbus.score(df, dx="dx*", strict=True)


def test_long_layout_ids_keep_dtype_and_order_nulls_are_one_unit():
    df = pd.DataFrame(
        {"pid": pd.array([30, 10, 30, None, 20, None, 10], dtype="Int64"), "code": DX1},
    )
    out = morbus.score(df, dx="code", layout="long", id="pid", index="charlson:count")
    assert str(out["pid"].dtype) == "Int64"
    assert [None if pd.isna(v) else int(v) for v in out["pid"]] == [30, 10, None, 20]
    assert list(out.columns) == ["pid", "charlson_count"]
    # 30: I21.9 + f00.1 (infarction, dementia); 10: R? none + I50 -> 1; null: C78.0, ""; 20: "" -> 0
    assert out["charlson_count"].tolist() == [2, 1, 1, 0]
    pl_out = morbus.score(pl.from_pandas(df), dx="code", layout="long", id="pid", index="charlson:count")
    assert pl_out["pid"].dtype == pl.Int64
    assert pl_out["charlson_count"].to_list() == [2, 1, 1, 0]
    text = morbus.score(pa.table({"pid": ["b", "a", "b", None, "", None, "a"], "code": DX1}), dx="code", layout="long", id="pid", index="charlson:count")
    assert text.column("pid").to_pylist() == ["b", "a", None, ""]


def test_empty_frame():
    df = pd.DataFrame({"dx1": pd.Series([], dtype="str")})
    out = morbus.score(df, dx="dx1")
    assert len(out) == 0
    assert list(out.columns) == ["dx1"] + SCORES
    out = morbus.score(df, dx="dx1", layout="long", id="dx1")
    assert len(out) == 0
    for frame in (pl.from_pandas(df), pa.table(df)):
        out = morbus.score(frame, dx="dx1")
        names = out.column_names if isinstance(out, pa.Table) else out.columns
        assert list(names) == ["dx1"] + SCORES
        assert len(out) == 0


def test_a_column_used_twice():
    """The same column as diagnosis and id (codes grouped by themselves)."""
    df = pd.DataFrame({"dx1": ["I50", "I21", "I50"]})
    for frame in (df, pl.from_pandas(df), pa.table(df)):
        out = morbus.score(frame, dx="dx1", layout="long", id="dx1", index="charlson:count")
        out = out if isinstance(out, pd.DataFrame) else out.to_pandas()
        assert out["dx1"].tolist() == ["I50", "I21"]
        assert out["charlson_count"].tolist() == [1, 1]


def test_errors_and_messages():
    df = pd.DataFrame({"id": [1], "dx1": ["I10"], "charlson_quan2011": [0]})
    with pytest.raises(KeyError, match="diagnosis column 'dx9' not found; columns in the input: id, dx1, charlson_quan2011"):
        morbus.score(df, dx="dx9")
    with pytest.raises(KeyError, match="diagnosis pattern 'diag\\*' matches no column"):
        morbus.score(df, dx="diag*")
    with pytest.raises(KeyError, match="age column 'years' not found"):
        morbus.score(df, dx="dx1", age="years")
    with pytest.raises(KeyError, match="id column 'pid' not found"):
        morbus.score(df, dx="dx1", layout="long", id="pid")
    with pytest.raises(ValueError, match="output column 'charlson_quan2011' already exists in the input"):
        morbus.score(df, dx="dx1")
    ok = df.drop(columns="charlson_quan2011")
    with pytest.raises(ValueError, match="unknown list 'charlton'; available lists: charlson, elixhauser, hfrs"):
        morbus.score(ok, dx="dx1", index="charlton")
    with pytest.raises(ValueError, match="unknown weighting 'x' for list 'hfrs'; its weightings: gilbert2018"):
        morbus.score(ok, dx="dx1", index="hfrs:x")
    with pytest.raises(ValueError, match="index 'hfrs:gilbert2018' is named twice"):
        morbus.score(ok, dx="dx1", index=["hfrs", "hfrs:gilbert2018"])
    with pytest.raises(ValueError, match="layout='long' needs id=COLUMN"):
        morbus.score(ok, dx="dx1", layout="long")
    with pytest.raises(ValueError, match="layout must be 'wide' or 'long'"):
        morbus.score(ok, dx="dx1", layout="tall")
    with pytest.raises(ValueError, match="dx_sep must be one ASCII character"):
        morbus.score(ok, dx="dx1", dx_sep=";;")
    with pytest.raises(ValueError, match="bad column pattern"):
        morbus.score(ok, dx="dx[")
    dup = pd.DataFrame([["I10", "I50"]], columns=["dx", "dx"])
    with pytest.raises(ValueError, match="appears 2 times"):
        morbus.score(dup, dx="dx")
    with pytest.raises(TypeError, match="pandas or polars DataFrame"):
        morbus.score([["I10"]], dx="dx1")
    with pytest.raises(TypeError, match="collect"):
        morbus.score(pl.DataFrame({"dx1": ["I10"]}).lazy(), dx="dx1")


def test_lists_and_load_lists(tmp_path):
    info = morbus.lists()
    assert [l["name"] for l in info] == ["charlson", "elixhauser", "hfrs"]
    for l in info:
        assert len(l["checksum"]) == 64 and l["version"] and l["source"] and l["conditions"]
    with pytest.raises(ValueError, match="no code lists"):
        morbus.load_lists(tmp_path)
    tiny = "\n".join(
        [
            "list\ttiny",
            "version\t1.0",
            "title\tA one-condition example",
            "edition\tICD-10 (WHO)",
            "source\tInvented for a test",
            "default_weighting\tpoints",
            "condition\theart_failure\tHeart failure\tInvented",
            "code\tI50\theart_failure\tInvented",
            "weighting\tpoints\tInvented points\tInvented",
            "weight\tpoints\theart_failure\t2.5",
        ]
    )
    (tmp_path / "tiny.tsv").write_text(tiny + "\n", encoding="utf-8")
    handle = morbus.load_lists(tmp_path)
    assert handle.names == ["charlson", "elixhauser", "hfrs", "tiny"]
    assert [l["name"] for l in morbus.lists(handle)][-1] == "tiny"
    df = pd.DataFrame({"dx1": ["I50.9", "I10", None]})
    for lists in (handle, tmp_path, str(tmp_path)):
        out, prov = morbus.score(df, dx="dx1", index="tiny", lists=lists, provenance=True)
        assert out["tiny_points"].tolist() == [2.5, 0.0, 0.0]
        assert prov["lists"][0]["name"] == "tiny" and prov["lists"][0]["origin"].endswith("tiny.tsv")
    (tmp_path / "broken.tsv").write_text("list\tbroken\nfoo\tbar\n", encoding="utf-8")
    with pytest.raises(ValueError, match="broken.tsv:2"):
        morbus.load_lists(tmp_path)
    with pytest.raises(TypeError):
        morbus.score(df, dx="dx1", lists=42)


def test_provenance_describes_the_run():
    df = pd.DataFrame({"dx1": DX1, "dx2": DX2})
    _, prov = morbus.score(df, dx=["dx2", "dx1"], flags=True, provenance=True)
    assert prov["tool"] == {"name": "morbus", "version": morbus.__version__}
    assert [i["spec"] for i in prov["indices"]] == ["charlson:quan2011", "elixhauser:vanwalraven2009", "hfrs:gilbert2018"]
    assert [l["name"] for l in prov["lists"]] == ["charlson", "elixhauser", "hfrs"]
    assert {l["checksum"] for l in prov["lists"]} == {l["checksum"] for l in morbus.lists()}
    assert prov["options"]["dx"] == ["dx2", "dx1"]
    assert prov["options"]["dx_columns"] == ["dx2", "dx1"]
    assert prov["options"]["flags"] is True and prov["options"]["hierarchy"] is True
    assert prov["rows"] == {
        "read": 7, "written": 7, "units": 7, "missing_ids": 0, "disagreeing_units": 0,
        "spilled_records": 0, "spilled_bytes": 0,
    }
    assert prov["codes"]["read"] == 9 and prov["codes"]["invalid"] == 1
    assert prov["codes"]["top_invalid"] == [{"value": "N/A", "count": 1}]
    assert prov["ages"] is None
    assert prov["columns"][:4] == SCORES
    assert prov["report"].startswith("morbus: 7 rows read, 7 rows written")
    out = morbus.score(df, dx="dx*")
    assert isinstance(out, pd.DataFrame)  # no provenance unless asked


def test_threads_option():
    df = pd.DataFrame({"dx1": DX1 * 10_000, "dx2": DX2 * 10_000})
    one = morbus.score(df, dx="dx*", threads=1)
    three = morbus.score(df, dx="dx*", threads=3)
    pd.testing.assert_frame_equal(one, three)
    for bad in (0, -1, 1.5, True):
        with pytest.raises(ValueError, match="threads must be a positive whole number"):
            morbus.score(df, dx="dx*", threads=bad)


def test_scoring_runs_without_the_gil():
    """A Python thread keeps running while the engine scores: the longest
    pause it sees is a small part of the call (holding the GIL would stall
    it for the whole scoring)."""
    n = 100_000
    while True:
        table = pa.table({"dx1": pa.array(np.resize(np.array(DX1, dtype=object), n)), "dx2": pa.array(np.resize(np.array(DX2, dtype=object), n))})
        t0 = time.perf_counter()
        morbus.score(table, dx="dx*")
        alone = time.perf_counter() - t0
        if alone > 0.3 or n >= 6_400_000:
            break
        n *= 2
    stamps = []
    done = threading.Event()

    def tick():
        while not done.is_set():
            stamps.append(time.perf_counter())
            time.sleep(0.001)

    t = threading.Thread(target=tick)
    t.start()
    time.sleep(0.02)
    t0 = time.perf_counter()
    morbus.score(table, dx="dx*")
    t1 = time.perf_counter()
    done.set()
    t.join()
    inside = [s for s in stamps if t0 <= s <= t1]
    gaps = [b - a for a, b in zip([t0] + inside, inside + [t1])]
    assert max(gaps) < 0.5 * (t1 - t0), (max(gaps), t1 - t0, n)


def test_docstring_examples():
    failed, attempted = doctest.testmod(morbus, optionflags=doctest.ELLIPSIS)
    assert attempted >= 4
    assert failed == 0
