"""Frame handling shared by :func:`morbus.score` and :func:`explain`:
reading a pandas, polars or Arrow frame's columns for the extension, and
putting results back together.

The engine is the library's own (``morbus::frame``): the extension shows it
the columns a run uses as typed Arrow arrays (text in place, numbers, dates),
and it scores them, with the patient history when asked, without any text in
between. Id, episode and kept columns of the long layout (and ``explain``'s
unit and label columns) are taken from the frame itself at the rows the
engine names, so they keep their dtypes.
"""

from __future__ import annotations

from typing import Any, Dict, List, Optional, Sequence, Tuple, Union

from . import _native

_Names = Union[str, Sequence[str]]


def _days_text(days: Any, what: str) -> str:
    if isinstance(days, bool):
        raise ValueError(f"{what} takes a whole number of days or 'all', not {days!r}")
    if isinstance(days, int):
        return str(days)
    if isinstance(days, str):
        return days
    raise TypeError(f"{what} must be a whole number of days or 'all', not {type(days).__name__}")


def lookback_text(lookback: Union[None, int, str, Dict[str, Union[int, str]]]) -> Optional[str]:
    """The command line's ``--lookback`` text of a ``lookback=`` value: days,
    ``"all"``, ``"charlson=365,hfrs=730"``, or a dict of list name to days
    (key ``None`` or ``"*"``: every list not named)."""
    if lookback is None:
        return None
    if isinstance(lookback, dict):
        parts = []
        for name, days in lookback.items():
            text = _days_text(days, "lookback")
            if name is None or name == "*":
                parts.insert(0, text)
            elif isinstance(name, str):
                parts.append(f"{name}={text}")
            else:
                raise TypeError("lookback's keys must be list names")
        return ",".join(parts)
    return _days_text(lookback, "lookback")


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
    """Columns `columns` of `frame` at (0-based) `rows` (an Arrow integer
    array; a null row gives missing values), as a frame of the same kind
    with a fresh index."""
    if kind == "pandas":
        import pyarrow.compute as pc

        if rows.null_count == 0:
            return frame.iloc[rows.to_numpy(), columns].reset_index(drop=True)
        missing = rows.is_null().to_numpy(zero_copy_only=False)
        out = frame.iloc[pc.fill_null(rows, 0).to_numpy(), columns].reset_index(drop=True)
        for name in out.columns:
            out[name] = out[name].where(~missing)
        return out
    if kind == "polars":
        import polars as pl

        index = pl.Series(rows)
        return pl.DataFrame([frame.get_column(frame.columns[c]).gather(index) for c in columns])
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


def hstack_all(kind: str, frames: List[Any]) -> Any:
    """Frames of one kind and height side by side."""
    if kind == "pandas":
        import pandas as pd

        return pd.concat(frames, axis=1)
    if kind == "polars":
        import polars as pl

        return pl.concat(frames, how="horizontal")
    import pyarrow as pa

    fields = [f for t in frames for f in t.schema]
    return pa.table([c for t in frames for c in t.columns], schema=pa.schema(fields))


def score_long(kind: str, frame: Any, names: List[str], options: Dict[str, Any], first: Any, kept: Any,
               scores: Any) -> Any:
    """One row per unit: the id (and episode) from the row where the unit
    first appears, the kept columns (``keep``) from the row the engine
    names for each (the unit's first non-empty value), then the scores."""
    units = take_columns(kind, frame, unit_columns(names, options["id"], options["episode"]), first)
    if kept is not None:
        parts = [units]
        for k, name in enumerate(options["keep"]):
            parts.append(take_columns(kind, frame, [names.index(name)], kept.column(k)))
        units = hstack_all(kind, parts)
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
    lookback: Union[None, int, str, Dict[str, Union[int, str]]] = None,
    window: Optional[str] = None,
    episode: Optional[str] = None,
    exclude_primary: bool = False,
    primary: Optional[str] = None,
    poa: Optional[str] = None,
    poa_values: Union[str, Sequence[str]] = ("Y", "W", "1", "blank"),
    max_unreadable_dates: Union[int, float, str] = 1,
    report: bool = False,
    edition: str = "any",
    label: Optional[str] = None,
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
      ``excluded:primary_diagnosis``,
      ``excluded:not_present_on_admission`` or ``excluded:current_episode``
      (``window="earlier-only"``); and one ``total`` row per
      episode and index (``weight`` is the score; ``total_with_age:<age>``
      adds the age points with ``age=``), whose code columns are null;
    - ``age_points``: on ``total_with_age`` rows, the age points added
      (null elsewhere).

    ``weight`` and ``age_points`` are ``int64`` when every weighting has
    whole-number points, else ``float64``. ``report=True`` returns ``(frame, summary line)``;
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
    from . import _catalogue, _options

    kind, frame, names, fetch = frame_source(frame)
    options = _options(
        dx=dx, layout=layout, id=id, age=age, index=index, hierarchy=hierarchy, dx_sep=dx_sep,
        strict=strict, threads=threads, date=date, date_format=date_format, lookback=lookback,
        window=window, episode=episode, exclude_primary=exclude_primary, primary=primary, poa=poa,
        poa_values=poa_values, max_unreadable_dates=max_unreadable_dates, edition=edition, label=label,
    )
    stream, label_stream, summary = _native.explain(names, fetch, options, _catalogue(lists))
    import pyarrow as pa
    import pyarrow.compute as pc

    table = pa.table(stream)
    rows = pc.subtract(table.column("row"), 1)
    units = take_columns(kind, frame, unit_columns(names, options["id"], options["episode"]), rows)
    if label_stream is not None:
        labels = take_columns(kind, frame, [names.index(options["label"])], pa.table(label_stream).column(0))
        units = hstack_all(kind, [units, labels]) if units_width(kind, units) else labels
    out = hstack(kind, units, table)
    return (out, summary) if report else out


def units_width(kind: str, frame: Any) -> int:
    if kind == "pandas":
        return frame.shape[1]
    if kind == "polars":
        return frame.width
    return frame.num_columns
