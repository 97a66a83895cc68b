"""Fingerprints on a real dask LocalCluster of 2 worker processes: the same JSON as in one
process, small task results, and workers SIGKILLed mid-task (retried, or one clear error
once dask's retries are used up; never a partial fingerprint)."""

from __future__ import annotations

import os
import pickle
import signal
import threading
import time
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

pytest.importorskip("distributed")
from dask.distributed import LocalCluster  # noqa: E402

from tests.test_partitioned import TARGET, mixed_frame, write_partitioned  # noqa: E402
from warmstart import cluster as wcluster  # noqa: E402
from warmstart import fingerprint  # noqa: E402
from warmstart.errors import BadInputError  # noqa: E402
from warmstart.fingerprint.scan import SEED, Layout, scan_part  # noqa: E402
from warmstart.fingerprint.sketches import BottomKSample  # noqa: E402
from warmstart.io import open_directory  # noqa: E402

SLEEP = 1.0  # seconds each part task sleeps in the kill tests


@pytest.fixture(scope="module")
def client():
    # what cluster="local:2" starts: 2 single-threaded worker processes on 127.0.0.1
    with wcluster.connect("local:2") as c:
        assert isinstance(c.cluster, LocalCluster) and len(c.cluster.workers) == 2
        assert all(w.process is not None for w in c.cluster.workers.values())  # processes
        yield c


@pytest.fixture(scope="module")
def data_dir(tmp_path_factory) -> Path:
    # 4 hive directories x 3 files = 12 files, numbers, text, booleans, dates, missing
    return write_partitioned(tmp_path_factory.mktemp("cluster") / "sales", n=6000, seed=4)


@pytest.fixture
def slow_tasks(client):
    """Part tasks sleep first, so a worker can be killed while it runs one."""
    client.run(lambda: os.environ.__setitem__(wcluster.SLEEP_ENV, str(SLEEP)))
    yield
    client.wait_for_workers(2, timeout=30)
    client.run(lambda: os.environ.pop(wcluster.SLEEP_ENV, None))


@pytest.mark.parametrize("target, cap", [(TARGET, 500), ("spend", 10_000)])
def test_cluster_and_one_process_give_the_same_json(client, data_dir, target, cap):
    # cap 500 < 6000 rows: the sample threshold of the first round prunes every part
    alone = fingerprint(data_dir, target=target, sample_cap=cap)
    spread = fingerprint(data_dir, target=target, sample_cap=cap, cluster=client)
    assert spread.to_json() == alone.to_json()
    assert alone.values["rows"] == 6000 and alone.values["sample_rows"] == min(cap, 6000)


def test_a_single_file_is_one_task_with_the_same_result(client, tmp_path):
    path = tmp_path / "one.parquet"
    pq.write_table(pa.Table.from_pandas(mixed_frame(3000, seed=9), preserve_index=False),
                   path, row_group_size=500)
    alone = fingerprint(path, target=TARGET, sample_cap=400)
    assert fingerprint(path, target=TARGET, sample_cap=400, cluster=client).to_json() == \
        alone.to_json()


def test_parts_ship_their_share_of_the_sample_not_their_rows(data_dir):
    d = open_directory(data_dir)
    layout = Layout.of(d.schema, TARGET)
    small = [BottomKSample(200, SEED).smallest(0, 3000),
             BottomKSample(200, SEED).smallest(3000, d.n_rows)]
    bound = BottomKSample.bound_of(small, 200)
    # however the rows are split into ranges, the threshold is the same
    assert bound == BottomKSample.bound_of([BottomKSample(200, SEED).smallest(0, d.n_rows)],
                                           200)
    assert BottomKSample.bound_of([BottomKSample(200, SEED).smallest(0, 150)], 200) is None
    accs = [scan_part(d.schema, p, layout, 200, 65536, bound) for p in d.parts]
    assert sum(a.sample.index.size for a in accs) == 200  # exactly the sample, in total
    sizes = [len(pickle.dumps(a)) for a in accs]
    assert max(sizes) < 400_000  # sketches and counters, bounded whatever the rows


def test_bad_cluster_arguments_fail_before_anything_runs(data_dir, monkeypatch):
    for spec in ("local:0", "local:two", ""):
        with pytest.raises(BadInputError, match="local:N|scheduler address"):
            fingerprint(data_dir, target=TARGET, cluster=spec)
    with pytest.raises(BadInputError, match="not a DataFrame"):
        fingerprint(pd.DataFrame({"a": [1, 2], TARGET: [0, 1]}), target=TARGET,
                    cluster="local:1")
    monkeypatch.setattr(wcluster, "CONNECT_TIMEOUT", "1s")
    with pytest.raises(wcluster.ClusterError, match="could not reach") as err:
        fingerprint(data_dir, target=TARGET, cluster="tcp://127.0.0.1:9")  # discard port
    assert "\n" not in str(err.value)


def _kill_a_busy_worker(client) -> int:
    """SIGKILL the process of a worker that is running a part task right now."""
    pids = client.run(os.getpid)
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        busy = [w for w, keys in client.processing().items()
                if any(str(k).startswith("warmstart-part-") for k in keys)]
        if busy:
            time.sleep(SLEEP / 3)  # well inside the task's sleep
            os.kill(pids[busy[0]], signal.SIGKILL)
            return pids[busy[0]]
        time.sleep(0.02)
    raise AssertionError("no part task started")


def _in_thread(func):
    out: dict = {}

    def run():
        try:
            out["value"] = func()
        except Exception as exc:  # handed to the test
            out["error"] = exc

    t = threading.Thread(target=run)
    t.start()
    return t, out


def test_a_worker_killed_mid_task_is_retried_and_the_result_is_whole(
        client, data_dir, slow_tasks):
    alone = fingerprint(data_dir, target=TARGET, sample_cap=500)
    t, out = _in_thread(lambda: fingerprint(data_dir, target=TARGET, sample_cap=500,
                                            cluster=client))
    victim = _kill_a_busy_worker(client)
    t.join(60)
    assert "error" not in out, out.get("error")
    assert out["value"].to_json() == alone.to_json()
    client.wait_for_workers(2, timeout=30)
    assert victim not in client.run(os.getpid).values()  # it really died (and was replaced)


def test_without_retries_a_killed_worker_is_one_clear_error(client, data_dir, slow_tasks):
    scheduler = client.cluster.scheduler
    before = scheduler.allowed_failures
    scheduler.allowed_failures = 0  # dask gives up on the first lost worker
    try:
        t, out = _in_thread(lambda: fingerprint(data_dir, target=TARGET, cluster=client))
        _kill_a_busy_worker(client)
        t.join(60)
    finally:
        scheduler.allowed_failures = before
    assert "value" not in out
    err = out["error"]
    assert isinstance(err, wcluster.ClusterError), repr(err)
    assert "kept dying" in str(err) and "\n" not in str(err)
    assert err.exit_code == 1
