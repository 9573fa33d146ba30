"""`morbus sql` on real engines: the generated script, run by DuckDB (the
Python package), SQLite (Python's sqlite3) and a PostgreSQL server (Debian's
`postgresql`, started here on a free local port in a temporary data
directory and stopped afterwards), gives every score column `morbus score`
gives on the same rows as a CSV file.

Each case is run on the demo data and on a generated extract of a few
thousand episodes with messy codes, dates and ages (`messy_extract`):
wide, long, lookback 365 and all, exclusions (primary, present on
admission), flags, age points, bands, several weightings, no hierarchy, a
field of several codes (--dx-sep), and an edited user list (--lists).
"""

from __future__ import annotations

import csv
import datetime as dt
import os
import random
import shutil
import socket
import sqlite3
import subprocess
import tempfile
from decimal import Decimal, InvalidOperation
from pathlib import Path
from typing import Dict, List, Optional, Sequence, Tuple

import pytest

from conftest import REPO
import synth

duckdb = pytest.importorskip("duckdb")

DEMO_WIDE = REPO / "demo-data" / "episodes.csv"
DEMO_LONG = REPO / "demo-data" / "episodes-long.csv"
DX20 = ",".join(f"dx{i}" for i in range(1, 21))


# ---------------------------------------------------------------------------
# Generated extracts with the kinds of mess real ones hold.

WEIRD = [
    "I21.-",  # trailing dash
    "I2-1",  # inner dash: not a code
    "E11.4\u2020",  # dagger
    "G63.2*",
    "A17.0+",
    "i10x",  # lower case, X filler
    "I10XXXX",  # 7 characters of filler
    "I10XXXXX",  # 8 characters: not a code
    " c78 . 7 ",
    "\tK70.3\t",
    "N18.5--",
    "N18.5- .",  # something after the dash: not a code
    "I50.91234",  # too long
    "\u00e950",  # not ASCII
    "\u0131 10",  # dotless i: not ASCII, even if upper-casing would make it I
    ".",
    "-",
    "  ",
    "S72.001A",
    "C4A.9",
    "1I50",
    "II0",
    "X" * 70,
]


def messy_extract(path: Path, episodes: int = 3000, seed: int = 151) -> Path:
    """A wide extract with patients, dates over three years (some missing or
    unreadable), ages (some missing or odd), ten diagnosis columns with messy
    codes, a column of several codes separated by ';' and a present-on-
    admission-like flag column for the long copy."""
    rng = random.Random(seed)
    pool = synth.list_codes()
    start = dt.date(2021, 1, 1)
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(
            ["episode_id", "patient_id", "admission_date", "age"]
            + [f"dx{i}" for i in range(1, 11)]
            + ["codes_list"]
            + [f"poa{i}" for i in range(1, 11)]
        )
        for e in range(episodes):
            r = rng.random()
            if r < 0.02:
                date = ""
            elif r < 0.03:
                date = rng.choice(["2022-02-30", "12/03/2022", "2022-13-01", "soon", "2022-1-5"])
            elif r < 0.05:
                date = (start + dt.timedelta(days=rng.randrange(1100))).isoformat() + "T10:30:00"
            else:
                date = (start + dt.timedelta(days=rng.randrange(1100))).isoformat()
            patient = "" if rng.random() < 0.01 else f"P{rng.randrange(episodes // 4):05d}"

            def value() -> str:
                if rng.random() < 0.08:
                    return rng.choice(WEIRD)
                return synth.pick(rng, pool)

            n = min(10, int(rng.expovariate(1 / 3.5)))
            dx = [value() for _ in range(n)] + [""] * (10 - n)
            multi = ";".join(value() for _ in range(rng.randrange(0, 4)))
            # Present-on-admission indicators: the guidelines' values, blanks,
            # case and spaces, and values outside them.
            poa = [rng.choice(["Y", "Y", "Y", "N", "U", "W", "1", "", " y ", "E", "yes"]) for _ in range(10)]
            w.writerow([f"E{e:05d}", patient, date, synth.ages(rng)] + dx + [multi] + poa)
    return path


def long_copy(wide: Path, path: Path, seed: int = 9) -> Path:
    """The wide extract as one code per row (rows shuffled within nothing:
    episode order kept, which the long layout does not need), with a
    position and a present-on-admission indicator (Y, N, U, W, 1, blank, y)."""
    rng = random.Random(seed)
    with open(wide, newline="", encoding="utf-8") as f, open(path, "w", newline="", encoding="utf-8") as g:
        r = csv.DictReader(f)
        w = csv.writer(g)
        w.writerow(["episode_id", "patient_id", "admission_date", "age", "position", "code", "present_on_admission"])
        for row in r:
            codes = [row[f"dx{i}"] for i in range(1, 11) if row[f"dx{i}"]]
            if not codes:
                codes = [""]
            for k, code in enumerate(codes, 1):
                poa = rng.choice(["Y", "Y", "Y", "N", "U", "W", "1", "", "y", " Y "])
                w.writerow([row["episode_id"], row["patient_id"], row["admission_date"], row["age"], k, code, poa])
    return path


# ---------------------------------------------------------------------------
# The engines.


def read_header(path: Path) -> List[str]:
    with open(path, newline="", encoding="utf-8") as f:
        return next(csv.reader(f))


class Engine:
    name = ""
    #: Whether the scripts' rows come back in the order of the file loaded
    #: (all three: PostgreSQL's scripts are given --order-by).
    ordered = True

    def load(self, table: str, path: Path) -> None:
        raise NotImplementedError

    def run(self, script: str) -> Tuple[List[str], List[List[str]]]:
        """Runs a script and returns the last statement's columns and rows as
        text (NULL as '')."""
        raise NotImplementedError

    def query(self, sql: str) -> Tuple[List[str], List[List[str]]]:
        return self.run(sql if sql.rstrip().endswith(";") else sql + ";")


def as_text(v) -> str:
    if v is None:
        return ""
    return str(v)


class DuckDb(Engine):
    name = "duckdb"

    def __init__(self) -> None:
        self.con = duckdb.connect()

    def load(self, table: str, path: Path) -> None:
        self.con.execute(
            f"CREATE TABLE {table} AS SELECT * FROM read_csv(?, all_varchar = true, header = true, quote = '\"', escape = '\"')",
            [str(path)],
        )

    def run(self, script: str):
        res = self.con.execute(script)
        if res.description is None:
            return [], []
        cols = [d[0] for d in res.description]
        return cols, [[as_text(v) for v in row] for row in res.fetchall()]


class Sqlite(Engine):
    name = "sqlite"

    def __init__(self) -> None:
        self.con = sqlite3.connect(":memory:")

    def load(self, table: str, path: Path) -> None:
        with open(path, newline="", encoding="utf-8") as f:
            r = csv.reader(f)
            header = next(r)
            cols = ", ".join(f'"{c}" TEXT' for c in header)
            self.con.execute(f"CREATE TABLE {table} ({cols})")
            marks = ", ".join("?" for _ in header)
            self.con.executemany(f"INSERT INTO {table} VALUES ({marks})", r)
        self.con.commit()

    def run(self, script: str):
        cur = self.con.cursor()
        statement = ""
        last = None
        for line in script.splitlines(keepends=True):
            statement += line
            if sqlite3.complete_statement(statement):
                last = cur.execute(statement)
                statement = ""
        assert statement.strip() == "", "an unfinished statement at the end of the script"
        if last is None or last.description is None:
            return [], []
        cols = [d[0] for d in last.description]
        return cols, [[as_text(v) for v in row] for row in last.fetchall()]


def postgres_bin() -> Optional[Path]:
    for d in sorted(Path("/usr/lib/postgresql").glob("*/bin"), reverse=True):
        if (d / "initdb").exists() and (d / "pg_ctl").exists():
            return d
    return None


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Postgres(Engine):
    """A throw-away server: initdb in a temporary directory, a free port,
    Unix socket in that directory, trust authentication; stopped by
    `stop`. As root, the server runs as the `postgres` user (or `nobody`)."""

    name = "postgres"

    def __init__(self) -> None:
        bindir = postgres_bin()
        if bindir is None or shutil.which("psql") is None:
            raise RuntimeError("PostgreSQL is not installed (apt-get install postgresql)")
        self.bindir = bindir
        self.dir = Path(tempfile.mkdtemp(prefix="morbus-pg-"))
        self.port = free_port()
        self.as_user: List[str] = []
        if os.geteuid() == 0:
            user = "postgres"
            if subprocess.run(["id", user], capture_output=True).returncode != 0:
                user = "nobody"
            shutil.chown(self.dir, user=user)
            os.chmod(self.dir, 0o700)
            self.as_user = ["runuser", "-u", user, "--"]
        data = self.dir / "data"
        self._do([str(bindir / "initdb"), "-D", str(data), "-U", "postgres", "--auth=trust", "-E", "UTF8", "--locale=C.UTF-8"])
        self._do(
            [
                str(bindir / "pg_ctl"),
                "-D",
                str(data),
                "-l",
                str(self.dir / "log"),
                "-w",
                "-o",
                f"-p {self.port} -k {self.dir} -c listen_addresses='' -c fsync=off",
                "start",
            ]
        )
        self.data = data

    def _do(self, cmd: List[str]) -> None:
        p = subprocess.run(self.as_user + cmd, capture_output=True, text=True)
        if p.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd)} failed: {p.stderr or p.stdout}")

    def stop(self) -> None:
        subprocess.run(self.as_user + [str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "fast", "stop"], capture_output=True)
        shutil.rmtree(self.dir, ignore_errors=True)

    def psql(self, args: List[str], stdin: Optional[str] = None) -> str:
        cmd = ["psql", "-X", "-q", "-h", str(self.dir), "-p", str(self.port), "-U", "postgres", "-d", "postgres", "-v", "ON_ERROR_STOP=1"] + args
        p = subprocess.run(cmd, input=stdin, capture_output=True, text=True)
        if p.returncode != 0:
            raise RuntimeError(p.stderr)
        return p.stdout

    def load(self, table: str, path: Path) -> None:
        cols = ", ".join(f'"{c}" TEXT' for c in read_header(path))
        self.psql(["-c", f"CREATE TABLE {table} ({cols})"])
        self.psql(["-c", f"\\copy {table} FROM '{path}' WITH (FORMAT csv, HEADER true)"])

    def run(self, script: str):
        with tempfile.NamedTemporaryFile("w", suffix=".sql", delete=False, encoding="utf-8") as f:
            f.write("SET client_min_messages = warning;\n" + script)
            name = f.name
        try:
            out = self.psql(["--csv", "-f", name])
        finally:
            os.unlink(name)
        rows = list(csv.reader(out.splitlines()))
        if not rows:
            return [], []
        return rows[0], rows[1:]


# ---------------------------------------------------------------------------
# Fixtures: one engine of each kind for the module, the data loaded once.


@pytest.fixture(scope="module")
def data(tmp_path_factory) -> Dict[str, Path]:
    d = tmp_path_factory.mktemp("sqldata")
    wide = messy_extract(d / "messy.csv")
    return {
        "demo_wide": DEMO_WIDE,
        "demo_long": DEMO_LONG,
        "messy_wide": wide,
        "messy_long": long_copy(wide, d / "messy-long.csv"),
    }


@pytest.fixture(scope="module", params=["duckdb", "sqlite", "postgres"])
def engine(request, data):
    if request.param == "duckdb":
        e: Engine = DuckDb()
    elif request.param == "sqlite":
        e = Sqlite()
    else:
        try:
            e = Postgres()
        except RuntimeError as err:
            pytest.skip(f"no PostgreSQL server could be started here: {err}")
    for name, path in data.items():
        e.load(name, path)
    yield e
    if isinstance(e, Postgres):
        e.stop()


# ---------------------------------------------------------------------------
# Comparing with the command line.


def same_value(a: str, b: str) -> bool:
    if a == b:
        return True
    try:
        return Decimal(a) == Decimal(b)
    except InvalidOperation:
        return False


_SCORED: Dict[Tuple[str, ...], Tuple[List[str], List[List[str]]]] = {}


def score_cli(run_cli, path: Path, args: Sequence[str]) -> Tuple[List[str], List[List[str]]]:
    """`morbus score` on the CSV file (each command run once for the three
    engines)."""
    key = (str(path), *args)
    if key not in _SCORED:
        # The generated extract has unreadable dates on purpose; the SQL
        # cannot stop a run over them, so neither does the comparison.
        if "--max-unreadable-dates" not in args:
            args = ["--max-unreadable-dates", "100", *args]
        code, out, err = run_cli(["score", str(path), "--quiet", *args])
        assert code == 0, err
        rows = list(csv.reader(out.splitlines()))
        _SCORED[key] = (rows[0], rows[1:])
    return _SCORED[key]


def sql_script(run_cli, dialect: str, table: str, args: Sequence[str], order: bool = True) -> str:
    # As in `score_cli`: the comparisons of scores let every date be
    # unreadable (the stop itself is tested in test_unreadable_dates_*).
    if "--max-unreadable-dates" not in args:
        args = [*args, "--max-unreadable-dates", "100"]
    # PostgreSQL keeps no load order (a COPY may store a later row on an
    # earlier page): its scripts are given the columns of the extract's
    # order, whose episode ids are in file order, so that every comparison
    # is row by row. Without --order-by it numbers rows by ctid (tested in
    # test_order_by_gives_the_extract_order).
    if order and dialect == "postgres" and "--order-by" not in args and table != "typed":
        args = [*args, "--order-by", "episode_id,position" if "long" in table else "episode_id"]
    code, out, err = run_cli(["sql", "--dialect", dialect, "--table", table, *args])
    assert code == 0, err
    return out


def check_equal(
    cli: Tuple[List[str], List[List[str]]],
    db: Tuple[List[str], List[List[str]]],
    score_columns: List[str],
    ordered: bool = True,
) -> None:
    """Every value equal. With `ordered` (DuckDB and SQLite, which keep a
    loaded table's rows in load order) in the same order as the command
    line's output; otherwise (PostgreSQL, whose heap order is its own) the
    rows are matched by their leading columns (the table's own, or the
    long layout's id and episode) before the score columns."""
    cols, rows = cli
    dcols, drows = db
    assert dcols == cols
    assert len(drows) == len(rows)
    if not ordered:
        first = min(cols.index(c) for c in score_columns)
        rows = sorted(rows, key=lambda r: r[:first])
        drows = sorted(drows, key=lambda r: r[:first])
    wrong = []
    for i, (a, b) in enumerate(zip(rows, drows)):
        for c, x, y in zip(cols, a, b):
            if not same_value(x, y):
                wrong.append((i + 1, c, x, y))
    assert not wrong, f"{len(wrong)} values differ, e.g. {wrong[:8]}"
    # Something was scored: a comparison of all zeros would prove little.
    for c in score_columns:
        k = cols.index(c)
        assert any(r[k] not in ("", "0") for r in rows), f"{c} is never above 0"


# (data set, `score` and `sql` options, what the columns of the table are)
WIDE_CASES = {
    "plain": ["--age", "age"],
    "flags_no_hierarchy": ["--flags", "--no-hierarchy", "--index", "charlson:charlson1987,elixhauser:count,hfrs"],
    "lookback_365_primary": ["--id", "patient_id", "--date", "admission_date", "--lookback", "365", "--exclude-primary", "--age", "age"],
    "lookback_all": ["--id", "patient_id", "--date", "admission_date", "--lookback", "all", "--flags"],
    # One window per list; elixhauser, named nowhere, is scored from the episode alone.
    "lookback_per_list": ["--id", "patient_id", "--date", "admission_date", "--lookback", "charlson=365,hfrs=730", "--flags"],
    # Earlier days only: the episode's own codes and its day's other episodes left out.
    "lookback_earlier_only": ["--id", "patient_id", "--date", "admission_date", "--lookback", "365", "--window", "earlier-only", "--age", "age"],
    # Both: a window for every list but hfrs, earlier days only, the primary left out.
    "lookback_default_and_list_earlier_only": [
        "--id", "patient_id", "--date", "admission_date", "--lookback", "90,hfrs=all", "--window", "earlier-only", "--exclude-primary", "--flags",
    ],
}
DX10 = ",".join(f"dx{i}" for i in range(1, 11))
POA10 = ",".join(f"poa{i}" for i in range(1, 11))


def score_columns(cols: List[str]) -> List[str]:
    return [c for c in cols if c.endswith(("_quan2011", "_vanwalraven2009", "_gilbert2018", "_charlson1987", "_count"))]


@pytest.mark.parametrize("case", sorted(WIDE_CASES))
def test_demo_wide(engine, data, run_cli, case):
    args = ["--dx", DX20, *WIDE_CASES[case]]
    if "patient_id" not in args:
        args += []
    cli = score_cli(run_cli, data["demo_wide"], args)
    script = sql_script(run_cli, engine.name, "demo_wide", args)
    check_equal(cli, engine.run(script), score_columns(cli[0]), engine.ordered)


@pytest.mark.parametrize("case", sorted(WIDE_CASES))
def test_messy_wide(engine, data, run_cli, case):
    dx = ",".join(f"dx{i}" for i in range(1, 11))
    args = ["--dx", dx, *WIDE_CASES[case]]
    cli = score_cli(run_cli, data["messy_wide"], args)
    script = sql_script(run_cli, engine.name, "messy_wide", args)
    check_equal(cli, engine.run(script), score_columns(cli[0]), engine.ordered)


@pytest.mark.parametrize(
    "extra",
    [
        ["--id", "patient_id", "--date", "admission_date", "--lookback", "365"],
        ["--poa-values", "Y,W"],
        ["--exclude-primary", "--dx-sep", ";"],
    ],
    ids=["lookback", "values_y_w", "primary_separator"],
)
def test_messy_wide_present_on_admission(engine, data, run_cli, extra):
    """Wide layout: each diagnosis column paired with its indicator column
    (poa1 with dx1, ...): by name, and by glob with --columns."""
    args = ["--dx", DX10, "--poa", POA10, "--age", "age", *extra]
    cli = score_cli(run_cli, data["messy_wide"], args)
    check_equal(cli, engine.run(sql_script(run_cli, engine.name, "messy_wide", args)), score_columns(cli[0]), engine.ordered)
    columns = ",".join(read_header(data["messy_wide"]))
    globbed = ["--dx", "dx?,dx10", "--poa", "poa?,poa10", "--columns", columns, "--age", "age", *extra]
    check_equal(cli, engine.run(sql_script(run_cli, engine.name, "messy_wide", globbed)), score_columns(cli[0]), engine.ordered)


def test_messy_wide_separator_and_globs(engine, data, run_cli):
    """A field of several codes (--dx-sep) after the diagnosis columns,
    named by a glob with --columns; the primary diagnosis is the first part
    of the first column."""
    columns = ",".join(read_header(data["messy_wide"]))
    args = ["--dx", "dx*,codes_list", "--dx-sep", ";", "--age", "age", "--exclude-primary", "--flags"]
    cli = score_cli(run_cli, data["messy_wide"], args)
    script = sql_script(run_cli, engine.name, "messy_wide", [*args, "--columns", columns])
    check_equal(cli, engine.run(script), score_columns(cli[0]), engine.ordered)
    # The separator column alone: its first part is the primary diagnosis.
    args = ["--dx", "codes_list", "--dx-sep", ";", "--exclude-primary"]
    cli = score_cli(run_cli, data["messy_wide"], args)
    check_equal(cli, engine.run(sql_script(run_cli, engine.name, "messy_wide", args)), score_columns(cli[0]), engine.ordered)


LONG_CASES = {
    "per_id_age": ["--layout", "long", "--id", "patient_id", "--dx", "code", "--age", "age", "--flags"],
    "episodes_lookback_730_exclusions": [
        "--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code",
        "--date", "admission_date", "--lookback", "730", "--exclude-primary", "--primary", "position",
        "--poa", "present_on_admission", "--age", "age",
    ],
    "episodes_lookback_all_poa": [
        "--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code",
        "--date", "admission_date", "--lookback", "all", "--poa", "present_on_admission", "--poa-values", "Y,W,1",
    ],
    "episodes_no_lookback": ["--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code"],
    "episodes_per_list_earlier_only": [
        "--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code",
        "--date", "admission_date", "--lookback", "hfrs=730,elixhauser=all", "--window", "earlier-only",
        "--poa", "present_on_admission", "--flags",
    ],
}


@pytest.mark.parametrize("dataset", ["demo_long", "messy_long"])
@pytest.mark.parametrize("case", sorted(LONG_CASES))
def test_long(engine, data, run_cli, dataset, case):
    args = LONG_CASES[case]
    cli = score_cli(run_cli, data[dataset], args)
    script = sql_script(run_cli, engine.name, dataset, args)
    check_equal(cli, engine.run(script), score_columns(cli[0]), engine.ordered)


def test_edited_user_list(engine, data, run_cli, tmp_path):
    """An edited list (a code entry removed, a weight changed, the version
    bumped) gives edited SQL: the script carries the new version and
    checksum, and scores as `score --lists DIR` does."""
    code, _, err = run_cli(["lists", "export", "charlson", str(tmp_path)])
    assert code == 0, err
    path = tmp_path / "charlson.tsv"
    lines = path.read_text(encoding="utf-8").splitlines()
    out = []
    removed = changed = False
    for line in lines:
        f = line.split("\t")
        if not removed and f[0] == "code" and f[1].startswith("I50"):
            removed = True
            continue
        if not changed and f[0] == "weight" and f[1] == "quan2011" and f[3] == "2":
            f[3] = "5"
            line = "\t".join(f)
            changed = True
        if f[0] == "version":
            f[1] = f[1] + "-edited"
            line = "\t".join(f)
        out.append(line)
    assert removed and changed
    path.write_text("\n".join(out) + "\n", encoding="utf-8")
    args = ["--dx", DX20, "--lists", str(tmp_path), "--index", "charlson", "--age", "age", "--flags"]
    cli = score_cli(run_cli, data["demo_wide"], args)
    script = sql_script(run_cli, engine.name, "demo_wide", args)
    assert "-edited" in script
    check_equal(cli, engine.run(script), score_columns(cli[0]), engine.ordered)
    builtin = score_cli(run_cli, data["demo_wide"], args[:2] + args[4:])
    assert builtin[1] != cli[1], "the edit changed no score on the demo data"


def test_create_view_and_table(engine, data, run_cli):
    """--create view NAME keeps its list tables; --create table NAME drops the
    temporary ones; both give the query's rows."""
    args = ["--dx", DX20, "--id", "patient_id", "--date", "admission_date", "--lookback", "365", "--age", "age"]
    cli = score_cli(run_cli, data["demo_wide"], args)
    cols = cli[0]
    quoted = ", ".join(f'"{c}"' for c in cols)
    engine.run(sql_script(run_cli, engine.name, "demo_wide", [*args, "--create", "view", "scored_view"]))
    check_equal(cli, engine.query(f"SELECT {quoted} FROM scored_view ORDER BY episode_id"), score_columns(cols))
    # Again with --replace: the view and its list tables are replaced.
    engine.run(sql_script(run_cli, engine.name, "demo_wide", [*args, "--create", "view", "scored_view", "--replace"]))
    engine.run(sql_script(run_cli, engine.name, "demo_wide", [*args, "--create", "table", "scored_table"]))
    check_equal(cli, engine.query(f"SELECT {quoted} FROM scored_table ORDER BY episode_id"), score_columns(cols))


def test_typed_duckdb_columns(data, run_cli):
    """DuckDB reading the demo CSV with its own types (dates as DATE, ages
    as numbers) scores the same."""
    con = duckdb.connect()
    con.execute("CREATE TABLE typed AS SELECT * FROM read_csv(?, header = true)", [str(DEMO_WIDE)])
    types = dict(con.execute("SELECT column_name, data_type FROM information_schema.columns WHERE table_name = 'typed'").fetchall())
    assert types["admission_date"] == "DATE"
    args = ["--dx", DX20, "--id", "patient_id", "--date", "admission_date", "--lookback", "365", "--age", "age"]
    cli = score_cli(run_cli, DEMO_WIDE, args)
    script = sql_script(run_cli, "duckdb", "typed", args)
    res = con.execute(script)
    got = ([d[0] for d in res.description], [[as_text(v) for v in r] for r in res.fetchall()])
    score_cols = [c for c in cli[0] if c not in types]
    # Compare the score columns (the typed table's own columns print otherwise).
    pick = lambda t: ([c for c in t[0] if c in score_cols], [[v for c, v in zip(t[0], r) if c in score_cols] for r in t[1]])
    check_equal(pick(cli), pick(got), score_columns(score_cols))


def test_prefix_export_matches_the_script(run_cli, tmp_path):
    """`lists export --format prefixes` writes the same prefixes the script
    loads, with every weighting's points."""
    code, _, err = run_cli(["lists", "export", "hfrs", str(tmp_path), "--format", "prefixes"])
    assert code == 0, err
    with open(tmp_path / "hfrs-prefixes.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert rows and set(rows[0]) == {"list", "version", "condition", "label", "prefix", "entry", "points_gilbert2018"}
    script = sql_script(run_cli, "duckdb", "t", ["--dx", "dx1", "--index", "hfrs"])
    for r in rows:
        assert f"('hfrs', '{r['condition']}', '{r['prefix']}', " in script
    # Hospital Frailty Risk Score: 109 categories, each a three-character
    # ICD-10 category (Gilbert et al., Lancet 2018;391:1775-82, Table 2;
    # transcribed from memory).
    assert len({r["condition"] for r in rows}) == 109
    assert all(len(r["prefix"]) == 3 for r in rows)


# ---------------------------------------------------------------------------
# Unreadable dates: the query stops where `score` stops, with its message.


def score_outcome(run_cli, path: Path, args: Sequence[str]) -> Tuple[int, str]:
    code, _, err = run_cli(["score", str(path), "--quiet", *args])
    return code, err.strip()


def run_error(engine: Engine, script: str) -> Optional[str]:
    """The engine's error message when the script fails, else None."""
    try:
        engine.run(script)
    except Exception as err:  # each engine raises its own error type
        text = str(err)
        # SQLite's message is inside a quoted JSON path, its quotes doubled.
        return text.replace("''", "'") if engine.name == "sqlite" else text
    return None


UNREADABLE_CASES = {
    # 26 of the 2,948 episodes with a date have an unreadable one (0.88 %).
    "wide": ("messy_wide", ["--dx", DX10, "--id", "patient_id", "--date", "admission_date", "--lookback", "365"]),
    # The long copy: an episode's date is unreadable when none of its rows has a readable one.
    "long": (
        "messy_long",
        ["--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code", "--date", "admission_date", "--lookback", "all"],
    ),
    # No lookback: `score` still reads the dates of a long layout's episodes and stops.
    "long_no_lookback": ("messy_long", ["--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code", "--date", "admission_date"]),
}


@pytest.mark.parametrize("case", sorted(UNREADABLE_CASES))
@pytest.mark.parametrize("threshold", ["0.5", "0.88", "0.89", "5"])
def test_unreadable_dates_stop_as_score_stops(engine, data, run_cli, case, threshold):
    """Over --max-unreadable-dates (0.5, and 0.88 just under the share of
    0.8819 %) `score` exits 1 and the script stops with the same message;
    at or under it (0.89, 5) both give the same scores."""
    dataset, args = UNREADABLE_CASES[case]
    args = [*args, "--max-unreadable-dates", threshold]
    code, err = score_outcome(run_cli, data[dataset], args)
    script = sql_script(run_cli, engine.name, dataset, args)
    over = threshold in ("0.5", "0.88")
    if over:
        assert code == 1, err
        message = err.removeprefix("morbus: error: ")
        assert "have an unreadable date, more than the" in message
        got = run_error(engine, script)
        assert got is not None, "the script gave scores where `score` stops"
        assert message in got, f"{message!r} not in {got!r}"
    else:
        assert code == 0, err
        cli = score_cli(run_cli, data[dataset], args)
        check_equal(cli, engine.run(script), score_columns(cli[0]), engine.ordered)


def test_unreadable_dates_stop_a_view_when_read(engine, data, run_cli):
    """A view is checked each time it is read: created without error, it
    stops when queried."""
    dataset, args = UNREADABLE_CASES["wide"]
    args = [*args, "--max-unreadable-dates", "0.5", "--create", "view", "checked_view", "--replace"]
    engine.run(sql_script(run_cli, engine.name, dataset, args))
    got = run_error(engine, "SELECT * FROM checked_view;")
    assert got is not None and "more than the 0.5% allowed by --max-unreadable-dates" in got


# ---------------------------------------------------------------------------
# --date-format: the same pattern reading in SQL.


def reformat_dates(src: Path, path: Path, pattern: str, seed: int = 5) -> Path:
    """The messy extract with its ISO dates rewritten by `pattern` (the
    junk values kept): %d and %m with and without a leading zero where the
    pattern allows it, %b in mixed case, some with a time after them."""
    rng = random.Random(seed)
    months = ["jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec"]
    with open(src, newline="", encoding="utf-8") as f, open(path, "w", newline="", encoding="utf-8") as g:
        r = csv.reader(f)
        w = csv.writer(g)
        header = next(r)
        w.writerow(header)
        k = header.index("admission_date")
        for row in r:
            v = row[k]
            try:
                day = dt.date.fromisoformat(v[:10])
            except ValueError:
                w.writerow(row)
                continue
            packed = "%Y%m%d" in pattern
            pad = packed or rng.random() < 0.5
            text = (
                pattern.replace("%Y", f"{day.year:04d}")
                .replace("%m", f"{day.month:02d}" if pad else str(day.month))
                .replace("%d", f"{day.day:02d}" if pad or rng.random() < 0.5 else str(day.day))
                .replace("%b", rng.choice([str.lower, str.upper, str.title])(months[day.month - 1]))
            )
            if len(v) > 10:
                text += rng.choice(["T10:30:00", " 10:30"])
            elif rng.random() < 0.01:
                text += "x"  # something after the date that is not a time: unreadable
            row[k] = text
            w.writerow(row)
    return path


@pytest.mark.parametrize("pattern", ["%d/%m/%Y", "%d %b %Y", "%Y%m%d", "%m.%d.%Y"])
def test_date_format(engine, data, run_cli, tmp_path, pattern):
    """`--date-format` read in SQL as `score` reads it (one or two digits
    between separators, two when packed, month names in any case, a time
    after T or a space): every score equal, with a lookback that depends on
    the dates."""
    name = "dates_" + "".join(c for c in pattern if c.isalpha()).lower()
    path = reformat_dates(data["messy_wide"], tmp_path / f"{name}.csv", pattern)
    engine.load(name, path)
    args = ["--dx", DX10, "--id", "patient_id", "--date", "admission_date", "--lookback", "365", "--date-format", pattern, "--flags"]
    cli = score_cli(run_cli, path, args)
    check_equal(cli, engine.run(sql_script(run_cli, engine.name, name, args)), score_columns(cli[0]), engine.ordered)
    # The dates were read: without the lookback the scores are others.
    alone = score_cli(run_cli, path, ["--dx", DX10, "--flags"])
    assert alone[1] != [r[: len(alone[0])] for r in cli[1]]
    # The share of unreadable dates is the same in both: over a threshold
    # below it, both stop with the same message.
    code, err = score_outcome(run_cli, path, [*args, "--max-unreadable-dates", "0.1"])
    assert code == 1
    got = run_error(engine, sql_script(run_cli, engine.name, name, [*args, "--max-unreadable-dates", "0.1"]))
    assert got is not None and err.removeprefix("morbus: error: ") in got


# ---------------------------------------------------------------------------
# Row order: without --order-by, the table's own order (load order here, in
# all three engines: every comparison above is row by row); with it, the
# order of the columns named, whatever order the table holds its rows in.


def shuffled_copy(src: Path, path: Path, seed: int = 77) -> Path:
    with open(src, newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    body = rows[1:]
    random.Random(seed).shuffle(body)
    with open(path, "w", newline="", encoding="utf-8") as g:
        csv.writer(g).writerows([rows[0], *body])
    return path


@pytest.mark.parametrize(
    "dataset,args,order",
    [
        ("messy_wide", ["--dx", DX10, "--id", "patient_id", "--date", "admission_date", "--lookback", "365", "--age", "age"], "episode_id"),
        (
            "messy_long",
            ["--layout", "long", "--id", "patient_id", "--episode", "episode_id", "--dx", "code", "--date", "admission_date", "--lookback", "all"],
            "episode_id,position",
        ),
    ],
    ids=["wide", "long"],
)
def test_order_by_gives_the_extract_order(engine, data, run_cli, tmp_path, dataset, args, order):
    """The rows loaded in a shuffled order; --order-by names the columns that
    give the extract's order (its episode ids are in file order): the output
    equals `score` on the original file row by row."""
    name = f"{dataset}_shuffled"
    engine.load(name, shuffled_copy(data[dataset], tmp_path / f"{name}.csv"))
    cli = score_cli(run_cli, data[dataset], args)
    got = engine.run(sql_script(run_cli, engine.name, name, [*args, "--order-by", order]))
    check_equal(cli, got, score_columns(cli[0]), ordered=True)
    # Without it the rows come in the shuffled table's order: not the file's.
    plain = engine.run(sql_script(run_cli, engine.name, name, args, order=False))
    assert [r[0] for r in plain[1]] != [r[0] for r in cli[1]]
