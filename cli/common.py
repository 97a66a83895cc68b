"""What every command shares: options, error handling, exit codes, opening the history.

Command modules import from here (and from :mod:`cli.output`), never from
:mod:`cli.main`, which only assembles the command group.
"""

from __future__ import annotations

import contextlib
import functools
import sys
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import click

from cli.output import FULL_WIDTH
from warmstart.errors import BadInputError, WarmstartError
from warmstart.metrics import HIGHER, LOWER
from warmstart.tasks import TASKS

# cli.main imports this module for every command, --help included: numpy, pandas,
# pyarrow and the history are imported inside the functions that use them
if TYPE_CHECKING:
    from warmstart.fingerprint import Fingerprint
    from warmstart.history import KnowledgeBase
    from warmstart.service.client import Client

TASK = click.Choice(list(TASKS))
EXIT_INTERRUPTED = 130  # 128 + SIGINT, what shells report for Ctrl-C


EXIT_BAD_INPUT = 2
# the same names as warmstart.service.client's, which this module must not import
SERVER_ENV = "WARMSTART_SERVER"
TOKEN_ENV = "WARMSTART_TOKEN"


def os_error_message(exc: OSError) -> str:
    """``OSError`` as one line: what went wrong and on which path, never a traceback."""
    from warmstart.io import shown

    reason = exc.strerror or str(exc) or type(exc).__name__
    if exc.filename is None:
        return reason
    where = shown(exc.filename)
    if exc.filename2 is not None:
        where += f" -> {shown(exc.filename2)}"
    return f"{reason}: {where}"


def first_line(exc: BaseException) -> str:
    """The first line of an exception's message, or its type when it has none."""
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


@contextlib.contextmanager
def quiet_numpy() -> Iterator[None]:
    """Keep numpy's floating-point warnings off stderr: overflow on extreme values is
    handled by the code (NaN where a value is undefined), not something to read."""
    import numpy as np

    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        yield


def handle_errors(func):
    """Turn errors from the user's input into one ``error:`` line and an exit code.

    The library's own errors keep their exit code (2 bad input, 1 nothing to answer
    with). An ``OSError`` (a path too long, a file not readable, a place not writable),
    ``ValueError`` or ``TypeError`` that escaped the library's checks is reported the
    same way with exit 2: the user sees what was wrong, never a traceback.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            with quiet_numpy():
                return func(*args, **kwargs)
        except WarmstartError as exc:
            fail(str(exc), exc.exit_code)
        except OSError as exc:
            fail(os_error_message(exc))
        except (ValueError, TypeError) as exc:
            fail(first_line(exc))

    return wrapper


def fail(message: str, code: int = EXIT_BAD_INPUT) -> None:
    """Print ``error: message`` on stderr and exit with ``code``."""
    click.echo(f"error: {message}", err=True)
    sys.exit(code)


class OneLineUsageError(click.ClickException):
    """A click usage error shown as one ``error:`` line naming the command's --help."""

    exit_code = EXIT_BAD_INPUT

    def show(self, file=None) -> None:
        click.echo(f"error: {self.format_message()}", err=True)


@contextlib.contextmanager
def one_line_usage() -> Iterator[None]:
    """Re-raise click's usage errors (``-k 0``, ``--budget abc``) as one line."""
    try:
        yield
    except click.UsageError as exc:
        # the program is "warmstart" however it was started (script, python -m, tests)
        words = exc.ctx.command_path.split()[1:] if exc.ctx is not None else []
        where = " ".join(["warmstart", *words])
        raise OneLineUsageError(
            f"{exc.format_message()} (see '{where} --help')") from None


class CommandGroup(click.Group):
    """A command group whose usage errors, its own and its commands', are one line."""

    def parse_args(self, ctx: click.Context, args: list[str]) -> list[str]:
        with one_line_usage():
            return super().parse_args(ctx, args)

    def invoke(self, ctx: click.Context):
        FULL_WIDTH["on"] = False  # --wide lasts one command (tests run many in a process)
        with one_line_usage():
            return super().invoke(ctx)


def direction_options(func):
    """``--lower-is-better`` / ``--higher-is-better`` as ``better``; both is an error."""

    def record(ctx: click.Context, param: click.Parameter, value: bool) -> bool:
        if value:
            ctx.meta.setdefault("warmstart_directions", set()).add(param.name)
            if len(ctx.meta["warmstart_directions"]) > 1:
                raise click.UsageError("--higher-is-better and --lower-is-better "
                                       "contradict each other: give one", ctx=ctx)
        return value

    def join(func):
        @functools.wraps(func)
        def wrapper(*args, lower_is_better=False, higher_is_better=False, **kwargs):
            kwargs["better"] = (LOWER if lower_is_better else
                                HIGHER if higher_is_better else None)
            return func(*args, **kwargs)
        return wrapper

    func = join(func)
    func = click.option("--higher-is-better", is_flag=True, callback=record,
                        help="The metric is a score (needed for names scikit-learn "
                             "does not know).")(func)
    return click.option("--lower-is-better", is_flag=True, callback=record,
                        help="The metric is a loss (needed for names scikit-learn "
                             "does not know).")(func)


def directory_option(func):
    """``--kb``: the history's directory, for the commands that work on its files."""
    from warmstart.history import ENV_VAR

    return click.option(
        # str, not Path: a Path would fold file:///x into file:/x
        "--kb", "kb_path", type=click.Path(path_type=str), default=None,
        help=f"History directory or file:// URI [default: ${ENV_VAR}, else "
             "./knowledge_base].")(func)


def kb_option(func):
    """``--kb PATH`` or ``--server URL``: where the history is (see :func:`open_history`)."""
    func = click.option(
        "--server", default=None, metavar="URL",
        help=f"Use the history behind this 'warmstart serve' server instead of a "
             f"directory [default: ${SERVER_ENV} when no --kb is given]; writes need "
             f"${TOKEN_ENV}.")(func)
    return directory_option(func)


def cluster_option(func):
    """``--cluster``: where data is scanned (and ``tune``'s fits run): a dask scheduler."""
    return click.option(
        "--cluster", default=None, metavar="ADDRESS|local:N",
        help="Run on a dask cluster: a scheduler address (tcp://host:8786) or local:N "
             "(N local worker processes); DATA must be readable by the workers. "
             "Needs warmstart[cluster].")(func)


def json_option(func):
    """``--json`` for machines, and ``--wide`` for tables wider than the terminal."""
    func = click.option("--wide", is_flag=True, expose_value=False,
                        callback=lambda ctx, param, value: FULL_WIDTH.update(on=value),
                        help="Do not cut tables to the terminal's width.")(func)
    return click.option("--json", "as_json", is_flag=True, help="Print JSON.")(func)


def family_option(func):
    from warmstart.families import FAMILIES

    return click.option("--family", "-f", required=True,
                        help=f"Model family: {', '.join(FAMILIES)} (their spaces: "
                             "'warmstart families').")(func)


SPACE_HELP = ("JSON search-space file: a list of {\"name\": PARAMETER, \"low\": ..., "
              "\"high\": ..., \"log\": true|false} or {\"name\": ..., \"choices\": [...]} "
              "narrowing the family's declared space (example: "
              "examples/space_random_forest.json) [default: the family's whole space].")


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


def query_fingerprint(data, target, task, fingerprint_file, cluster=None) -> Fingerprint:
    """The fingerprint a command compares: read from --fingerprint, else of DATA."""
    from warmstart.fingerprint import Fingerprint, fingerprint

    need_data(data, target, fingerprint_file)
    if fingerprint_file is not None:
        return Fingerprint.from_json_file(fingerprint_file)
    return fingerprint(data, target=target, task=task, cluster=cluster)


def task_line(fp: Fingerprint, task: str | None, fingerprint_file) -> str:
    """Which task the command works on, and where that came from."""
    how = ("given with --task" if task is not None else "from the fingerprint file"
           if fingerprint_file is not None else f"inferred from target {fp.target!r}")
    return f"task: {fp.task} ({how})"


def open_history(kb_path: str | Path | None, server: str | None = None, *,
                 must_exist: bool = True) -> KnowledgeBase | Client | Path:
    """The history a command reads or writes.

    A :class:`~warmstart.service.client.Client` of ``server``, else of
    ``$WARMSTART_SERVER`` when no ``kb_path`` is given; else the directory at
    ``kb_path``, ``$WARMSTART_KB`` or ./knowledge_base, opened as a
    :class:`~warmstart.history.KnowledgeBase` (``must_exist=False``: its resolved path,
    for a command that opens it itself or may do without). Both is an error.
    """
    import os

    if server is None and kb_path is None:  # an explicit --kb wins over the variable
        server = os.environ.get(SERVER_ENV) or None
    if server is not None:
        if kb_path is not None:
            raise BadInputError("give --kb or --server, not both")
        from warmstart.service.client import Client  # the HTTP client only when used

        return Client(server)
    from warmstart.history import KnowledgeBase, resolve_path

    return KnowledgeBase(resolve_path(kb_path)) if must_exist else resolve_path(kb_path)
