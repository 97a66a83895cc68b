"""Fingerprint scans on a dask.distributed cluster (optional extra ``warmstart[cluster]``).

A directory of Parquet files is cut into parts (:class:`warmstart.io.Part`, consecutive
row groups of one file). Each part is one task: a worker reads it and returns its
:class:`~warmstart.fingerprint.scan.Accumulator` -- counts, moments, bounded sketches and
the part's share of the sample, never the part's rows -- and the client merges them in
part order, which is exactly what the single-process scan does, so the fingerprint is
the same bit for bit.

The sample is the rows of smallest priority ``mix64(row ^ seed)`` over the whole table.
Priorities need row numbers only, so a first round of tasks computes the smallest
``sample_cap`` priorities of row ranges, one task reduces them to the whole table's
threshold, and every part task keeps only rows at or below it: the sample rows that
travel are the sample's own, not ``sample_cap`` per part. Both rounds are submitted at
once; dask passes the threshold between workers.

A worker lost mid-task is handled by dask: its tasks are run again on another worker, up
to ``distributed.scheduler.allowed-failures`` times, after which the scan fails with a
one-line :class:`ClusterError`. A fingerprint is only ever built from every part (the
merged row count is checked against the files' footers).

The workers read the files themselves, so the path must be the same on every worker
(a shared or network file system) and warmstart must be installed there too. Workers
started by ``dask worker`` set ``MALLOC_TRIM_THRESHOLD_=65536``, which costs this scan
about 50 % more CPU; start them with ``MALLOC_TRIM_THRESHOLD_`` unset in dask's
``distributed.nanny.pre-spawn-environ`` (``local:N`` does).
"""

from __future__ import annotations

import asyncio
import os
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError, WarmstartError
from warmstart.fingerprint.scan import (
    BATCH_ROWS,
    SAMPLE_CAP,
    SEED,
    Layout,
    Scan,
    finish_directory,
    scan,
    scan_part,
    source_of,
)
from warmstart.fingerprint.sketches import BottomKSample
from warmstart.io import open_directory

LOCAL_PREFIX = "local:"
CONNECT_TIMEOUT = "10s"
# Rows per first-round task (priorities only, no data read).
PRIORITY_ROWS = 1 << 22
TRIM_KEY = "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_"
# Test-only: seconds each part task sleeps before reading, to kill a worker mid-task.
SLEEP_ENV = "WARMSTART_TEST_TASK_SLEEP"


class ClusterError(WarmstartError):
    """The cluster could not be reached or could not finish the work (nothing written)."""

    exit_code = 1


@contextmanager
def connect(cluster: Any) -> Iterator[Any]:
    """A ``dask.distributed.Client`` for ``cluster``, closed on exit if made here.

    Parameters
    ----------
    cluster : str or Client
        ``"local:N"`` starts a LocalCluster of N single-threaded worker processes on
        127.0.0.1 for the duration; any other string is a scheduler address
        (``tcp://host:8786``); a Client is used as it is.
    """
    try:
        import dask
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise BadInputError("a cluster needs dask.distributed: pip install "
                            "'warmstart[cluster]'") from None
    if isinstance(cluster, Client):
        yield cluster
        return
    if not isinstance(cluster, str) or not cluster.strip():
        raise BadInputError(f"cluster must be a scheduler address or local:N, not {cluster!r}")
    if cluster.startswith(LOCAL_PREFIX):
        n = cluster[len(LOCAL_PREFIX):]
        if not n.isdigit() or int(n) < 1:
            raise BadInputError(f"cluster {cluster!r}: local:N needs N >= 1 workers")
        # dask's workers start with MALLOC_TRIM_THRESHOLD_=65536, which fixes glibc's mmap
        # threshold, so every large numpy temporary is a fresh mmap: measured +50 % CPU
        # per part (system time). Our tasks' memory is bounded by the batch size anyway.
        with dask.config.set({TRIM_KEY: None}), \
                LocalCluster(n_workers=int(n), threads_per_worker=1, processes=True,
                             host="127.0.0.1", dashboard_address=None) as local, \
                Client(local, set_as_default=False) as client:
            yield client
        return
    try:
        client = Client(cluster, timeout=CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ClusterError(f"could not reach the dask scheduler at {cluster}: "
                           f"{_line(exc)}") from None
    with client:
        yield client


def scan_on_cluster(data: str | os.PathLike, target: str, cluster: Any, *,
                    sample_cap: int = SAMPLE_CAP, batch_rows: int = BATCH_ROWS) -> Scan:
    """The :func:`~warmstart.fingerprint.scan.scan` of a table, computed on a cluster.

    A directory of Parquet files runs one task per part; a single file (Parquet, CSV,
    JSON lines) runs as one task. Raises :class:`BadInputError` for unusable data and
    :class:`ClusterError` when the cluster fails.
    """
    if isinstance(data, pd.DataFrame):
        raise BadInputError("a cluster reads the data itself: give the path of a file or "
                            "directory, not a DataFrame")
    path = os.path.abspath(os.fspath(data))
    if not os.path.exists(path):
        raise BadInputError(f"file not found: {data}")
    if not os.path.isdir(path):
        with connect(cluster) as client:
            fut = client.submit(_scan_file, path, target, sample_cap, batch_rows,
                                key=_key("file"), pure=False)
            return _result(fut, path)
    directory = open_directory(path)  # footers only, on the client
    layout = Layout.of(directory.schema, target)
    with connect(cluster) as client:
        bound = _sample_bound(client, directory.n_rows, sample_cap)
        futures = [client.submit(_scan_part_task, directory.schema, part, layout, sample_cap,
                                 batch_rows, bound, key=_key(f"part-{i}"), pure=False)
                   for i, part in enumerate(directory.parts)]
        total = None
        for part, fut in zip(directory.parts, futures):  # in part order, as scan() does
            acc = _result(fut, f"{part.path} (row groups {list(part.row_groups)})")
            fut.release()
            total = acc if total is None else total.merge(acc)
        return finish_directory(directory, total, layout, sample_cap)


def _sample_bound(client, n_rows: int, sample_cap: int):
    """A future of the sample's priority threshold (first round + one reduction)."""
    workers = max(1, len(client.scheduler_info().get("workers", {})))
    n_tasks = max(1, min(workers, -(-n_rows // PRIORITY_ROWS)))
    edges = np.linspace(0, n_rows, n_tasks + 1).astype(np.int64)
    smallest = [client.submit(_smallest, int(lo), int(hi), sample_cap, key=_key("rows"),
                              pure=False) for lo, hi in zip(edges[:-1], edges[1:])]
    return client.submit(_bound, sample_cap, *smallest, key=_key("bound"), pure=False)


def _result(fut, what: str):
    """A task's result; a lost worker or a broken connection becomes one line."""
    from distributed import KilledWorker

    try:
        return fut.result()
    except WarmstartError:
        raise
    except KilledWorker as exc:
        raise ClusterError(f"dask workers kept dying while reading {what}; gave up after "
                           f"the allowed retries ({_line(exc)}); nothing was computed"
                           ) from None
    except (OSError, TimeoutError) as exc:
        raise ClusterError(f"lost the dask cluster while reading {what}: {_line(exc)}"
                           ) from None
    except (Exception, asyncio.CancelledError) as exc:  # any other failure, e.g. MemoryError
        raise ClusterError(f"a dask task failed while reading {what}: "
                           f"{type(exc).__name__}: {_line(exc)}") from None


# -- what the workers run --------------------------------------------------------------
def _scan_file(path: str, target: str, sample_cap: int, batch_rows: int) -> Scan:
    return scan(source_of(path, batch_rows), target, sample_cap)


def _scan_part_task(schema, part, layout, sample_cap, batch_rows, bound):
    delay = float(os.environ.get(SLEEP_ENV, "0") or 0)
    if delay > 0:
        time.sleep(delay)
    return scan_part(schema, part, layout, sample_cap, batch_rows, bound)


def _smallest(start: int, stop: int, cap: int) -> np.ndarray:
    return BottomKSample(cap, SEED).smallest(start, stop)


def _bound(cap: int, *smallest: np.ndarray) -> int | None:
    return BottomKSample.bound_of(list(smallest), cap)


def _key(what: str) -> str:
    return f"warmstart-{what}-{uuid.uuid4().hex}"


def _line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
