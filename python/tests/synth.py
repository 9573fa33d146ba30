"""Small seeded synthetic extracts for the tests (invented data, no patients).

Codes are drawn from the built-in code lists (so that every index has
something to score), from codes outside them, and from the kinds of mess real
extracts hold: lower case, missing or extra dots, spaces, an ``X`` filler,
empty fields and values that are not codes at all.
"""

from __future__ import annotations

import csv
import random
import re
from pathlib import Path
from typing import List

REPO = Path(__file__).resolve().parents[2]

OUTSIDE = ["J18.9", "K35.8", "Z00.0", "S72.0", "A09.9", "R10.4", "H25.9", "M17.1", "O80", "Z38.0"]
NOT_CODES = ["N/A", "??", "123", "unknown", "I", "-", "ZZZZZZZZZ9", "1I10"]


def list_codes() -> List[str]:
    """One code per end of every `code` entry of the built-in lists, with a
    subcategory digit added to some."""
    out = []
    for path in sorted((REPO / "code-lists").glob("*.tsv")):
        for line in path.read_text(encoding="utf-8").splitlines():
            fields = [f.strip() for f in line.split("\t")]
            if fields[0] != "code":
                continue
            for end in re.split("[-\u2013]", fields[1]):
                code = end.upper().replace(".X", "").replace(".", "")
                out.append(code)
    return out


def messy(rng: random.Random, code: str) -> str:
    """A code written the way extracts write it."""
    if len(code) == 3 and rng.random() < 0.5:
        code += str(rng.randrange(10))
    dotted = code[:3] + "." + code[3:] if len(code) > 3 else code
    r = rng.random()
    if r < 0.45:
        return dotted
    if r < 0.7:
        return code
    if r < 0.8:
        return dotted.lower()
    if r < 0.87:
        return " " + dotted + " "
    if r < 0.93 and len(code) == 3:
        return code + "X"
    return code + "-" if len(code) == 3 else dotted


def pick(rng: random.Random, pool: List[str]) -> str:
    r = rng.random()
    if r < 0.04:
        return rng.choice(NOT_CODES)
    if r < 0.2:
        return messy(rng, rng.choice(OUTSIDE).replace(".", ""))
    return messy(rng, rng.choice(pool))


def ages(rng: random.Random) -> str:
    r = rng.random()
    if r < 0.05:
        return ""
    if r < 0.07:
        return rng.choice(["unknown", "151", "-3", "80 years"])
    if r < 0.12:
        return f"{rng.uniform(18, 99):.1f}"
    return str(rng.randint(18, 104))


def write_episodes(path: Path, rows: int = 2500, dx_columns: int = 10, seed: int = 20261201) -> Path:
    """Wide extract: episode_id, patient_id, age, sex, dx1..dxN, codes_list
    (several codes separated by ';')."""
    rng = random.Random(seed)
    pool = list_codes()
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(
            ["episode_id", "patient_id", "age", "sex"]
            + [f"dx{i}" for i in range(1, dx_columns + 1)]
            + ["codes_list"]
        )
        for e in range(rows):
            n = min(dx_columns, int(rng.expovariate(1 / 3.0)))
            dx = [pick(rng, pool) for _ in range(n)] + [""] * (dx_columns - n)
            if n and rng.random() < 0.1:
                dx[rng.randrange(n)] = ""
            multi = ";".join(pick(rng, pool) for _ in range(rng.randrange(0, 5)))
            w.writerow(
                [f"E{e:06d}", f"P{rng.randrange(rows // 3):05d}", ages(rng), rng.choice("FMU")]
                + dx
                + [multi]
            )
    return path


def write_long(path: Path, rows: int = 4000, seed: int = 7) -> Path:
    """Long extract: patient_id, age, code (one code per row); a patient's
    rows are not contiguous."""
    rng = random.Random(seed)
    pool = list_codes()
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["patient_id", "age", "code"])
        for _ in range(rows):
            w.writerow([f"P{rng.randrange(rows // 6):04d}", ages(rng), pick(rng, pool)])
    return path
