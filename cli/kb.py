"""``warmstart kb ...``: create, inspect and maintain the team history."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from cli.common import directory_option, handle_errors, json_option, kb_option, open_history
from cli.output import emit_json, table
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
               f"{info['datasets']} datasets, {info['studies']} studies, "
               f"{info['trials']} trials, {info['files']} files, "
               f"{info['bytes_on_disk'] / 1024:.1f} KiB on disk")
    if info["by_family"]:
        rows = [[r["family"], r["task"], r["metric"], r["studies"], r["datasets"], r["trials"]]
                for r in info["by_family"]]
        click.echo(table(rows, ["family", "task", "metric", "studies", "datasets", "trials"]))
    versions = ", ".join(f"v{k}: {v}" for k, v in
                         info["fingerprints_by_catalogue_version"].items())
    click.echo(f"fingerprints by catalogue version: {versions or 'none'}")


@kb_group.command("check")
@kb_option
@click.option("--repair", is_flag=True,
              help="Remove leftovers of killed writers; set unreadable files aside.")
@click.option("--grace", "grace_seconds", type=float, default=None,
              help="Leftovers younger than this many seconds may belong to a running "
                   "writer and are left alone [default: 900].")
@json_option
@handle_errors
def kb_check_cmd(kb_path, server, repair, grace_seconds, as_json) -> None:
    """Verify the history's integrity (exit code 1 when a problem remains)."""
    report = open_history(kb_path, server).check(repair=repair, grace_seconds=grace_seconds)
    if as_json:
        emit_json(report.to_dict())
    else:
        c = report.counts
        head = f"history {report.path} (format version {report.format_version})"
        if c:
            head += (f": {c['datasets']} datasets, {c['studies']} studies, "
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
    """Merge each table's many small files into one (content unchanged)."""
    out = open_history(kb_path, server).compact()
    if as_json:
        emit_json(out)
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
    click.echo(f"exported {out['datasets']} datasets, {out['studies']} studies, "
               f"{out['trials']} trials to {out['file']} ({out['bytes'] / 1024:.1f} KiB)")


@kb_group.command("import")
@click.argument("file", type=click.Path(path_type=str))  # str: a URI is named as given
@kb_option
@json_option
@handle_errors
def kb_import_cmd(file, kb_path, server, as_json) -> None:
    """Merge another team's exported FILE; studies already present are skipped."""
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
               f"{out['to_version']}: {out['datasets']} datasets, {out['studies']} studies, "
               f"{out['trials']} trials; old file kept at {out['backup']}")
