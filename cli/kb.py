"""``warmstart kb ...``: create, inspect and maintain the team history."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from cli.common import directory_option, handle_errors, json_option, kb_option, open_history
from cli.output import emit_json, plural, table
from warmstart.history import KnowledgeBase, resolve_path


# -- kb ---------------------------------------------------------------------------------
@click.group("kb")
def kb_group() -> None:
    """Create and inspect the team history."""


@kb_group.command("init")
@click.argument("path", type=click.Path(path_type=str))  # a path or a file:// URI
@json_option
@handle_errors
def kb_init_cmd(path, as_json) -> None:
    """Create an empty history at PATH (a path or a file:// URI)."""
    kb = KnowledgeBase.init(path)
    if as_json:
        emit_json({"path": str(kb.path), "format_version": kb.format_version})
        return
    click.echo(f"history ready at {kb.path} (format version {kb.format_version})")


@kb_group.command("info")
@kb_option
@json_option
@handle_errors
def kb_info_cmd(kb_path, server, as_json) -> None:
    """Counts per family and metric, fingerprints per catalogue version, size on disk."""
    info = open_history(kb_path, server).info()
    if as_json:
        emit_json(info)
        return
    click.echo(f"history {info['path']} (format version {info['format_version']}): "
               f"{plural(info['datasets'], 'dataset')}, {plural(info['studies'], 'study')}, "
               f"{info['trials']} trials, {info['files']} files, "
               f"{info['bytes_on_disk'] / 1024:.1f} KiB on disk")
    if info["by_family"]:
        rows = [[r["family"], r["task"], r["metric"], r["studies"], r["datasets"], r["trials"]]
                for r in info["by_family"]]
        click.echo(table(rows, ["family", "task", "metric", "studies", "datasets", "trials"]))
    if info["studies_all_failed"]:
        click.echo(f"studies with no successful trial: {info['studies_all_failed']} (kept; "
                   "suggest, backtest and similar leave them out)")
    versions = ", ".join(f"v{k}: {v}" for k, v in
                         info["fingerprints_by_catalogue_version"].items())
    click.echo(f"fingerprints by catalogue version: {versions or 'none'}")


@kb_group.command("check")
@kb_option
@click.option("--repair", is_flag=True,
              help="Remove leftovers of killed writers; move unreadable and foreign "
                   "files to quarantine/ (never deleted).")
@click.option("--grace", "grace_seconds", type=float, default=None,
              help="Leftovers younger than this many seconds may belong to a running "
                   "writer and are left alone [default: 900].")
@json_option
@handle_errors
def kb_check_cmd(kb_path, server, repair, grace_seconds, as_json) -> None:
    """Verify the history's integrity (exit code 1 when a problem remains).

    Notes (exit code 0) include studies whose every trial failed: they are kept, and
    suggest, backtest and similar leave them out.
    """
    report = open_history(kb_path, server).check(repair=repair, grace_seconds=grace_seconds)
    if as_json:
        emit_json(report.to_dict())
    else:
        c = report.counts
        head = f"history {report.path} (format version {report.format_version})"
        if c:
            head += (f": {plural(c['datasets'], 'dataset')}, {plural(c['studies'], 'study')}, "
                     f"{c['trials']} trials in {c['files']} files")
        click.echo(head)
        rows = [[f.check, f.status, f.detail or "-"] for f in report.findings]
        click.echo(table(rows, ["check", "result", "detail"], align="lll"))
        n = len(report.problems)
        click.echo("no problems found" if report.ok else f"{n} problem(s) found")
    if not report.ok:
        sys.exit(1)


@kb_group.command("compact")
@kb_option
@json_option
@handle_errors
def kb_compact_cmd(kb_path, server, as_json) -> None:
    """Merge each table's many small files into one (content unchanged).

    One compaction runs at a time: while another holds the history's lock, this one
    says so and exits 0. A lock whose process is gone, or older than an hour, is taken
    over.
    """
    out = open_history(kb_path, server).compact()
    if as_json:
        emit_json(out)
        return
    if not out["compacted"]:
        click.echo(f"another compaction is running ({out['running']}); nothing done")
        return
    b, a = out["before"], out["after"]
    rows = [[what, b[key], a[key]] for what, key in
            (("files", "files"), ("datasets", "datasets"), ("studies", "studies"),
             ("trials", "trials"), ("content hash", "content_hash"))]
    rows[-1] = [rows[-1][0], b["content_hash"][:16], a["content_hash"][:16]]
    click.echo(table(rows, ["", "before", "after"], align="lrr"))
    click.echo(f"removed {out['removed']} merged files; content "
               f"{'unchanged' if b['content_hash'] == a['content_hash'] else 'CHANGED'}")


@kb_group.command("export")
@click.argument("file", type=click.Path(path_type=Path))
@kb_option
@json_option
@handle_errors
def kb_export_cmd(file, kb_path, server, as_json) -> None:
    """Write the whole history to one portable FILE (a ZIP of three Parquet tables)."""
    out = open_history(kb_path, server).export(file)
    if as_json:
        emit_json(out)
        return
    click.echo(f"exported {plural(out['datasets'], 'dataset')}, {plural(out['studies'], 'study')}, "
               f"{out['trials']} trials to {out['file']} ({out['bytes'] / 1024:.1f} KiB)")


@kb_group.command("import")
@click.argument("file", type=click.Path(path_type=str))  # str: a URI is named as given
@kb_option
@json_option
@handle_errors
def kb_import_cmd(file, kb_path, server, as_json) -> None:
    """Merge another team's exported FILE; studies already present are skipped.

    The file is checked before anything is written: its tables must have the content
    hash its marker states, and it may hold at most 2 GiB uncompressed.
    """
    out = open_history(kb_path, server).import_(file)
    if as_json:
        emit_json(out)
        return
    click.echo(f"imported {out['studies_added']} studies ({out['trials_added']} trials, "
               f"{out['datasets_added']} new datasets); {out['studies_already_present']} "
               "studies were already present")


@kb_group.command("migrate")
@directory_option
@json_option
@handle_errors
def kb_migrate_cmd(kb_path, as_json) -> None:
    """Convert a history of an older format version to the current one, in place."""
    out = KnowledgeBase.migrate(resolve_path(kb_path))
    if as_json:
        emit_json(out)
        return
    if not out["migrated"]:
        click.echo(f"history {out['path']} already has format version {out['to_version']}")
        return
    click.echo(f"migrated {out['path']} from format {out['from_version']} to "
               f"{out['to_version']}: {plural(out['datasets'], 'dataset')}, "
               f"{plural(out['studies'], 'study')}, "
               f"{out['trials']} trials; old file kept at {out['backup']}")


# -- the studies as records ---------------------------------------------------------------
def _study_line(s) -> list:
    return [s["study_id"][:12], s["family"], s["metric"], s["better"], s["trial_count"],
            s["ok"], s["best_score"], s["created_at"][:10], s["label"]]


_STUDY_HEAD = ["study", "family", "metric", "better", "trials", "ok", "best", "logged",
               "label"]


@kb_group.command("list")
@kb_option
@json_option
@handle_errors
def kb_list_cmd(kb_path, server, as_json) -> None:
    """The datasets with their studies: ids, family, metric, trials, best score, date."""
    datasets = open_history(kb_path, server).list_studies()
    if as_json:
        emit_json(datasets)
        return
    if not datasets:
        click.echo("the history holds no studies yet (add one with 'warmstart log')")
        return
    rows = [[d["name"], d["dataset_id"][:12], *_study_line(s)]
            for d in datasets for s in d["studies"]]
    click.echo(table(rows, ["dataset", "id", *_STUDY_HEAD], align="lllllrrrll"))
    n = sum(len(d["studies"]) for d in datasets)
    click.echo(f"{plural(len(datasets), 'dataset')}, {plural(n, 'study')}")


@kb_group.command("show")
@click.argument("ref", metavar="STUDY|DATASET")
@kb_option
@json_option
@handle_errors
def kb_show_cmd(ref, kb_path, server, as_json) -> None:
    """One study (its trials) or one dataset (its studies), by id, unique id prefix or
    name."""
    out = open_history(kb_path, server).show(ref)
    if as_json:
        emit_json(out)
        return
    if out["kind"] == "dataset":
        click.echo(f"dataset {out['dataset_id']} '{out['name']}': {out['task']}, target "
                   f"{out['target']}, {len(out['meta_features'])} meta-features, first "
                   f"logged {out['created_at']}")
        click.echo(table([_study_line(s) for s in out["studies"]], _STUDY_HEAD,
                         align="llllrrrll"))
        return
    click.echo(f"study {out['study_id']} '{out['label']}' on dataset {out['dataset_id']} "
               f"'{out['dataset_name']}': {out['family']}, {out['task']}, {out['metric']} "
               f"({out['better']} is better), {out['trial_count']} trials, "
               f"{out['source']}, logged {out['created_at']}")
    rows = [[t["trial_index"], t["status"], t["score"], t["fit_seconds"],
             json.dumps(t["config"], sort_keys=True)] for t in out["trials"]]
    click.echo(table(rows, ["trial", "status", "score", "fit s", "configuration"],
                     align="rlrrl"))


@kb_group.command("delete")
@click.argument("ref", metavar="STUDY")
@kb_option
@json_option
@handle_errors
def kb_delete_cmd(ref, kb_path, server, as_json) -> None:
    """Delete one STUDY (id, unique id prefix or label): every reader skips it from now
    on, and 'kb compact' drops its rows."""
    out = open_history(kb_path, server).delete(ref)
    if as_json:
        emit_json(out)
        return
    click.echo(f"deleted study {out['study_id']} ({out['family']}, {out['metric']}, "
               f"{out['trial_count']} trials) of dataset {out['dataset_id']} "
               f"'{out['dataset_name']}'")
