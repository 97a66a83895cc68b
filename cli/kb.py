"""``warmstart kb ...``: create, inspect and maintain the team history."""

from __future__ import annotations

from pathlib import Path

import click

from cli.main import emit_json, handle_errors, json_option, kb_option, main, table
from warmstart.history import KnowledgeBase, resolve_path


# -- kb ---------------------------------------------------------------------------------
@main.group("kb")
def kb_group() -> None:
    """Create and inspect the team history."""


@kb_group.command("init")
@click.argument("path", type=click.Path(path_type=Path))
@json_option
@handle_errors
def kb_init_cmd(path, as_json) -> None:
    """Create an empty history at PATH."""
    kb = KnowledgeBase.init(path)
    if as_json:
        emit_json({"path": str(kb.path), "format_version": kb.format_version})
        return
    click.echo(f"history ready at {kb.path} (format version {kb.format_version})")


@kb_group.command("info")
@kb_option
@json_option
@handle_errors
def kb_info_cmd(kb_path, as_json) -> None:
    """Counts per family and metric, fingerprints per catalogue version, size on disk."""
    info = KnowledgeBase(resolve_path(kb_path)).info()
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


