"""Benchmark of `morbus sql` on DuckDB (not a test; figures go into the
README with this command).

On the 1,000,000-episode wide benchmark extract (the one `benches/run.sh`
writes: `synth --episodes 1000000 --patients 300000 --fields 20 --seed 11`),
loaded into an in-memory DuckDB table as text, it times, best of RUNS:

1. the generated script (`morbus sql --dialect duckdb`, the 3 default
   indices, `--create table`), the query alone (the list tables are created
   before the clock starts);
2. a hand-written, straightforward SQL of the same job over the same list
   tables: the 20 diagnosis columns unpivoted with UNION ALL, codes read
   with upper/trim/replace of dots only (fewer rules than morbus's), joined
   to the prefix table once per prefix length, the hierarchy as NOT EXISTS,
   weights summed and pivoted, the frailty band as a CASE;
3. `morbus score` on the same extract as CSV (release build), and, for
   context, DuckDB's export of the table to CSV and its load from CSV.

The 730-day lookback (`--id patient_id --date admission_date --lookback
730`) is timed too, generated SQL against `morbus score`.

    python benches/sql.py            # needs the duckdb package (python/.venv has it)
    RUNS=1 python benches/sql.py

Run it on a quiet machine: DuckDB uses every core.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import duckdb

REPO = Path(__file__).resolve().parents[1]
RUNS = int(os.environ.get("RUNS", "3"))
N = int(os.environ.get("EPISODES", "1000000"))
DATA = REPO / os.environ.get("DATA", "bench-data")
BIN = REPO / "target" / "release"
DX = [f"dx{i}" for i in range(1, 21)]


def sh(*args: str) -> str:
    p = subprocess.run(args, capture_output=True, text=True)
    if p.returncode != 0:
        sys.exit(f"failed: {' '.join(args)}\n{p.stderr}")
    return p.stdout


def best(f) -> float:
    times = []
    for _ in range(RUNS):
        t = time.perf_counter()
        f()
        times.append(time.perf_counter() - t)
    return min(times)


def split_script(script: str):
    """(the list tables' statements, the CREATE TABLE ... AS query)."""
    head, rest = script.split("\n-- The scores.\n", 1)
    query = rest.split("\n-- The list tables are no longer needed.\n", 1)[0]
    return head, query


def hand_written(con) -> str:
    lengths = [r[0] for r in con.execute("SELECT DISTINCT length(prefix) FROM morbus_code_prefixes ORDER BY 1").fetchall()]
    codes = "\n  UNION ALL\n  ".join(
        f"SELECT episode_id, upper(replace(trim({c}), '.', '')) AS code FROM episodes WHERE {c} IS NOT NULL AND {c} <> ''"
        for c in DX
    )
    matched = "\n  UNION\n  ".join(
        f"SELECT c.episode_id, p.list_name, p.condition_key FROM codes c JOIN morbus_code_prefixes p ON p.prefix = left(c.code, {n})"
        for n in lengths
    )
    return f"""
CREATE OR REPLACE TABLE hand_out AS
WITH codes AS (
  {codes}
),
matched AS (
  {matched}
),
kept AS (
  SELECT m.* FROM matched m
  WHERE NOT EXISTS (
    SELECT 1 FROM morbus_hierarchy h JOIN matched s
      ON s.episode_id = m.episode_id AND s.list_name = h.list_name AND s.condition_key = h.superior
    WHERE h.list_name = m.list_name AND h.inferior = m.condition_key)
),
scores AS (
  SELECT k.episode_id,
    SUM(CASE WHEN w.list_name = 'charlson' THEN w.points ELSE 0 END) AS charlson_quan2011,
    SUM(CASE WHEN w.list_name = 'elixhauser' THEN w.points ELSE 0 END) AS elixhauser_vanwalraven2009,
    SUM(CASE WHEN w.list_name = 'hfrs' THEN w.points ELSE 0 END) AS hfrs_gilbert2018
  FROM kept k JOIN morbus_weights w ON w.list_name = k.list_name AND w.condition_key = k.condition_key
  GROUP BY k.episode_id
)
SELECT e.*,
  CAST(COALESCE(s.charlson_quan2011, 0) AS BIGINT) AS charlson_quan2011,
  CAST(COALESCE(s.elixhauser_vanwalraven2009, 0) AS BIGINT) AS elixhauser_vanwalraven2009,
  CAST(COALESCE(s.hfrs_gilbert2018, 0) AS DECIMAL(18, 1)) AS hfrs_gilbert2018,
  CASE WHEN COALESCE(s.hfrs_gilbert2018, 0) < 5 THEN 'low'
       WHEN COALESCE(s.hfrs_gilbert2018, 0) <= 15 THEN 'intermediate'
       ELSE 'high' END AS hfrs_gilbert2018_band
FROM episodes e LEFT JOIN scores s ON s.episode_id = e.episode_id
"""


def main() -> None:
    DATA.mkdir(exist_ok=True)
    wide = DATA / f"wide-{N}.csv"
    if not (BIN / "morbus").exists() or not (BIN / "synth").exists():
        sh("cargo", "build", "--release", "-q", "-p", "morbus", "-p", "morbus-bench")
    if not wide.exists():
        sh(str(BIN / "synth"), "--episodes", str(N), "--patients", str(N * 3 // 10), "--fields", "20", "--seed", "11", "-q", "-o", str(wide))
    con = duckdb.connect()
    threads = con.execute("SELECT current_setting('threads')").fetchone()[0]
    print(f"duckdb {duckdb.__version__}, {threads} threads, best of {RUNS}")
    rows = []

    def load():
        con.execute(f"CREATE OR REPLACE TABLE episodes AS SELECT * FROM read_csv('{wide}', all_varchar = true, header = true)")

    rows.append(("DuckDB: load the CSV into a table (text columns)", best(load)))
    out = Path(tempfile.mkdtemp()) / "out.csv"
    rows.append(("DuckDB: export the table to CSV", best(lambda: con.execute(f"COPY episodes TO '{out}' (HEADER)"))))

    for label, extra in [("", []), (", 730-day lookback", ["--id", "patient_id", "--date", "admission_date", "--lookback", "730"])]:
        script = sh(str(BIN / "morbus"), "sql", "--dialect", "duckdb", "--table", "episodes", "--dx", ",".join(DX), *extra, "--create", "table", "generated_out", "--replace")
        head, query = split_script(script)
        con.execute(head)
        rows.append((f"generated SQL (`morbus sql`){label}", best(lambda: con.execute("DROP TABLE IF EXISTS generated_out; " + query))))
        if not extra:
            hand = hand_written(con)
            rows.append(("hand-written straightforward SQL", best(lambda: con.execute(hand))))
            # The same job: the same scores where the hand-written reading
            # agrees (it drops fewer marks, so it may differ on messy codes).
            diff = con.execute(
                "SELECT count(*) FROM generated_out g JOIN hand_out h USING (episode_id) "
                "WHERE g.charlson_quan2011 <> h.charlson_quan2011 OR g.hfrs_gilbert2018 <> h.hfrs_gilbert2018 "
                "OR g.elixhauser_vanwalraven2009 <> h.elixhauser_vanwalraven2009"
            ).fetchone()[0]
            print(f"episodes whose scores differ between the generated and the hand-written SQL: {diff}")
        cmd = [str(BIN / "morbus"), "score", str(wide), "--dx", "dx*", "-q", "-o", str(out), *extra]
        rows.append((f"`morbus score` on the CSV{label}", best(lambda: sh(*cmd))))
    print("| scenario | episodes | time | episodes/s |")
    print("|---|---:|---:|---:|")
    for name, t in rows:
        print(f"| {name} | {N:,} | {t:.2f} s | {N / t:,.0f} |")


if __name__ == "__main__":
    main()
