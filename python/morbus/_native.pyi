"""Type stubs of the compiled extension `morbus._native` (see `morbus` for the
public API)."""

from pathlib import Path
from typing import Any, Callable, Dict, List, Optional, Sequence, Tuple, TypedDict


class Lists:
    """A set of code lists: the built-ins plus the lists of a directory.

    Made by `morbus.load_lists(path)`; pass it as `lists=`.
    """

    @property
    def notes(self) -> List[str]:
        """Warnings of the loaded lists and which built-ins they replaced."""
    @property
    def path(self) -> Optional[Path]:
        """The directory the lists were loaded from (None: built-ins only)."""
    @property
    def names(self) -> List[str]:
        """Names of the lists, in catalogue order."""

class ArrowStream:
    """An Arrow C stream (one use) of score columns: `pyarrow.table(stream)`."""

    def __arrow_c_stream__(self, requested_schema: Optional[object] = None) -> object: ...

def load_lists(path: str) -> Lists: ...
def builtin_lists() -> Lists: ...
def list_table(lists: Lists) -> List[Dict[str, Any]]: ...
class Options(TypedDict):
    """The options of a call, as `morbus._options` builds them (the same
    dict for `score`, `explain` and `compare`)."""

    dx: List[str]
    layout: str
    id: Optional[str]
    age: Optional[str]
    index: Optional[List[str]]
    flags: bool
    hierarchy: bool
    dx_sep: Optional[str]
    strict: bool
    threads: int
    date: Optional[str]
    date_format: Optional[str]
    lookback: Optional[str]
    window: Optional[str]
    episode: Optional[str]
    exclude_primary: bool
    primary: Optional[str]
    poa: Optional[str]
    poa_values: List[str]
    max_unreadable_dates: Optional[str]
    edition: str
    keep: List[str]
    label: Optional[str]

def score(
    names: Sequence[str],
    fetch: Callable[[List[int]], Any],
    options: Options,
    lists: Optional[Lists] = None,
) -> Tuple[ArrowStream, Optional[ArrowStream], Optional[ArrowStream], str, str]:
    """`morbus.score` on a frame (`fetch(indices)` gives the columns the run
    reads): (scores; long layout: per output row the 0-based frame row where
    its unit first appears; with `keep`: per kept column the frame row whose
    value each unit carries, null for none; provenance JSON; summary line)."""
def explain(
    names: Sequence[str],
    fetch: Callable[[List[int]], Any],
    options: Options,
    lists: Optional[Lists] = None,
) -> Tuple[ArrowStream, Optional[ArrowStream], str]:
    """`morbus explain` on a frame: (the columns from `row` on; with `label`:
    per record the 0-based frame row of its episode's label value; summary
    line)."""
def compare(
    names: Sequence[str],
    fetch: Callable[[List[int]], Any],
    options: Options,
    *,
    outcome: str,
    adjust: Sequence[str],
    adjust_cat: Sequence[str],
    adjust_spline: Sequence[str],
    by: Optional[str],
    cluster: Optional[str],
    min_expected: float,
    overdispersion: Optional[str],
    folds: Optional[int],
    seed: int,
    reference: Optional[str],
    report: bool,
    lists: Optional[Lists] = None,
) -> Tuple[str, str, Optional[str]]:
    """`morbus compare` over a frame's columns (`names`, `fetch` as for
    `score`; the used columns go to the engine typed): (the --json text, the
    plain-text report, the HTML report when asked)."""
def code_status(values: Sequence[str], edition: str = ...) -> List[str]:
    """Per value: "known", "extended", "unknown", "invalid" or "empty"."""
def version() -> str: ...
def debug_build() -> bool: ...
