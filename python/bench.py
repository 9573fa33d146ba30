"""Speed benchmark (not a test): score a synthetic pandas DataFrame with the
three default indices and report the time.

    python python/bench.py [--rows 1000000] [--dx 20] [--repeat 3] [--threads N]
                           [--data synth|numpy|full|PATH.csv]
                           [--lookback DAYS [--cli PATH]]

Build the extension in release mode first (`maturin develop --release` in
python/, or `pip install ./python`). The data are invented:

- `synth` (default when cargo is there): the repository's seeded generator
  (`cargo run -p morbus-bench --release --bin synth`), written once to a CSV
  under the system's temporary directory and read with `pandas.read_csv`;
- `numpy`: codes drawn with numpy from the built-in lists and from codes
  outside them, dotted or not, a few invalid values, most episodes carrying a
  handful of codes (geometric, mean 6);
- `full`: the same codes with all 20 diagnosis fields filled;
- a path: any wide CSV with `dx*` columns.

`--lookback DAYS` scores with the patient history (`id="patient_id"`,
`date="admission_date"`: the `synth` data or a path with those columns);
with `--cli PATH` (a release build of the command line) the same rows are
also scored by `PATH score FILE ... --lookback DAYS -q -o OUT` in the same
session, alternating with the Python runs, and the ratio of the best times is
printed.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import tempfile
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


def synth_csv(rows: int, dx: int) -> Path:
    """The repository generator's extract, made once."""
    path = Path(tempfile.gettempdir()) / f"morbus-bench-{rows}x{dx}.csv"
    if not path.exists():
        part = path.with_suffix(".part")
        subprocess.run(
            ["cargo", "run", "--quiet", "-p", "morbus-bench", "--release", "--bin", "synth", "--",
             "--episodes", str(rows), "--fields", str(dx), "--quiet", "--output", str(part)],
            cwd=REPO, check=True,
        )
        part.rename(path)
    return path


def frame(rows: int, dx: int, seed: int = 1, full: bool = False) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    pool = catalogue()
    # codes per episode: geometric, mean about 6, at most `dx` (or all `dx`)
    n = np.full(rows, dx) if full else np.minimum(rng.geometric(1 / 6, size=rows), dx)
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
    ap.add_argument("--threads", type=int, default=None, help="threads= of morbus.score (default: one per core)")
    ap.add_argument("--data", default="synth" if shutil.which("cargo") else "numpy")
    ap.add_argument("--lookback", default=None, help="lookback= (days or 'all'): score with the patient history")
    ap.add_argument("--cli", default=None, help="the command line to compare with (needs --lookback and a CSV)")
    a = ap.parse_args()
    print(f"morbus from {Path(morbus.__file__).parent}")
    if morbus._native.debug_build():
        print("warning: this is a debug build of the extension; build with --release to measure speed")
    t0 = time.perf_counter()
    path = None
    if a.cli is not None and (a.lookback is None or a.data in ("numpy", "full")):
        ap.error("--cli needs --lookback and CSV data (synth or a path)")
    if a.data in ("numpy", "full"):
        df = frame(a.rows, a.dx, full=a.data == "full")
    else:
        path = synth_csv(a.rows, a.dx) if a.data == "synth" else Path(a.data)
        df = pd.read_csv(path)
    filled = int(df.filter(like="dx").notna().to_numpy().sum())
    print(f"data ({a.data}): {len(df):,} rows x {a.dx} diagnosis columns ({filled:,} non-empty fields, dtype {df['dx1'].dtype}), made in {time.perf_counter() - t0:.1f} s")
    history = {}
    if a.lookback is not None:
        history = dict(id="patient_id", date="admission_date",
                       lookback=int(a.lookback) if a.lookback.isdigit() else a.lookback)
    times = []
    cpu = []
    cli_times = []
    for _ in range(a.repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        out, prov = morbus.score(df, dx="dx*", threads=a.threads, provenance=True, **history)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        if a.cli is not None:
            out_path = Path(tempfile.gettempdir()) / f"morbus-bench-cli-{os.getpid()}.csv"
            args = [a.cli, "score", str(path), "--dx", "dx*", "-q", "-o", str(out_path)]
            args += ["--id", "patient_id", "--date", "admission_date", "--lookback", str(a.lookback)]
            if a.threads:
                args += ["--threads", str(a.threads)]
            t0 = time.perf_counter()
            subprocess.run(args, check=True)
            cli_times.append(time.perf_counter() - t0)
            out_path.unlink()
    print(f"morbus {morbus.__version__}: {', '.join(i['spec'] for i in prov['indices'])}, threads={a.threads or 'one per core'}")
    print(prov["report"])
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"score(): best {min(times):.2f} s, all {', '.join(f'{t:.2f}' for t in times)} s "
          f"(CPU time {', '.join(f'{t:.2f}' for t in cpu)} s; load average {load:.1f} on {os.cpu_count()} cores)")
    if cli_times:
        print(f"command line: best {min(cli_times):.2f} s, all {', '.join(f'{t:.2f}' for t in cli_times)} s; "
              f"Python / command line: {min(times) / min(cli_times):.2f}")
    assert len(out) == len(df)


if __name__ == "__main__":
    main()
