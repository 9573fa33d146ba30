"""morbus on a cluster: one `morbus.score` call per partition with Dask
(`map_partitions`) on a local `dask.distributed` cluster of two worker
processes gives the numbers of the single-machine run, when the extract is
partitioned as the run needs:

- wide, no lookback: any partitioning (rows are scored independently);
- lookback (and the long layout): all rows of a patient in one partition,
  e.g. `ddf.shuffle("patient_id")`. Partitions of row ranges split patients,
  and their episodes then miss the earlier episodes held by other
  partitions: the test shows such a run giving different (wrong) scores.

This is the example of python/README.md ("On a cluster"). Skipped, with the
reason, when dask or distributed cannot be imported.
"""

from __future__ import annotations

import pandas as pd
import pytest

import morbus
from conftest import REPO

dd = pytest.importorskip(
    "dask.dataframe", reason="dask[dataframe] is not installed (pip install 'dask[dataframe]' distributed)"
)
distributed = pytest.importorskip("distributed", reason="distributed is not installed (pip install distributed)")

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


@pytest.fixture(scope="module")
def client():
    """A local cluster of two single-threaded worker processes (threads
    within one process if processes cannot be started here)."""
    try:
        cluster = distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
        )
    except Exception as e:  # pragma: no cover - depends on the machine
        print(f"worker processes could not be started ({e}); using threads")
        cluster = distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
        )
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


@pytest.fixture(scope="module")
def episodes() -> pd.DataFrame:
    return pd.read_csv(WIDE_CSV)


def scored_on_cluster(ddf, **options) -> pd.DataFrame:
    meta = morbus.score(ddf._meta, threads=1, **options)
    return ddf.map_partitions(morbus.score, threads=1, **options, meta=meta).compute()


def values(frame: pd.DataFrame, columns) -> list:
    return [[None if pd.isna(v) else v for v in row] for row in frame[columns].itertuples(index=False)]


def test_runs_on_worker_processes(client):
    info = client.scheduler_info()
    assert len(info["workers"]) == 2


def test_wide_any_partitioning(client, episodes):
    single = morbus.score(episodes, dx="dx*", age="age")
    ddf = dd.from_pandas(episodes, npartitions=4)
    out = scored_on_cluster(ddf, dx="dx*", age="age").sort_index()
    assert values(out, SCORES) == values(single, SCORES)


def test_lookback_partitioned_by_patient(client, episodes):
    single = morbus.score(episodes, **WIDE)
    ddf = dd.from_pandas(episodes, npartitions=4).shuffle("patient_id")
    # every patient in exactly one partition, and more than one partition used
    per_part = ddf.map_partitions(lambda p: p[["patient_id"]].drop_duplicates(), meta={"patient_id": object}).compute()
    assert per_part["patient_id"].is_unique
    assert ddf.npartitions > 1
    out = scored_on_cluster(ddf, **WIDE).sort_index()
    assert len(out) == len(episodes)
    assert values(out, SCORES) == values(single, SCORES)
    # and the lookback mattered
    plain = morbus.score(episodes, dx="dx*", age="age")
    assert values(plain, SCORES) != values(single, SCORES)


def test_lookback_by_row_ranges_is_wrong(client, episodes):
    """Row-range partitions split patients: episodes whose earlier
    episodes sit in another partition lose them."""
    single = morbus.score(episodes, **WIDE)
    ddf = dd.from_pandas(episodes, npartitions=4)  # row ranges, in order
    out = scored_on_cluster(ddf, **WIDE).sort_index()
    part_of_row = pd.concat(
        [pd.Series(k, index=ddf.get_partition(k).index.compute()) for k in range(ddf.npartitions)]
    ).sort_index()
    parts_per_patient = part_of_row.groupby(episodes["patient_id"]).nunique()
    split = set(parts_per_patient[parts_per_patient > 1].index)
    assert split, "the demo extract should have patients spanning partitions"
    differs = pd.Series([a != b for a, b in zip(values(out, SCORES), values(single, SCORES))], index=out.index)
    assert differs.sum() > 0, "row-range partitions should give different lookback scores"
    # only patients split across partitions are affected
    assert set(episodes.loc[differs, "patient_id"]) <= split
    whole = ~episodes["patient_id"].isin(split)
    assert values(out[whole], SCORES) == values(single[whole], SCORES)


def test_long_layout_partitioned_by_patient(client):
    codes = pd.read_csv(LONG_CSV)
    single = morbus.score(codes, **LONG).sort_values("episode_id").reset_index(drop=True)
    ddf = dd.from_pandas(codes, npartitions=3).shuffle("patient_id")
    out = scored_on_cluster(ddf, **LONG).sort_values("episode_id").reset_index(drop=True)
    cols = ["patient_id", "episode_id", "charlson_quan2011", "elixhauser_vanwalraven2009", "hfrs_gilbert2018"]
    assert values(out, cols) == values(single, cols)
