"""``warmstart serve``, ``warmstart map`` and ``warmstart report``.

Standalone click commands, each a thin layer over the library function of the same
name (:func:`warmstart.service.app.serve`, :func:`warmstart.service.maps.map`,
:func:`warmstart.service.report.report`), to register on the main group with
``main.add_command`` (:data:`COMMANDS`). ``python -m cli.serve`` runs the server alone.
"""

from __future__ import annotations

import os
from pathlib import Path

import click

from cli.common import (
    data_options,
    dataset_input,
    directory_option,
    handle_errors,
    json_option,
    kb_option,
    open_history,
)
from cli.output import emit_json, fmt, table
from warmstart.errors import BadInputError
from warmstart.history import resolve_path
from warmstart.service.client import TOKEN_ENV, query_fingerprint
from warmstart.service.security import (
    DEFAULT_MAX_BODY_BYTES,
    check_token,
    exposure_warnings,
    read_token_file,
)

READ_TOKEN_ENV = "WARMSTART_READ_TOKEN"


def _tokens(token_file: Path | None, read_token_file_: Path | None) -> tuple:
    token = (read_token_file(token_file, "token") if token_file is not None
             else check_token(os.environ.get(TOKEN_ENV) or None, f"${TOKEN_ENV}"))
    read = (read_token_file(read_token_file_, "read token") if read_token_file_ is not None
            else check_token(os.environ.get(READ_TOKEN_ENV) or None, f"${READ_TOKEN_ENV}"))
    return token, read


# -- serve ----------------------------------------------------------------------------------
@click.command("serve")
@directory_option
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on (loopback unless you say otherwise).")
@click.option("--port", default=8765, show_default=True, type=click.IntRange(0, 65535))
@click.option("--token-file", type=click.Path(path_type=Path), default=None,
              help=f"File holding the write token, readable by its owner only "
                   f"[default: ${TOKEN_ENV}]. Without a token the server takes no writes.")
@click.option("--read-token-file", type=click.Path(path_type=Path), default=None,
              help=f"File holding a token that reads need too [default: ${READ_TOKEN_ENV}].")
@click.option("--max-body-bytes", default=DEFAULT_MAX_BODY_BYTES, show_default=True,
              type=click.IntRange(min=1024), help="Larger request bodies are refused.")
@click.option("--log-level", default="warning", show_default=True,
              type=click.Choice(["critical", "error", "warning", "info", "debug"]))
@handle_errors
def serve_cmd(kb_path, host, port, token_file, read_token_file, max_body_bytes,
              log_level) -> None:
    """Serve the history over HTTP: a JSON API and a read-only web view at /."""
    try:
        from warmstart.service.app import serve
    except ImportError:
        raise BadInputError("serving needs FastAPI and uvicorn; install them with "
                            "pip install 'warmstart[serve]'") from None
    token, read = _tokens(token_file, read_token_file)
    for w in exposure_warnings(host, token, read):
        click.echo(f"warning: {w}", err=True)
    path = resolve_path(kb_path)

    def ready(url: str) -> None:
        writes = "need the token" if token else "disabled (no token)"
        reads = "need a token" if read else "open"
        click.echo(f"serving history {path} at {url} (writes {writes}; reads {reads}); "
                   "Ctrl-C stops", err=True)

    serve(path, host=host, port=port, token=token, read_token=read,
          max_body_bytes=max_body_bytes, log_level=log_level, on_ready=ready)


# -- map --------------------------------------------------------------------------------------
@click.command("map")
@click.option("--out", "-o", required=True, type=click.Path(path_type=Path),
              help="Picture to write: .svg or .png.")
@data_options
@kb_option
@json_option
@handle_errors
def map_cmd(out, data, target, task, fingerprint_file, kb_path, server, as_json) -> None:
    """Draw the history's datasets by meta-feature distance; optionally place DATA."""
    from warmstart.service.maps import map as draw_map

    history = open_history(kb_path, server)
    query = None
    if data is not None or fingerprint_file is not None:  # a dataset to place
        query = query_fingerprint(dataset_input(data, target, fingerprint_file), target,
                                  task, fingerprint_file)
    label = Path(fingerprint_file or data).stem if query is not None else "query"
    info = draw_map(history, out, query=query, query_label=label)
    if as_json:
        emit_json(info)
        return
    counts = ", ".join(f"{n} {t}" for t, n in info["datasets"].items()) or "no datasets"
    where = ""
    if "query" in info:
        x, y = info["query"]["position"]
        where = f"; {label} placed at ({fmt(x)}, {fmt(y)}) on the {info['query']['task']} panel"
    click.echo(f"map of {counts} datasets written to {out}{where}")


# -- report ------------------------------------------------------------------------------------
@click.command("report")
@data_options
@click.option("--out", "-o", required=True, type=click.Path(path_type=Path),
              help="HTML file to write.")
@click.option("--family", "-f", "family_names", multiple=True,
              help="Suggest for this family (repeatable) [default: every family the "
                   "history has studies of for the task].")
@click.option("-k", default=5, show_default=True, type=click.IntRange(min=1),
              help="Neighbours shown and suggestions per family.")
@kb_option
@json_option
@handle_errors
def report_cmd(data, target, task, fingerprint_file, out, family_names, k, kb_path, server,
               as_json) -> None:
    """Write one self-contained HTML report of DATA against the history."""
    from warmstart.service.report import report

    info = report(dataset_input(data, target, fingerprint_file), target, out,
                  history=open_history(kb_path, server), families=list(family_names) or None,
                  k=k, task=task, fingerprint_of=fingerprint_file)
    if as_json:
        emit_json(info)
        return
    rows = [[f, n if isinstance(n, int) else 0, "" if isinstance(n, int) else n]
            for f, n in info["families"].items()]
    click.echo(f"report written to {out} ({info['bytes'] / 1024:.1f} KiB): "
               f"{info['neighbours']} neighbours")
    if rows:
        click.echo(table(rows, ["family", "suggestions", "note"], align="lrl"))


COMMANDS = [serve_cmd, map_cmd, report_cmd]

if __name__ == "__main__":  # pragma: no cover - ``python -m cli.serve`` runs the server
    serve_cmd()
