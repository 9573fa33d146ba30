"""Dated patient history on frames (``morbus.score(..., date=, lookback=,
episode=, exclude_primary=, primary=, poa=)``) and :func:`explain`.

The engine is the library's patient-history reader, the one behind
``morbus score --lookback`` and ``morbus explain``: the extension writes the
columns a run needs (and only those) as delimited text, reads them with it,
and hands back typed Arrow columns. This module resolves the Python-side
options and puts the frame back together: id and episode columns are taken
from the frame itself (row of each episode's first record), so they keep
their dtypes.
"""

from __future__ import annotations

from typing import Any, List, Optional, Sequence, Tuple, Union

from . import _native

_Names = Union[str, Sequence[str]]

HISTORY_OPTIONS = ("date", "lookback", "episode", "exclude_primary", "primary", "poa")


def wants_history(date, lookback, episode, exclude_primary, primary, poa) -> bool:
    """Whether a call needs the patient-history reader."""
    return any(v is not None for v in (date, lookback, episode, primary, poa)) or bool(exclude_primary)


def lookback_text(lookback: Union[None, int, str]) -> Optional[str]:
    if lookback is None:
        return None
    if isinstance(lookback, bool):
        raise ValueError(f"lookback takes a whole number of days or 'all', not {lookback!r}")
    if isinstance(lookback, int):
        return str(lookback)
    if isinstance(lookback, str):
        return lookback
    raise TypeError(f"lookback must be a whole number of days or 'all', not {type(lookback).__name__}")


def poa_list(poa_values: Union[str, Sequence[str]]) -> List[str]:
    if isinstance(poa_values, str):
        return [poa_values]
    try:
        items = list(poa_values)
    except TypeError:
        raise TypeError("poa_values must be a string or a list of strings") from None
    if not all(isinstance(v, str) for v in items):
        raise TypeError("poa_values must be a string or a list of strings")
    return items


def percent_text(value: Union[int, float, str]) -> str:
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise TypeError(f"max_unreadable_dates must be a percentage (a number), not {value!r}")
    return str(value)


def local_times(kind: str, fetch):
    """`fetch` with timestamps that carry a time zone turned into local
    wall-clock times (the episode date is the local date)."""
    if kind == "polars":
        import polars as pl

        def polars_fetch(indices):
            out = fetch(indices)
            for name, dtype in out.schema.items():
                if isinstance(dtype, pl.Datetime) and dtype.time_zone is not None:
                    out = out.with_columns(pl.col(name).dt.replace_time_zone(None))
            return out

        return polars_fetch

    import pyarrow as pa
    import pyarrow.compute as pc

    def arrow_fetch(indices):
        out = fetch(indices)
        for k, field in enumerate(out.schema):
            if pa.types.is_timestamp(field.type) and field.type.tz is not None:
                out = out.set_column(k, field.name, pc.local_timestamp(out.column(k)))
        return out

    return arrow_fetch


def native_options(
    *,
    date,
    date_format,
    lookback,
    episode,
    exclude_primary,
    primary,
    poa,
    poa_values,
    max_unreadable_dates=1,
) -> dict:
    from . import _optional_name

    if date_format is not None and not isinstance(date_format, str):
        raise TypeError("date_format must be a pattern string such as '%d/%m/%Y'")
    return dict(
        date=_optional_name(date, "date"),
        date_format=date_format,
        lookback=lookback_text(lookback),
        episode=_optional_name(episode, "episode"),
        exclude_primary=bool(exclude_primary),
        primary=_optional_name(primary, "primary"),
        poa=_optional_name(poa, "poa"),
        poa_values=poa_list(poa_values),
        max_unreadable_dates=percent_text(max_unreadable_dates),
    )


def frame_source(frame: Any) -> Tuple[str, Any, List[str], Any]:
    """(kind, frame, column names, fetch) of a frame, as `morbus.score` reads it."""
    from . import _arrow_fetch, _kind, _pandas_fetch, _polars_fetch

    kind = _kind(frame)
    if kind == "pandas":
        names = [str(c) for c in frame.columns]
        fetch = _pandas_fetch(frame, names)
    elif kind == "polars":
        names = list(frame.columns)
        fetch = _polars_fetch(frame)
    else:
        import pyarrow as pa

        frame = frame if isinstance(frame, pa.Table) else pa.table(frame)
        names = list(frame.column_names)
        fetch = _arrow_fetch(frame)
    return kind, frame, names, local_times(kind, fetch)


def take_columns(kind: str, frame: Any, columns: List[int], rows: Any) -> Any:
    """Columns `columns` of `frame` at (0-based) `rows`, as a frame of the
    same kind with a fresh index."""
    if kind == "pandas":
        return frame.iloc[rows.to_numpy(), columns].reset_index(drop=True)
    if kind == "polars":
        import polars as pl

        return pl.DataFrame([frame.get_column(frame.columns[c]).gather(rows.to_numpy()) for c in columns])
    return frame.select(columns).take(rows)


def hstack(kind: str, left: Any, right_table: Any) -> Any:
    """`left` (a frame of `kind`) with the columns of an Arrow table after
    its own."""
    from . import _to_pandas

    if kind == "pandas":
        import pandas as pd

        right = _to_pandas(right_table)
        if "source_date" in right_table.column_names:
            right["source_date"] = right_table.select(["source_date"]).to_pandas(date_as_object=False)[
                "source_date"
            ]
        return pd.concat([left, right], axis=1)
    if kind == "polars":
        import polars as pl

        right = pl.from_arrow(right_table)
        if left.width == 0:
            # explain without id: no unit columns (an empty polars frame has
            # height 0 and cannot take columns of another height)
            return right
        return left.hstack(right.get_columns())
    if left.num_columns == 0:
        return right_table
    table = left
    for field, column in zip(right_table.schema, right_table.columns):
        table = table.append_column(field, column)
    return table


def unit_columns(names: List[str], id: Optional[str], episode: Optional[str]) -> List[int]:
    return [names.index(c) for c in (id, episode) if c is not None]


def score_long(kind: str, frame: Any, names: List[str], id: str, episode: Optional[str], first: Any, scores: Any) -> Any:
    """One row per episode: id (and episode) from the row where the episode
    first appears, then the scores."""
    units = take_columns(kind, frame, unit_columns(names, id, episode), first)
    return hstack(kind, units, scores)


def explain(
    frame: Any,
    *,
    dx: _Names,
    layout: str = "wide",
    id: Optional[str] = None,
    age: Optional[str] = None,
    index: Optional[_Names] = None,
    hierarchy: bool = True,
    lists: Any = None,
    dx_sep: Optional[str] = None,
    strict: bool = False,
    threads: Optional[int] = None,
    date: Optional[str] = None,
    date_format: Optional[str] = None,
    lookback: Union[None, int, str] = None,
    episode: Optional[str] = None,
    exclude_primary: bool = False,
    primary: Optional[str] = None,
    poa: Optional[str] = None,
    poa_values: Union[str, Sequence[str]] = ("Y", "W", "1", "blank"),
    max_unreadable_dates: Union[int, float, str] = 1,
    report: bool = False,
    edition: str = "any",
) -> Any:
    """Show, code by code, how each episode's scores come about (``morbus explain``).

    Takes the options of :func:`score` (without ``flags`` and
    ``provenance``) and returns a frame of the same kind with the columns of
    ``morbus explain``: the ``id`` and ``episode`` columns when given (values
    and dtypes from the frame), then

    - ``row``: the episode, as the 1-based data row of its first record (the
      command line's numbering: frame position + 1);
    - ``index``: ``list:weighting``;
    - ``source_row``, ``source_date``: the episode the code came from (the
      episode itself or, with ``lookback``, an earlier one of the patient;
      ``source_date`` is a date);
    - ``code_as_written``, ``code``, ``condition``, ``weight``;
    - ``status``: ``counted``, ``repeated`` (another code already counted
      the condition), ``superseded_by:<condition>`` (hierarchy),
      ``excluded:primary_diagnosis`` or
      ``excluded:not_present_on_admission``; and one ``total`` row per
      episode and index (``weight`` is the score; ``total_with_age:<age>``
      adds the age points with ``age=``), whose code columns are null.

    ``weight`` is ``int64`` when every weighting has whole-number points,
    else ``float64``. ``report=True`` returns ``(frame, summary line)``;
    the summary line counts invalid, unknown and extended codes as
    :func:`score` describes (``edition``).

    >>> import pandas as pd, morbus
    >>> df = pd.DataFrame({
    ...     "patient": ["p1", "p1"],
    ...     "day": ["2024-01-10", "2024-03-01"],
    ...     "dx1": ["I21.9", "J18.9"],
    ...     "dx2": [None, "E11.9"],
    ... })
    >>> out = morbus.explain(df, dx="dx*", id="patient", date="day", lookback=365,
    ...                      index="charlson:charlson1987")
    >>> codes = out[out["status"] != "total"]
    >>> codes[["row", "source_row", "condition", "status"]].values.tolist()
    [[1, 1, 'myocardial_infarction', 'counted'], [2, 2, 'diabetes_without_chronic_complication', 'counted'], [2, 1, 'myocardial_infarction', 'counted']]
    >>> out.loc[out["status"] == "total", "weight"].tolist()
    [1, 2]
    """
    from . import _as_list, _catalogue, _optional_name

    kind, frame, names, fetch = frame_source(frame)
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
    opts = native_options(
        date=date,
        date_format=date_format,
        lookback=lookback,
        episode=episode,
        exclude_primary=exclude_primary,
        primary=primary,
        poa=poa,
        poa_values=poa_values,
        max_unreadable_dates=max_unreadable_dates,
    )
    stream, summary = _native.explain(
        names,
        fetch,
        dx=dx_items,
        layout=layout,
        id=_optional_name(id, "id"),
        age=_optional_name(age, "age"),
        index=_as_list(index, "index"),
        hierarchy=bool(hierarchy),
        lists=_catalogue(lists),
        dx_sep=dx_sep,
        strict=bool(strict),
        threads=threads,
        edition=edition,
        **opts,
    )
    import pyarrow as pa
    import pyarrow.compute as pc

    table = pa.table(stream)
    rows = pc.subtract(table.column("row"), 1)
    units = take_columns(kind, frame, unit_columns(names, id, opts["episode"]), rows)
    out = hstack(kind, units, table)
    return (out, summary) if report else out
