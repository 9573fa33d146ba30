"""morbus on Spark: one `morbus.score` call per partition with `mapInArrow`
on a local Spark session (`local[2]`: two task slots, the Python workers in
their own processes) gives the numbers of the single-machine run on the demo
extracts, when the data are partitioned as the run needs:

- wide, no lookback: any partitioning (rows are scored independently; the
  partitions are scored Arrow batch by Arrow batch);
- lookback (and the long layout): all rows of a patient in one partition,
  `repartition("patient_id")`, and the whole partition collected into one
  table before scoring, since Spark hands a partition over in batches of
  `spark.sql.execution.arrow.maxRecordsPerBatch` rows (500 here, so that
  every partition spans several batches). Partitions of episode ranges
  (`repartitionByRange(4, "episode_id")`, like the row ranges of a file
  read in parts) split patients, and their episodes then miss the earlier
  episodes held by other partitions: the test shows such a run giving
  different (wrong) scores for exactly the split patients.

`score_on_spark` below is the example of python/README.md ("Spark"), and
a test checks that the README shows it as it is here. Spark reorders rows,
so results are compared by episode id. One session for the module; its
warehouse, scratch and Java temporary directories are in pytest's tmp
directory. Skipped, with the reason, when pyspark cannot be imported or no
Java runtime is found.
"""

from __future__ import annotations

import inspect
import os
import shutil
import sys
from collections import defaultdict

import pandas as pd
import pytest

import morbus
from conftest import REPO

pytest.importorskip("pyspark", reason="pyspark is not installed (pip install 'pyspark>=3.5,<4.1')")


def _java():
    """The java command Spark's launcher would use: $JAVA_HOME/bin/java,
    else java on the PATH."""
    home = os.environ.get("JAVA_HOME")
    if home:
        return shutil.which("java", path=os.path.join(home, "bin"))
    return shutil.which("java")


if _java() is None:
    pytest.skip(
        "no Java runtime found (java on the PATH, or $JAVA_HOME/bin/java): Spark needs one, e.g. OpenJDK 17",
        allow_module_level=True,
    )

import pyarrow as pa  # noqa: E402
from pyspark.sql import SparkSession  # noqa: E402
from pyspark.sql.functions import spark_partition_id  # noqa: E402
from pyspark.sql.pandas.types import from_arrow_schema, to_arrow_schema  # noqa: E402

WIDE_CSV = REPO / "demo-data" / "episodes.csv"
LONG_CSV = REPO / "demo-data" / "episodes-long.csv"
WIDE = dict(dx="dx*", id="patient_id", date="admission_date", lookback=365, age="age")
LONG = dict(
    layout="long",
    id="patient_id",
    episode="episode_id",
    date="admission_date",
    dx="code",
    lookback=730,
    exclude_primary=True,
    primary="position",
    poa="present_on_admission",
)
SCORES = ["charlson_quan2011", "charlson_quan2011_age", "elixhauser_vanwalraven2009", "hfrs_gilbert2018", "hfrs_gilbert2018_band"]
LONG_SCORES = ["patient_id", "charlson_quan2011", "elixhauser_vanwalraven2009", "hfrs_gilbert2018", "hfrs_gilbert2018_band"]


# The example of python/README.md ("Spark").
def score_on_spark(sdf, **options):
    """`sdf` scored by morbus.score: one call per Arrow batch, or per whole
    partition with a lookback or the long layout, which need all rows of a
    patient in one call (repartition on the patient column first)."""
    whole = options.get("lookback") is not None or options.get("layout") == "long"

    def score_partition(batches):
        if whole:
            batches = list(batches)
            if batches:
                table = pa.Table.from_batches(batches)
                yield from morbus.score(table, threads=1, **options).to_batches()
        else:
            for batch in batches:
                table = pa.Table.from_batches([batch])
                yield from morbus.score(table, threads=1, **options).to_batches()

    # the output schema: morbus.score on an empty table of the input schema
    empty = to_arrow_schema(sdf.schema).empty_table()
    schema = from_arrow_schema(morbus.score(empty, **options).schema)
    return sdf.mapInArrow(score_partition, schema)
# End of the example.


@pytest.fixture(scope="module")
def spark(tmp_path_factory):
    """A local session: two task slots, 512 MB, no UI, errors only in the
    log, four shuffle partitions (kept: adaptive coalescing off), and the
    Python workers on this interpreter."""
    tmp = tmp_path_factory.mktemp("spark")
    mp = pytest.MonkeyPatch()
    mp.setenv("PYSPARK_PYTHON", sys.executable)  # read by pyspark when the session starts
    try:
        session = (
            SparkSession.builder.master("local[2]")
            .appName("morbus-tests")
            .config("spark.driver.memory", "512m")
            .config("spark.ui.enabled", "false")
            .config("spark.ui.showConsoleProgress", "false")
            .config("spark.sql.shuffle.partitions", "4")
            .config("spark.sql.adaptive.coalescePartitions.enabled", "false")
            .config("spark.sql.execution.arrow.maxRecordsPerBatch", "500")
            .config("spark.local.dir", str(tmp / "local"))
            .config("spark.sql.warehouse.dir", str(tmp / "warehouse"))
            # the JVM's temporary files here; only the quick JIT compiler, which
            # suits a short run on small data (about a third off the run time)
            .config("spark.driver.extraJavaOptions", f"-Djava.io.tmpdir={tmp} -Dderby.system.home={tmp} -XX:TieredStopAtLevel=1")
            .getOrCreate()
        )
        session.sparkContext.setLogLevel("ERROR")
        yield session
        session.stop()
    finally:
        mp.undo()


def read_csv(spark, path):
    """The extract as Spark reads it: every column text, empty fields null."""
    return spark.read.csv(str(path), header=True)


def keyed(rows, key, columns) -> list:
    """[key, *columns] of each row (dicts or Spark rows), NaN as None,
    sorted on the key, which must be unique."""
    out = [[r[key]] + [None if pd.isna(r[c]) else r[c] for c in columns] for r in rows]
    out.sort(key=lambda row: row[0])
    assert len({row[0] for row in out}) == len(out), f"{key} is not unique"
    return out


def single_machine(path, key, columns, **options) -> list:
    frame = morbus.score(pd.read_csv(path), **options)
    return keyed(frame.to_dict("records"), key, columns)


def on_spark(sdf, key, columns, **options) -> list:
    return keyed(score_on_spark(sdf, **options).select(key, *columns).collect(), key, columns)


def partition_layout(sdf) -> list:
    """(partition, Arrow batches, patients) of each non-empty partition."""

    def layout(batches):
        from pyspark import TaskContext

        batches = list(batches)
        patients = sorted({p for b in batches for p in b.column("patient_id").to_pylist()})
        if batches:
            yield pa.RecordBatch.from_pydict(
                {"partition": [TaskContext.get().partitionId()], "batches": [len(batches)], "patients": [patients]}
            )

    return sdf.mapInArrow(layout, "partition long, batches long, patients array<string>").collect()


def test_readme_shows_this_example():
    readme = (REPO / "python" / "README.md").read_text(encoding="utf-8")
    assert inspect.getsource(score_on_spark) in readme, "python/README.md should show score_on_spark as it is here"


def test_session_and_workers(spark):
    """Two task slots, and the workers import the morbus under test."""
    assert spark.sparkContext.defaultParallelism == 2

    def where(batches):
        import morbus as m

        for _ in batches:
            pass
        yield pa.RecordBatch.from_pydict({"file": [m.__file__], "version": [m.__version__]})

    seen = {tuple(r) for r in spark.range(0, 4, numPartitions=2).mapInArrow(where, "file string, version string").collect()}
    assert seen == {(morbus.__file__, morbus.__version__)}


def test_wide_any_partitioning(spark):
    options = dict(dx="dx*", age="age")
    single = single_machine(WIDE_CSV, "episode_id", SCORES, **options)
    sdf = read_csv(spark, WIDE_CSV).repartition(4)  # round robin: patients split
    assert sdf.rdd.getNumPartitions() == 4
    assert on_spark(sdf, "episode_id", SCORES, **options) == single


def test_lookback_partitioned_by_patient(spark):
    single = single_machine(WIDE_CSV, "episode_id", SCORES, **WIDE)
    by_patient = read_csv(spark, WIDE_CSV).repartition("patient_id")
    # every patient in exactly one partition, several partitions, and
    # partitions of several Arrow batches (so collecting them matters)
    parts = partition_layout(by_patient)
    patients = [p for part in parts for p in part["patients"]]
    assert len(patients) == len(set(patients)) == pd.read_csv(WIDE_CSV)["patient_id"].nunique()
    assert len(parts) > 1
    assert max(part["batches"] for part in parts) > 1
    assert on_spark(by_patient, "episode_id", SCORES, **WIDE) == single
    # and the lookback mattered
    assert single_machine(WIDE_CSV, "episode_id", SCORES, dx="dx*", age="age") != single


def test_lookback_by_episode_ranges_is_wrong(spark):
    """Partitions of episode ranges split patients: episodes whose earlier
    episodes sit in another partition lose them."""
    single = dict((row[0], row[1:]) for row in single_machine(WIDE_CSV, "episode_id", SCORES, **WIDE))
    ranges = read_csv(spark, WIDE_CSV).repartitionByRange(4, "episode_id")
    # score, and note each row's partition, in one run
    rows = score_on_spark(ranges.withColumn("partition", spark_partition_id()), **WIDE).collect()
    assert len(rows) == len(single)
    partitions = defaultdict(set)
    for r in rows:
        partitions[r["patient_id"]].add(r["partition"])
    assert len(set().union(*partitions.values())) == 4
    split = {p for p, parts in partitions.items() if len(parts) > 1}
    assert split, "the demo extract should have patients spanning partitions"
    patient_of = {r["episode_id"]: r["patient_id"] for r in rows}
    differs = [row[0] for row in keyed(rows, "episode_id", SCORES) if row[1:] != single[row[0]]]
    assert differs, "episode-range partitions should give different lookback scores"
    # only patients split across partitions are affected
    assert {patient_of[e] for e in differs} <= split


def test_long_layout_partitioned_by_patient(spark):
    single = single_machine(LONG_CSV, "episode_id", LONG_SCORES, **LONG)
    by_patient = read_csv(spark, LONG_CSV).repartition("patient_id")
    out = on_spark(by_patient, "episode_id", LONG_SCORES, **LONG)
    assert len(out) == pd.read_csv(LONG_CSV)["episode_id"].nunique()
    assert out == single
