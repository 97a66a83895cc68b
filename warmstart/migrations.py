"""Converting a history of an older format to the current one, in place (``kb migrate``).

* Format 0 (warmstart 0.0.x) kept one flat ``trials.parquet``: a row per trial with the
  columns :data:`FORMAT0_COLUMNS` (``params`` a JSON object, ``study`` a label unique per
  study) and one ``fp_<name>`` float column per meta-feature. Study ids are derived from
  the study labels, so migrating again after an interruption gives the same ids. The old
  file is moved to ``backup-format-0/`` once the new marker (the commit point) is written.
* Format 1 had the current three tables, with the study fields ``direction``
  (``maximize``/``minimize``) and ``n_trials``, no content hash, no ``deletions/``
  table, and a dataset's *earliest* row giving its name. Its committed files are first
  copied to ``backup-format-1/`` (marked complete by a file ``complete``); the visible
  rows are then read from the copy, converted (one row per dataset, keeping the name
  format-1 readers showed), and written as ``migrated-*`` files in place of the old ones;
  the new marker commits. An interrupted migration is simply run again.

Both keep what readers saw: the same studies, trials and dataset names. Run it while
nobody else uses the history (readers refuse a history of an older format anyway).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from warmstart.errors import BadInputError
from warmstart.layout import (
    FORMAT1_STUDIES,
    FORMAT_VERSION,
    SCHEMAS,
    TABLE_DIRS,
    read_marker,
    write_marker,
)
from warmstart.maintenance import _refuse_problems
from warmstart.records import FORMAT1_BETTER, content_hashes, studies_from_format1
from warmstart.spaces import config_key
from warmstart.storage import (
    batch_name,
    fsync_dir,
    parse_log_name,
    visible_files,
    write_atomic,
    write_bytes_atomic,
)
from warmstart.values import finite_or_none
from warmstart.version import __version__

FORMAT0_FILE = "trials.parquet"
FORMAT0_COLUMNS = ("study", "logged_at", "dataset", "dataset_hash", "task", "target",
                   "family", "metric", "direction", "catalogue_version", "params", "score",
                   "fit_seconds", "status")
FP_PREFIX = "fp_"
BACKUP_DONE = "complete"
def migrate(path: str | os.PathLike) -> dict[str, Any]:
    """Convert the format-0 or format-1 history at ``path`` to the current format, in
    place (see the module docstring); a current history is left as it is.

    Returns
    -------
    dict
        ``from_version``, ``to_version``, ``migrated``, the rows per table written and
        where the old files are kept (``backup``).
    """
    root = Path(path)
    marker, version = read_marker(root)
    if version == FORMAT_VERSION:
        return {"path": str(root), "from_version": version, "to_version": version,
                "migrated": False, "datasets": 0, "studies": 0, "trials": 0}
    if version not in (0, 1):
        raise BadInputError(f"cannot migrate format version {version}; this warmstart "
                            f"{__version__} migrates formats 0 and 1 to {FORMAT_VERSION}")
    if not os.access(root, os.W_OK):
        raise BadInputError(f"history {root} is read-only; cannot migrate it")
    by = str(marker.get("created_by", f"warmstart of format {version}"))
    if version == 0:
        src = backup = root / FORMAT0_FILE
        tables = _from_format0(_read_format0(src), by.replace("warmstart ", ""))
    else:
        src = backup = _backup_format1(root)
        tables = _read_format1(backup)
    _refuse_problems({t: v.to_pandas() for t, v in tables.items()}, src, version)
    for t in TABLE_DIRS:  # the old files (kept in the backup) or an interrupted run's
        d = root / t
        d.mkdir(exist_ok=True)
        for f in visible_files(d):
            f.unlink()
    for t in ("datasets", "trials", "studies"):
        write_atomic(tables[t], root / t, batch_name("migrated"))
    write_marker(root, migrated_from={"format_version": version, "created_by": by})
    if version == 0:
        backup = root / "backup-format-0" / FORMAT0_FILE
        backup.parent.mkdir(exist_ok=True)
        shutil.move(str(src), str(backup))
    return {"path": str(root), "from_version": version, "to_version": FORMAT_VERSION,
            "migrated": True, **{t: int(tables[t].num_rows) for t in SCHEMAS},
            "backup": str(backup)}


def _backup_format1(root: Path) -> Path:
    """Copy the format-1 table files to ``backup-format-1/`` once (a file ``complete``
    marks a finished copy, which a re-run then reads instead of the table folders)."""
    backup = root / "backup-format-1"
    if (backup / BACKUP_DONE).is_file():
        return backup
    for t in SCHEMAS:
        dest = backup / t
        dest.mkdir(parents=True, exist_ok=True)
        for f in visible_files(root / t):
            shutil.copy2(f, dest / f.name)
        fsync_dir(dest)
    write_bytes_atomic(b"format-1 files copied before migration\n", backup / BACKUP_DONE)
    return backup


def _read_format1(src: Path) -> dict[str, pa.Table]:
    """What format-1 readers saw in the tables under ``src``, as current tables."""
    def read(table: str, schema: pa.Schema, ids: set[str] | None) -> pd.DataFrame:
        files = [f for f in visible_files(src / table) if ids is None
                 or (p := parse_log_name(f)) is None or p[0] in ids]
        parts = [pq.read_table(f).select(schema.names).cast(schema) for f in files]
        return (pa.concat_tables(parts) if parts else schema.empty_table()).to_pandas()

    studies = read("studies", FORMAT1_STUDIES, None).sort_values(
        ["study_id", "created_at"], kind="stable").drop_duplicates("study_id")
    ids = set(studies["study_id"])
    trials = read("trials", SCHEMAS["trials"], ids)
    trials = trials[trials["study_id"].isin(ids)].sort_values(
        ["study_id", "trial_index"], kind="stable").drop_duplicates(["study_id", "trial_index"])
    datasets = read("datasets", SCHEMAS["datasets"], ids)
    # format 1 named a dataset by its earliest row
    datasets = datasets[datasets["dataset_id"].isin(studies["dataset_id"])].sort_values(
        ["dataset_id", "created_at", "name"], kind="stable").drop_duplicates("dataset_id")
    frames = {"datasets": datasets, "studies": studies_from_format1(studies, trials),
              "trials": trials}
    return {t: pa.Table.from_pandas(f, schema=SCHEMAS[t], preserve_index=False)
            for t, f in frames.items()}


def _read_format0(src: Path) -> pd.DataFrame:
    """The flat format-0 table, with every column :data:`FORMAT0_COLUMNS` names."""
    try:
        flat = pq.read_table(src).to_pandas()
    except (OSError, pa.ArrowException) as exc:
        raise BadInputError(f"cannot read the format-0 table {src}: {exc}") from None
    missing = [c for c in FORMAT0_COLUMNS if c not in flat.columns]
    if missing:
        raise BadInputError(f"{src} is not a format-0 table (missing {', '.join(missing)})")
    return flat


def _format0_config(text: Any) -> str:
    try:
        config = json.loads(text)
    except (TypeError, ValueError):
        config = None
    if not isinstance(config, dict):
        raise BadInputError(f"format-0 params {str(text)[:40]!r} is not a JSON object")
    return config_key(config)


def _from_format0(flat: pd.DataFrame, tool_version: str) -> dict[str, pa.Table]:
    fp_cols = [c for c in flat.columns if c.startswith(FP_PREFIX)]
    flat = flat.reset_index(drop=True)
    flat["logged_at"] = pd.to_datetime(flat["logged_at"], utc=True)
    flat["trial_index"] = flat.groupby("study", sort=False).cumcount()
    flat["dataset_id"] = flat["dataset_hash"].str[:16]
    flat["study_id"] = [hashlib.sha256(f"format0:{s}".encode()).hexdigest()[:32]
                        for s in flat["study"]]
    first = flat.groupby("study", sort=False).head(1)
    studies = pd.DataFrame({
        "study_id": first["study_id"], "dataset_id": first["dataset_id"],
        "family": first["family"], "task": first["task"], "metric": first["metric"],
        "better": first["direction"].map(lambda v: FORMAT1_BETTER.get(v, v)),
        "label": first["study"],
        "trial_count": first["study"].map(flat["study"].value_counts()).astype("int32"),
        "source": "log", "tool_version": tool_version, "created_at": first["logged_at"]})
    ds = first.sort_values("logged_at", kind="stable").drop_duplicates("dataset_id")
    meta = [json.dumps({c[len(FP_PREFIX):]: finite_or_none(v) for c, v in zip(fp_cols, row)},
                       sort_keys=True)
            for row in ds[fp_cols].to_numpy(dtype=float)]
    datasets = pd.DataFrame({
        "dataset_id": ds["dataset_id"], "name": ds["dataset"], "task": ds["task"],
        "target": ds["target"], "catalogue_version": ds["catalogue_version"].astype("int32"),
        "meta_features": meta, "warnings": "[]", "created_at": ds["logged_at"]})
    trials = pd.DataFrame({
        "study_id": flat["study_id"], "trial_index": flat["trial_index"].astype("int32"),
        "config": [_format0_config(p) for p in flat["params"]],
        "score": flat["score"].astype(float), "fit_seconds": flat["fit_seconds"].astype(float),
        "status": flat["status"], "error": None})
    studies["content_hash"] = content_hashes(studies, trials)
    return {name: pa.Table.from_pandas(frame, schema=SCHEMAS[name], preserve_index=False)
            for name, frame in (("datasets", datasets), ("studies", studies),
                                ("trials", trials))}
