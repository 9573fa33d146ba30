"""morbus: comorbidity and frailty covariates from ICD-10 diagnosis columns.

The Charlson index, the Elixhauser conditions and the Hospital Frailty Risk
Score, computed by the morbus engine (the same code, lists and numbers as the
``morbus`` command line) on a pandas or polars DataFrame or any Arrow data.

>>> import pandas as pd, morbus
>>> df = pd.DataFrame({"dx1": ["I21.9", "F00.1"], "dx2": ["C78.0", None]})
>>> out = morbus.score(df, dx="dx*", index="charlson:charlson1987")
>>> out["charlson_charlson1987"].tolist()
[7, 1]

These indices support population-level risk adjustment and research, not
decisions about an individual patient.
"""

from __future__ import annotations

import json
import os
import sys
from typing import Any, Dict, List, Optional, Sequence, Tuple, Union

from . import _history, _native
from ._compare import compare
from ._history import explain
from ._native import Lists

__all__ = ["score", "explain", "compare", "lists", "load_lists", "code_status", "Lists", "__version__"]

__version__: str = _native.version()


_Names = Union[str, Sequence[str]]


def code_status(values: Union[str, Sequence[str]], edition: str = "any") -> List[str]:
    """Look diagnosis values up as :func:`score` reads and counts them.

    For each value: ``"known"`` (a code of the edition), ``"extended"`` (not
    a code of the edition, but its category is: a national variant),
    ``"unknown"`` (ICD-10-shaped, but neither the code nor its category is
    in the edition), ``"invalid"`` (not ICD-10-shaped) or ``"empty"``.
    ``edition``: ``"who"`` (WHO ICD-10 2019), ``"cm"`` (ICD-10-CM, April 2026
    release) or ``"any"`` (either).

    >>> import morbus
    >>> morbus.code_status(["I50.9", "I5O.9", "I50.99", "N/A", ""], edition="who")
    ['known', 'unknown', 'extended', 'invalid', 'empty']
    >>> morbus.code_status("C7A.1", edition="cm"), morbus.code_status("C7A.1", edition="who")
    (['known'], ['unknown'])
    """
    if isinstance(values, str):
        values = [values]
    return _native.code_status(list(values), edition)


def load_lists(path: Union[str, "os.PathLike[str]"]) -> Lists:
    """Load the code lists (``*.tsv``) of a directory on top of the built-ins.

    A loaded list replaces a built-in list of the same name (``notes`` says
    which), as ``morbus score --lists DIR`` does. Pass the result as
    ``lists=`` to :func:`score` or :func:`lists`. Raises ``ValueError`` with
    every problem found (file and line) when a list is broken.

    >>> import morbus, tempfile
    >>> d = tempfile.mkdtemp()
    >>> morbus.load_lists(d)  # doctest: +IGNORE_EXCEPTION_DETAIL
    Traceback (most recent call last):
    ValueError: no code lists (*.tsv) found in ...
    """
    return _native.load_lists(os.fspath(path))


def _catalogue(lists: Union[None, str, "os.PathLike[str]", Lists]) -> Optional[Lists]:
    if lists is None or isinstance(lists, Lists):
        return lists
    if isinstance(lists, (str, os.PathLike)):
        return load_lists(lists)
    raise TypeError(
        f"lists must be a morbus.Lists (from morbus.load_lists) or a directory path, "
        f"not {type(lists).__name__}"
    )


def lists(lists: Union[None, str, "os.PathLike[str]", Lists] = None) -> List[Dict[str, Any]]:
    """Describe the available code lists, one dict per list.

    Keys: ``name``, ``version``, ``title``, ``checksum`` (SHA-256 of the
    list's content), ``source``, ``origin``, ``editions``,
    ``default_weighting``, ``weightings`` (name, label, source, decimals,
    bands), ``conditions`` (key, label, source), ``code_entries`` and
    ``has_age_points``. ``lists=`` adds the lists of a directory (or a
    :class:`Lists` handle), as ``morbus lists --lists DIR`` does.

    >>> import morbus
    >>> [l["name"] for l in morbus.lists()]
    ['charlson', 'elixhauser', 'hfrs']
    """
    cat = _catalogue(lists) or _native.builtin_lists()
    return _native.list_table(cat)


def _as_list(value: Optional[_Names], what: str) -> Optional[List[str]]:
    if value is None:
        return None
    if isinstance(value, str):
        return [value]
    try:
        items = list(value)
    except TypeError:
        raise TypeError(f"{what} must be a string or a list of strings") from None
    if not all(isinstance(v, str) for v in items):
        raise TypeError(f"{what} must be a string or a list of strings")
    return items


def _optional_name(value: Optional[str], what: str) -> Optional[str]:
    if value is not None and not isinstance(value, str):
        raise TypeError(f"{what} must be a column name (a string)")
    return value


def _kind(frame: Any) -> str:
    """'pandas', 'polars' or 'arrow' (a pyarrow.Table after conversion)."""
    pd = sys.modules.get("pandas")
    if pd is not None and isinstance(frame, pd.DataFrame):
        return "pandas"
    pl = sys.modules.get("polars")
    if pl is not None:
        if isinstance(frame, pl.DataFrame):
            return "polars"
        if isinstance(frame, pl.LazyFrame):
            raise TypeError("morbus.score needs a polars DataFrame: collect() the LazyFrame first")
    if hasattr(frame, "__arrow_c_stream__"):
        return "arrow"
    raise TypeError(
        "morbus.score needs a pandas or polars DataFrame or an object exposing the Arrow "
        f"C stream interface (__arrow_c_stream__), not {type(frame).__name__}"
    )


def _pandas_fetch(frame: Any, names: List[str]):
    import pyarrow as pa

    def fetch(indices: List[int]):
        arrays = []
        for i in indices:
            series = frame.iloc[:, i]
            try:
                arrays.append(pa.array(series, from_pandas=True))
            except (pa.ArrowInvalid, pa.ArrowTypeError) as e:
                raise ValueError(
                    f"column '{names[i]}' (dtype {series.dtype}) cannot be read as Arrow data: {e}; "
                    "diagnosis columns must hold text (or be empty)"
                ) from None
        return pa.table(arrays, names=[f"c{k}" for k in range(len(arrays))])

    return fetch


def _polars_fetch(frame: Any):
    import polars as pl

    def fetch(indices: List[int]):
        # aliases: a column may be used twice (as diagnosis and id). A column
        # of dtype Null (no values at all) goes as all-null text: polars
        # exports it with a buffer that the Arrow C data interface does not
        # allow for that type, and all-null text reads as all missing.
        def one(k: int, i: int):
            c = pl.col(frame.columns[i])
            if frame.schema[frame.columns[i]] == pl.Null:
                c = c.cast(pl.String)
            return c.alias(f"c{k}")

        return frame.select([one(k, i) for k, i in enumerate(indices)])

    return fetch


def _arrow_fetch(table: Any):
    def fetch(indices: List[int]):
        return table.select(indices)

    return fetch


def _to_pandas(table: Any, index: Any = None):
    """Score columns as pandas: numpy dtypes, nullable ``Int64`` for whole-number
    columns that may be missing (``_age``)."""
    import pandas as pd
    import pyarrow as pa

    out = table.to_pandas()
    for field in table.schema:
        if pa.types.is_integer(field.type) and field.nullable:
            mapper = {field.type: pd.Int64Dtype()}.get
            out[field.name] = table.select([field.name]).to_pandas(types_mapper=mapper)[field.name]
    if index is not None:
        out.index = index
    return out


def score(
    frame: Any,
    *,
    dx: _Names,
    layout: str = "wide",
    id: Optional[str] = None,
    age: Optional[str] = None,
    index: Optional[_Names] = None,
    flags: bool = False,
    hierarchy: bool = True,
    lists: Union[None, str, "os.PathLike[str]", Lists] = None,
    dx_sep: Optional[str] = None,
    strict: bool = False,
    threads: Optional[int] = None,
    provenance: bool = False,
    date: Optional[str] = None,
    date_format: Optional[str] = None,
    lookback: Union[None, int, str, Dict[str, Union[int, str]]] = None,
    window: Optional[str] = None,
    episode: Optional[str] = None,
    exclude_primary: bool = False,
    primary: Optional[str] = None,
    poa: Optional[str] = None,
    poa_values: Union[str, Sequence[str]] = ("Y", "W", "1", "blank"),
    max_unreadable_dates: Union[int, float, str] = 1,
    edition: str = "any",
    keep: Optional[_Names] = None,
) -> Any:
    """Add comorbidity and frailty scores to an extract (``morbus score``).

    ``frame`` is a pandas DataFrame, a polars DataFrame, or anything exposing
    the Arrow C stream interface (a ``pyarrow.Table``, ...); the result is of
    the same kind (a ``pyarrow.Table`` for Arrow input).

    Wide layout (default): every input row and column, in order, plus the
    score columns the command line adds, with its names
    (``charlson_quan2011``, ``elixhauser_vanwalraven2009``,
    ``hfrs_gilbert2018``, ``hfrs_gilbert2018_band``, ...). Long layout
    (``layout="long"``, one code per row): one row per ``id`` in order of
    first appearance, the id column (with its dtype) then the scores.

    Options, as on the command line:

    - ``dx``: diagnosis columns, names and/or globs (``"dx*"``), a string
      (comma-separated) or a list.
    - ``id``: id column of a long extract. ``age``: age column (whole years;
      numbers or text) adding ``<index>_age`` columns for lists with age
      points.
    - ``index``: ``LIST[:WEIGHTING]`` specifications, a string
      (comma-separated) or a list; default
      ``charlson:quan2011,elixhauser:vanwalraven2009,hfrs:gilbert2018``.
    - ``flags``: add a 0/1 column ``<list>_<condition>`` per condition.
    - ``hierarchy=False``: switch the lists' hierarchies off.
    - ``lists``: a directory of code lists, or a :class:`Lists` from
      :func:`load_lists`, adding to or replacing the built-ins.
    - ``dx_sep``: split a diagnosis field holding several codes at this
      character. ``strict``: raise on the first invalid or unknown code or
      unreadable age instead of counting it.
    - ``edition``: ``"who"`` (WHO ICD-10 2019), ``"cm"`` (ICD-10-CM, April
      2026 release) or ``"any"`` (default: either). Every well-shaped code is
      looked up: one in neither the edition nor under one of its categories
      is *unknown* (e.g. ``I5O.9``, letter O for zero), one whose category
      is in the edition but not the code itself is *extended* (a national
      variant). Both still score by prefix; both are counted in the
      provenance (``codes.unknown``, ``codes.extended``, with the most
      frequent values) and the summary line; ``strict`` stops on unknown
      codes, not on extended ones. :func:`code_status` looks values up.
    - ``threads``: threads for the wide layout (default: one per core; the
      result does not depend on it).
    - ``provenance=True``: return ``(frame, provenance)``, where
      ``provenance`` is the dict that ``morbus score --provenance FILE``
      writes as JSON (tool and version; lists used with version, checksum,
      origin and source; indices; options; output columns; rows, codes read,
      invalid codes with the most frequent values, missing and unreadable
      ages), with ``input`` and ``output`` null, plus ``report``: the
      summary line the command line prints.

    Diagnosis columns must hold text: string, large string, string view or
    dictionary (categorical) of those; nulls are empty fields. A numeric
    diagnosis column is refused with a ``ValueError`` naming it, unless it
    holds only nulls (an empty column read from a file), which is empty.
    Ages may be numbers (NaN and null are missing) or text.

    Dated patient history, as ``morbus score --date --lookback ...``:

    - ``date``: episode date column: text (``date_format``, by default
      ``YYYY-MM-DD``, a time after it ignored), or dates and timestamps
      (Arrow date32/date64/timestamp, pandas ``datetime64``, polars
      ``Date``/``Datetime``; with a time zone, the local date).
    - ``lookback``: days (an ``int``) or ``"all"``: each episode is scored
      from its own codes and those of the same patient's (``id``) episodes
      dated within that many days before it, both ends inclusive (episodes of
      the same day count each other; later episodes never count). Needs
      ``id`` and ``date``. One window per list: ``"charlson=365,hfrs=730"``
      or ``{"charlson": 365, "hfrs": 730}`` (a bare number beside them, or
      the key ``"*"``, is the window of the lists not named; lists without
      a window are scored from the episode alone).
    - ``window``: ``"current-and-earlier"`` (the default) or
      ``"earlier-only"``: only episodes dated before the episode's own day
      count; its own codes and those of other episodes of the same day are
      left out.
    - ``episode`` (long layout): the column grouping code rows into episodes;
      the result has one row per episode in order of first appearance, with
      the ``id`` and ``episode`` columns, then the scores.
    - ``exclude_primary=True``: leave the primary diagnosis of the episode
      being scored out (wide: the first diagnosis column; long: the rows
      flagged by ``primary``, a column holding 1, y, yes, true, p or primary).
      It still counts when an earlier episode is in the window.
    - ``max_unreadable_dates``: the percentage of non-empty dates that may
      be unreadable (default 1); more raises ``ValueError`` naming the first
      unreadable values and the format tried.
    - ``poa``: present-on-admission column (long layout), or columns paired
      in order with the ``dx`` columns (wide layout: names or globs, e.g.
      ``"poa*"``; the counts must match); codes of the episode being scored
      count only when their indicator is one of ``poa_values`` (default
      ``("Y", "W", "1", "blank")``, case-insensitive; ``"blank"`` is an empty
      field), following the ICD-10-CM Official Guidelines for Coding and
      Reporting, Appendix I: Y, W and exempt codes (1 or blank) count, N and
      U do not; any other value is unrecognised (counted in the report; its
      code does not count; ``strict`` raises). Earlier episodes' codes count
      regardless.

    >>> import pandas as pd, morbus
    >>> wide = pd.DataFrame({"dx1": ["I21.9"], "dx2": ["I50.9"], "poa1": ["Y"], "poa2": ["N"]})
    >>> morbus.score(wide, dx="dx*", poa="poa*",
    ...              index="charlson:charlson1987")["charlson_charlson1987"].tolist()
    [1]

    >>> import pandas as pd, morbus
    >>> df = pd.DataFrame({
    ...     "patient": ["p1", "p1", "p2"],
    ...     "day": ["2024-01-10", "2024-03-01", "2024-03-01"],
    ...     "dx1": ["I21.9", "J18.9", "E11.9"],
    ... })
    >>> morbus.score(df, dx="dx1", id="patient", date="day", lookback=365,
    ...              index="charlson:charlson1987")["charlson_charlson1987"].tolist()
    [1, 1, 1]
    >>> morbus.score(df, dx="dx1", id="patient", date="day", lookback=365, exclude_primary=True,
    ...              index="charlson:charlson1987")["charlson_charlson1987"].tolist()
    [0, 1, 0]

    Errors: ``KeyError`` for a column that is not in the frame; ``ValueError``
    for everything else the command line reports as a usage error (exit 2),
    with its message, and for ``strict`` failures.

    >>> import pandas as pd, morbus
    >>> df = pd.DataFrame({"id": [1, 2], "dx1": ["I50.0", "R29.6"], "dx2": ["N18.5", "F05.9"]})
    >>> out, prov = morbus.score(df, dx="dx*", provenance=True)
    >>> out[["charlson_quan2011", "hfrs_gilbert2018", "hfrs_gilbert2018_band"]].values.tolist()
    [[3, 1.4, 'low'], [0, 6.8, 'intermediate']]
    >>> prov["codes"]["read"], prov["lists"][0]["name"]
    (4, 'charlson')
    """
    kind, frame, names, fetch = _history.frame_source(frame)
    if keep is not None and not isinstance(keep, (str, list, tuple)):
        raise TypeError("keep must be a column name or a list of column names")
    options = _options(
        dx=dx, layout=layout, id=id, age=age, index=index, flags=flags, hierarchy=hierarchy,
        dx_sep=dx_sep, strict=strict, threads=threads, date=date, date_format=date_format,
        lookback=lookback, window=window, episode=episode, exclude_primary=exclude_primary,
        primary=primary, poa=poa, poa_values=poa_values, max_unreadable_dates=max_unreadable_dates,
        edition=edition, keep=keep,
    )
    import pyarrow as pa

    scores_stream, first_stream, kept_stream, prov_json, report = _native.score(
        names, fetch, options, _catalogue(lists)
    )
    scores = pa.table(scores_stream)
    if first_stream is None:
        out = _attach(kind, frame, scores)
    else:
        first = pa.table(first_stream).column(0)
        kept = pa.table(kept_stream) if kept_stream is not None else None
        out = _history.score_long(kind, frame, names, options, first, kept, scores)
    if not provenance:
        return out
    prov = json.loads(prov_json)
    prov["report"] = report
    return out, prov


def _options(
    *,
    dx: _Names,
    layout: str = "wide",
    id: Optional[str] = None,
    age: Optional[str] = None,
    index: Optional[_Names] = None,
    flags: bool = False,
    hierarchy: bool = True,
    dx_sep: Optional[str] = None,
    strict: bool = False,
    threads: Optional[int] = None,
    date: Optional[str] = None,
    date_format: Optional[str] = None,
    lookback: Union[None, int, str, Dict[str, Union[int, str]]] = None,
    window: Optional[str] = None,
    episode: Optional[str] = None,
    exclude_primary: bool = False,
    primary: Optional[str] = None,
    poa: Optional[str] = None,
    poa_values: Union[str, Sequence[str]] = ("Y", "W", "1", "blank"),
    max_unreadable_dates: Union[int, float, str] = 1,
    edition: str = "any",
    keep: Optional[_Names] = None,
    label: Optional[str] = None,
) -> Dict[str, Any]:
    """The options of a call as the extension takes them (one dict for
    `score`, `explain` and `compare`); the library checks them with the
    command line's rules and messages."""
    dx_items = _as_list(dx, "dx")
    if dx_items is None:
        raise TypeError("dx must name the diagnosis columns")
    if not isinstance(layout, str):
        raise TypeError("layout must be 'wide' or 'long'")
    if dx_sep is not None and not isinstance(dx_sep, str):
        raise TypeError("dx_sep must be a one-character string")
    if threads is None:
        threads = 0
    elif isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
        raise ValueError(f"threads must be a positive whole number, not {threads!r}")
    if date_format is not None and not isinstance(date_format, str):
        raise TypeError("date_format must be a pattern string such as '%d/%m/%Y'")
    if window is not None and not isinstance(window, str):
        raise TypeError("window must be 'current-and-earlier' or 'earlier-only'")
    if not isinstance(edition, str):
        raise TypeError("edition must be 'who', 'cm' or 'any'")
    return dict(
        dx=dx_items,
        layout=layout,
        id=_optional_name(id, "id"),
        age=_optional_name(age, "age"),
        index=_as_list(index, "index"),
        flags=bool(flags),
        hierarchy=bool(hierarchy),
        dx_sep=dx_sep,
        strict=bool(strict),
        threads=threads,
        date=_optional_name(date, "date"),
        date_format=date_format,
        lookback=_history.lookback_text(lookback),
        window=window,
        episode=_optional_name(episode, "episode"),
        exclude_primary=bool(exclude_primary),
        primary=_optional_name(primary, "primary"),
        poa=_optional_name(poa, "poa"),
        poa_values=_history.poa_list(poa_values),
        max_unreadable_dates=_history.percent_text(max_unreadable_dates),
        edition=edition,
        keep=[k.strip() for item in (_as_list(keep, "keep") or []) for k in item.split(",") if k.strip()],
        label=_optional_name(label, "label"),
    )


def _polars(table: Any) -> Any:
    import polars as pl

    out = pl.from_arrow(table)
    assert isinstance(out, pl.DataFrame)
    return out


def _attach(kind: str, frame: Any, scores: Any) -> Any:
    """The input frame with the score columns after its own."""
    if kind == "pandas":
        import pandas as pd

        return pd.concat([frame, _to_pandas(scores, frame.index)], axis=1)
    if kind == "polars":
        return frame.hstack(_polars(scores).get_columns())
    table = frame
    for field, column in zip(scores.schema, scores.columns):
        table = table.append_column(field, column)
    return table
