"""``morbus.compare``: ``morbus compare`` on a data frame."""

from __future__ import annotations

import json
import os
from typing import Any, Dict, Optional, Sequence, Union

from . import _native

_Names = Union[str, Sequence[str]]


def _names(value: Optional[_Names]) -> list:
    if value is None:
        return []
    if isinstance(value, str):
        value = [value]
    return [n.strip() for v in value for n in v.split(",") if n.strip()]


def compare(
    frame: Any,
    *,
    dx: _Names,
    outcome: str,
    adjust: Optional[_Names] = None,
    adjust_cat: Optional[_Names] = None,
    adjust_spline: Optional[_Names] = None,
    by: Optional[str] = None,
    cluster: Optional[str] = None,
    min_expected: float = 5.0,
    overdispersion: Optional[str] = None,
    folds: Optional[int] = None,
    seed: int = 20261203,
    reference: Optional[str] = None,
    layout: str = "wide",
    id: Optional[str] = None,
    age: Optional[str] = None,
    index: Optional[_Names] = None,
    hierarchy: bool = True,
    lists: Any = None,
    dx_sep: Optional[str] = None,
    date: Optional[str] = None,
    date_format: Optional[str] = None,
    lookback: Union[None, int, str, Dict[str, Union[int, str]]] = None,
    window: Optional[str] = None,
    episode: Optional[str] = None,
    exclude_primary: bool = False,
    primary: Optional[str] = None,
    poa: Optional[str] = None,
    poa_values: Union[str, Sequence[str]] = ("Y", "W", "1", "blank"),
    threads: Optional[int] = None,
    report: Union[None, str, "os.PathLike[str]"] = None,
    text: bool = False,
    edition: str = "any",
) -> Any:
    """Compare index specifications on an outcome (``morbus compare``).

    Takes the command line's options under the same names (``adjust_cat``
    for ``--adjust-cat``, ``adjust_spline`` for ``--adjust-spline`` as
    ``"age:4"`` or a list of them, ``min_expected`` for ``--min-expected``,
    ``cluster`` for ``--cluster``) and
    returns the results as a ``dict`` in the layout of the command line's
    ``--json`` file (documented in the README), computed by the same library
    function on the same data, so the numbers are the command line's.
    ``report="page.html"`` also writes the HTML report; ``text=True``
    returns ``(dict, plain-text report)``.

    >>> import pandas as pd, morbus
    >>> df = pd.DataFrame({
    ...     "dx1": ["I21.9", "E11.9", None, "C78.0", "I50.0", None, "J44.9", "N18.5"],
    ...     "age": [81, 64, 50, 77, 90, 45, 70, 59],
    ...     "site": ["North", "North", "South", "South", "North", "South", "North", "South"],
    ...     "died": [1, 0, 0, 1, 1, 0, 0, 1],
    ... })
    >>> r = morbus.compare(df, dx="dx1", outcome="died", index="charlson:count",
    ...                    by="site", min_expected=0)
    >>> r["units"]["analysed"], r["providers"]["names"]
    (8, ['North', 'South'])
    >>> sum(r["providers"]["observed"])
    4
    >>> r = morbus.compare(df, dx="dx1", outcome="died", index="charlson:count",
    ...                    adjust_spline="age:3", cluster="site")
    >>> r["splines"][0]["terms"], r["clusters"]["clusters"]
    (['age', 'age_spline1'], 2)

    The frame's used columns reach the engine typed, as for
    ``morbus.score``: the outcome may hold whole numbers 0/1, numbers
    0.0/1.0 (NaN missing), true/false or text.

    >>> df["died"] = df["died"] == 1          # true/false: the same numbers
    >>> morbus.compare(df, dx="dx1", outcome="died", index="charlson:count",
    ...                by="site", min_expected=0)["units"]["events"]
    4

    Errors raise ``KeyError`` (a missing column) or ``ValueError`` with the
    command line's messages, naming the frame's 0-based rows.
    """
    from . import _catalogue, _history, _options

    options = _options(
        dx=dx, layout=layout, id=id, age=age, index=index, hierarchy=hierarchy, dx_sep=dx_sep,
        threads=threads, date=date, date_format=date_format, lookback=lookback, window=window,
        episode=episode, exclude_primary=exclude_primary, primary=primary, poa=poa,
        poa_values=poa_values, edition=edition,
    )
    # The used columns go to the engine typed, as for morbus.score.
    _, _, names, fetch = _history.frame_source(frame)
    try:
        js, table, html = _native.compare(
            names,
            fetch,
            options,
            outcome=outcome.strip(),
            adjust=_names(adjust),
            adjust_cat=_names(adjust_cat),
            adjust_spline=_names(adjust_spline),
            by=by.strip() if by else None,
            cluster=cluster.strip() if cluster else None,
            min_expected=float(min_expected),
            overdispersion=overdispersion,
            folds=folds,
            seed=int(seed),
            reference=reference,
            report=report is not None,
            lists=_catalogue(lists),
        )
    except ValueError as e:
        message = str(e)
        if " not found; columns in the input: " in message:
            raise KeyError(message) from None
        raise
    if report is not None:
        path = os.fspath(report)
        tmp = f"{path}.tmp-{os.getpid()}"
        try:
            with open(tmp, "w", encoding="utf-8") as f:
                f.write(html)
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, path)
        except BaseException:
            # A failed write (a full disk, an interrupt) leaves no partial
            # report behind and the earlier file, if any, untouched.
            if os.path.exists(tmp):
                os.remove(tmp)
            raise
    result: Dict[str, Any] = json.loads(js)
    return (result, table) if text else result
