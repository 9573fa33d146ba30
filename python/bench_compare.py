"""Speed benchmark (not a test): ``morbus.compare`` on a pyarrow table read
from a Parquet file (the benchmark extract of ``benches/run.sh``), with the
six index specifications of the command line's ``compare`` scenario.

    python python/bench_compare.py --parquet bench-data/wide-1000000.parquet [--repeat 3]

Build the extension in release mode first (``MORBUS_RELEASE=1 bash
python/run-tests.sh -k nothing`` or ``maturin develop --release`` in
python/). Prints the best time of ``--repeat`` calls; reading the file is
not timed.
"""

from __future__ import annotations

import argparse
import time

import pyarrow.parquet as pq

import morbus

SPECS = (
    "charlson:charlson1987,charlson:quan2011,charlson:count,"
    "elixhauser:vanwalraven2009,elixhauser:count,hfrs:gilbert2018"
)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--parquet", required=True)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    table = pq.read_table(a.parquet)
    best = None
    for _ in range(a.repeat):
        t0 = time.perf_counter()
        r = morbus.compare(table, dx="dx*", outcome="died_within_30_days", index=SPECS)
        t = time.perf_counter() - t0
        best = t if best is None else min(best, t)
    print(
        f"morbus.compare on a pyarrow table of {table.num_rows} rows: best of {a.repeat}: "
        f"{best:.2f} s ({r['units']['analysed']} units analysed)"
    )


if __name__ == "__main__":
    main()
