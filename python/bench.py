"""Speed benchmark (not a test): score a synthetic pandas DataFrame with the
three default indices and report the time.

    python python/bench.py [--rows 1000000] [--dx 20] [--repeat 3]

Build the extension in release mode first (`maturin develop --release` in
python/, or `pip install ./python`). The data are invented: codes drawn with
numpy from the built-in lists and from codes outside them, written with or
without the dot, a few invalid values, and a realistic share of empty
diagnosis fields (most episodes carry a handful of codes, few fill all 20).
"""

from __future__ import annotations

import argparse
import re
import time
from pathlib import Path

import numpy as np
import pandas as pd

import morbus

REPO = Path(__file__).resolve().parents[1]


def catalogue() -> np.ndarray:
    codes = set()
    for path in sorted((REPO / "code-lists").glob("*.tsv")):
        for line in path.read_text(encoding="utf-8").splitlines():
            f = line.split("\t")
            if f[0] != "code":
                continue
            for end in re.split("[-\u2013]", f[1]):
                c = end.strip().upper().replace(".X", "").replace(".", "")
                codes.add(c)
                if len(c) == 3:
                    codes.update(c + str(d) for d in range(10))
    outside = ["J18.9", "K35.8", "Z00.0", "S72.0", "A09.9", "R10.4", "H25.9", "M17.1", "O80", "Z38.0"]
    dotted = [c[:3] + "." + c[3:] if len(c) > 3 else c for c in sorted(codes)]
    return np.array(dotted + outside * 40 + ["N/A", "??"], dtype=object)


def frame(rows: int, dx: int, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    pool = catalogue()
    # codes per episode: geometric, mean about 6, at most `dx`
    n = np.minimum(rng.geometric(1 / 6, size=rows), dx)
    data = {
        "episode_id": np.arange(rows, dtype=np.int64),
        "age": rng.integers(18, 100, size=rows),
    }
    for k in range(dx):
        col = rng.choice(pool, size=rows)
        col[n <= k] = None
        data[f"dx{k + 1}"] = pd.array(col, dtype="str")
    return pd.DataFrame(data)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--dx", type=int, default=20)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    t0 = time.perf_counter()
    df = frame(a.rows, a.dx)
    filled = int(df.filter(like="dx").notna().to_numpy().sum())
    print(f"data: {a.rows:,} rows x {a.dx} diagnosis columns ({filled:,} codes, dtype {df['dx1'].dtype}), made in {time.perf_counter() - t0:.1f} s")
    times = []
    for _ in range(a.repeat):
        t0 = time.perf_counter()
        out, prov = morbus.score(df, dx="dx*", provenance=True)
        times.append(time.perf_counter() - t0)
    s = prov["summary"]
    print(f"morbus {morbus.__version__}: {', '.join(prov['indices'])}")
    print(f"summary: {s['rows_read']:,} rows, {s['codes_read']:,} codes read, {s['invalid_codes']:,} invalid")
    print(f"score(): best {min(times):.2f} s, all {', '.join(f'{t:.2f}' for t in times)} s")
    assert len(out) == a.rows


if __name__ == "__main__":
    main()
