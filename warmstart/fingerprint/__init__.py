"""Dataset fingerprints: a named vector of meta-features with its catalogue version.

>>> from warmstart import fingerprint
>>> fp = fingerprint(df, target="churned")      # doctest: +SKIP
>>> fp.values["class_entropy_normalised"]       # doctest: +SKIP
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from importlib import import_module
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.fingerprint.catalogue import (
    CATALOGUE,
    CATALOGUE_VERSION,
    GROUPS,
    MetaFeature,
    catalogue,
    range_problem,
)
from warmstart.fingerprint.profile import (
    TASKS,
    DatasetProfile,
    build_profile,
    infer_task,
    profile_frame,
    profile_table,
)
from warmstart.fingerprint.scan import BATCH_ROWS, SAMPLE_CAP
from warmstart.io import read_json_file, read_table

# Importing a group module registers its meta-features; this order is the catalogue's.
GROUP_MODULES = ("shape", "target", "missing", "numeric", "categorical", "structure",
                 "information", "landmarks", "complexity")
for _module in GROUP_MODULES:
    import_module(f"{__name__}.{_module}")

FINGERPRINT_KIND = "warmstart-fingerprint"
KNOWN_CATALOGUE_VERSIONS = tuple(range(1, CATALOGUE_VERSION + 1))


@dataclass
class Fingerprint:
    """A dataset's meta-features, with what is needed to store and compare them.

    Attributes
    ----------
    values : dict of str to float
        Meta-feature name -> value; NaN where undefined.
    catalogue_version : int
    task : {"classification", "regression"}
    target : str
        The target column's name.
    dataset_hash : str
        SHA-256 of the table's content: equal hashes mean the same data.
    warnings : list of str
    """

    values: dict[str, float]
    catalogue_version: int
    task: str
    target: str
    dataset_hash: str
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-compatible form; NaN becomes null."""
        return {
            "kind": FINGERPRINT_KIND,
            "catalogue_version": self.catalogue_version,
            "task": self.task,
            "target": self.target,
            "dataset_hash": self.dataset_hash,
            "warnings": list(self.warnings),
            "meta_features": {k: _json_float(v) for k, v in self.values.items()},
        }

    def to_json(self, indent: int | None = 2) -> str:
        return json.dumps(self.to_dict(), indent=indent, allow_nan=False)

    @classmethod
    def from_dict(cls, d: Any) -> Fingerprint:
        """Rebuild from :meth:`to_dict`, validating it (raises :class:`BadInputError`)."""
        if not isinstance(d, dict) or d.get("kind") != FINGERPRINT_KIND:
            raise BadInputError("not a warmstart fingerprint (expected the output of "
                                "'warmstart fingerprint --json')")
        version = d.get("catalogue_version")
        if isinstance(version, bool) or version not in KNOWN_CATALOGUE_VERSIONS:
            raise BadInputError(
                f"fingerprint has unknown catalogue version {version!r}; this warmstart "
                f"knows versions {list(KNOWN_CATALOGUE_VERSIONS)}"
            )
        if d.get("task") not in TASKS:
            raise BadInputError(f"fingerprint has an invalid task {d.get('task')!r}")
        values = d.get("meta_features")
        if not isinstance(values, dict) or not values:
            raise BadInputError("fingerprint has no meta_features object")
        clean: dict[str, float] = {}
        for k, v in values.items():
            if v is None:
                clean[k] = float("nan")
            elif isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
                clean[k] = float(v)
            else:
                raise BadInputError(f"fingerprint meta-feature {k!r} is not a number: {v!r}")
        unknown = sorted(set(clean) - set(CATALOGUE)) if version == CATALOGUE_VERSION else []
        if unknown:
            raise BadInputError(f"fingerprint has unknown meta-features: {', '.join(unknown)}")
        for k in (k for k in CATALOGUE if k in clean):  # catalogue order: rows first
            why = range_problem(k, clean[k], clean)
            if why:
                raise BadInputError(f"fingerprint meta-feature {k!r} {why}")
        h = d.get("dataset_hash")
        if not isinstance(h, str) or len(h) != 64:
            raise BadInputError("fingerprint has no valid dataset_hash")
        return cls(clean, int(version), d["task"], str(d.get("target", "")), h,
                   [str(w) for w in d.get("warnings", [])])

    @classmethod
    def from_json_file(cls, path: str | os.PathLike) -> Fingerprint:
        return cls.from_dict(read_json_file(path, "fingerprint"))

    def grouped(self) -> dict[str, dict[str, float]]:
        """Values arranged by catalogue group, in catalogue order."""
        out: dict[str, dict[str, float]] = {}
        for name, mf in CATALOGUE.items():
            if name in self.values:
                out.setdefault(mf.group, {})[name] = self.values[name]
        return out


def _json_float(v: float) -> float | None:
    return None if v is None or not math.isfinite(v) else float(v)


def load_frame(data: pd.DataFrame | str | os.PathLike) -> pd.DataFrame:
    """Accept a DataFrame, a path to a CSV/Parquet/JSON-lines file or a directory of
    Parquet files (see :func:`warmstart.io.open_directory`)."""
    if isinstance(data, pd.DataFrame):
        return data
    return read_table(data)


def fingerprint(data: pd.DataFrame | str | os.PathLike, target: str,
                task: str | None = None, *, sample_cap: int = SAMPLE_CAP,
                batch_rows: int = BATCH_ROWS, cluster: Any = None) -> Fingerprint:
    """Compute a dataset's fingerprint.

    The table is read once: a Parquet file in record batches of ``batch_rows`` rows (its
    memory use does not grow with its length), a DataFrame cut into batches the same way
    (a frame and its Parquet file give the same fingerprint), a CSV or JSON-lines file
    read whole first. A directory of Parquet files (hive-style ``key=value``
    sub-directories become columns) is read file by file in batches, its files in sorted
    path order. Exact groups use every row; sample-based groups use a seeded sample of
    ``sample_cap`` rows. The same table always gives the same fingerprint.

    A directory's ``dataset_hash`` depends on the set of rows only, not on their order
    or on how they are split over files, so re-partitioned data keeps its hash; it
    differs from the hash of the same rows in one file (see :mod:`.scan`).

    Parameters
    ----------
    data : DataFrame or path
        The table (features and target), a CSV / Parquet / JSON-lines file, or a
        directory of Parquet files.
    target : str
        Name of the target column.
    task : {"classification", "regression"}, optional
        Inferred from the target when omitted (see :func:`infer_task`).
    sample_cap : int, default 5000
        Rows in the sample used by sample-based meta-features.
    batch_rows : int, default 65536
        Rows per batch while reading.
    cluster : str or dask.distributed.Client, optional
        Scan on a dask cluster instead (a scheduler address, ``"local:N"`` for a local
        cluster of N worker processes, or a Client; needs ``warmstart[cluster]``): one
        task per part of a directory, one task for a single file; ``data`` must be a
        path the workers can read. The result is identical to the single-process one.
        See :mod:`warmstart.cluster`.

    Returns
    -------
    Fingerprint
        Its ``warnings`` say which dirty columns were found and what was done with them.
    """
    if cluster is None:
        profile = profile_table(data, target, task, sample_cap=sample_cap,
                                batch_rows=batch_rows)
        return fingerprint_profile(profile)
    from warmstart.cluster import scan_on_cluster  # dask is an optional dependency

    if task is not None and task not in TASKS:
        raise BadInputError(f"task must be 'classification' or 'regression', not {task!r}")
    if sample_cap < 10 or batch_rows < 1:
        raise BadInputError("sample_cap must be at least 10 and batch_rows at least 1")
    s = scan_on_cluster(data, str(target), cluster, sample_cap=sample_cap,
                        batch_rows=batch_rows)
    return fingerprint_profile(build_profile(s, task))


def fingerprint_profile(profile: DatasetProfile) -> Fingerprint:
    """Compute every catalogue meta-feature on a prepared profile."""
    with np.errstate(all="ignore"):
        values = {name: mf.compute(profile) for name, mf in CATALOGUE.items()}
    return Fingerprint(values, CATALOGUE_VERSION, profile.task, profile.target,
                       profile.dataset_hash, list(profile.warnings))


__all__ = ["CATALOGUE", "CATALOGUE_VERSION", "GROUPS", "DatasetProfile", "Fingerprint",
           "MetaFeature", "catalogue", "fingerprint", "fingerprint_profile", "infer_task",
           "load_frame", "profile_frame", "profile_table"]
