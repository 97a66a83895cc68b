"""What every command shares: options, error handling, exit codes, opening the history.

Command modules import from here (and from :mod:`cli.output`), never from
:mod:`cli.main`, which only assembles the command group.
"""

from __future__ import annotations

import functools
import sys
from pathlib import Path

import click

from warmstart.errors import BadInputError, WarmstartError
from warmstart.families import TASKS
from warmstart.history import ENV_VAR, KnowledgeBase, resolve_path

TASK = click.Choice(list(TASKS))
EXIT_INTERRUPTED = 130  # 128 + SIGINT, what shells report for Ctrl-C


def handle_errors(func):
    """Turn library errors into a one-line message and the error's exit code."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except WarmstartError as exc:
            click.echo(f"error: {exc}", err=True)
            sys.exit(exc.exit_code)

    return wrapper


def kb_option(func):
    return click.option(
        "--kb", "kb_path", type=click.Path(path_type=Path), default=None,
        help=f"History directory [default: ${ENV_VAR}, else ./knowledge_base].")(func)


def json_option(func):
    return click.option("--json", "as_json", is_flag=True, help="Print JSON.")(func)


def family_option(func):
    return click.option("--family", "-f", required=True,
                        help="Model family (see 'warmstart families').")(func)


def data_options(func):
    """DATA, --target, --task and --fingerprint, shared by the dataset commands."""
    func = click.option("--fingerprint", "fingerprint_file", type=click.Path(path_type=Path),
                        help="Use this fingerprint JSON (from 'fingerprint --json') "
                             "instead of DATA.")(func)
    func = click.option("--task", type=TASK, default=None,
                        help="Override the task inferred from the target.")(func)
    func = click.option("--target", "-t", default=None, help="Target column.")(func)
    return click.argument("data", required=False, type=click.Path(path_type=Path))(func)


def need_data(data, target, fingerprint_file) -> None:
    """Refuse a dataset command given neither DATA with --target nor --fingerprint."""
    if fingerprint_file is None:
        if data is None:
            raise BadInputError("missing DATA (or --fingerprint FILE)")
        if target is None:
            raise BadInputError("missing --target COLUMN")


def dataset_input(data, target, fingerprint_file) -> Path | None:
    """DATA as the library takes it: None when a --fingerprint file stands in for it."""
    need_data(data, target, fingerprint_file)
    return data if fingerprint_file is None else None


def open_history(kb_path: Path | None) -> KnowledgeBase:
    """The history at --kb, else $WARMSTART_KB, else ./knowledge_base."""
    return KnowledgeBase(resolve_path(kb_path))
