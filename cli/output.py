"""Rendering results: aligned text tables for people, JSON for machines."""

from __future__ import annotations

import json
import math
import os
import shutil
import sys
from collections.abc import Sequence
from typing import Any

import click

from warmstart.values import to_jsonable


def emit_json(obj: Any) -> None:
    click.echo(json.dumps(to_jsonable(obj), indent=2, allow_nan=False))


def fmt(value: Any) -> str:
    """One cell: numbers to 4 significant digits, None/NaN as a dash."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return "-"
        if value != 0 and (abs(value) >= 1e5 or abs(value) < 1e-3):
            return f"{value:.3g}"
        return f"{value:.4g}"
    if isinstance(value, dict):
        # inside a configuration None is a value the user can type (max_depth=None)
        return ", ".join(f"{k}={'None' if v is None else fmt(v)}" for k, v in value.items())
    return str(value)


def plural(n: int, noun: str) -> str:
    """``1 starting configuration``, ``3 starting configurations``, ``2 studies``."""
    if n == 1:
        return f"{n} {noun}"
    if noun.endswith("y") and noun[-2:-1] not in "aeiou":
        return f"{n} {noun[:-1]}ies"
    return f"{n} {noun}s"


FULL_WIDTH = {"on": False}  # set by --wide for the running command
MIN_LAST = 12  # characters the last column keeps before columns are cut


def terminal_width() -> int | None:
    """Columns to fit: $COLUMNS, else the terminal's width; None (no limit) when the
    output goes to a file or a pipe, or under --wide."""
    if FULL_WIDTH["on"]:
        return None
    if os.environ.get("COLUMNS", "").isdigit():
        return int(os.environ["COLUMNS"])
    if not sys.stdout.isatty():
        return None
    return shutil.get_terminal_size().columns


def table(rows: Sequence[Sequence[Any]], headers: Sequence[str],
          align: str | None = None, width: int | None = -1) -> str:
    """An aligned plain-text table; ``align`` is one 'l'/'r' per column (numbers right).

    The table fits ``width`` characters (default: :func:`terminal_width`): the last
    column's cells are shortened with "...", then columns are cut from the right, and a
    last line names what was cut and the ``--wide`` option that shows everything.
    """
    cells = [[fmt(c) for c in row] for row in rows]
    if align is None:
        align = "".join("r" if rows and all(isinstance(r[i], (int, float)) or r[i] is None
                                            for r in rows) else "l"
                        for i in range(len(headers)))
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]
    limit = terminal_width() if width == -1 else width
    headers, cells, widths, cut = _fit(list(headers), cells, widths, limit)

    def line(values):
        parts = [v.rjust(w) if a == "r" else v.ljust(w)
                 for v, w, a in zip(values, widths, align)]
        return "  ".join(parts).rstrip()

    out = [line(headers), line(["-" * w for w in widths])]
    out += [line(r) for r in cells]
    if cut:
        out.append(f"({cut} to fit {limit} columns; --wide shows everything)")
    return "\n".join(out)


def _fit(headers: list[str], cells: list[list[str]], widths: list[int],
         limit: int | None) -> tuple[list[str], list[list[str]], list[int], str]:
    """Shorten the last column, then drop columns from the right, until the table fits."""
    def total() -> int:
        return sum(widths) + 2 * (len(widths) - 1)

    if limit is None or total() <= limit:
        return headers, cells, widths, ""
    dropped = []
    while len(widths) > 1 and total() - widths[-1] + MIN_LAST > limit:
        dropped.insert(0, headers.pop())
        widths.pop()
        cells = [r[:-1] for r in cells]
    room = max(limit - (total() - widths[-1]), min(MIN_LAST, widths[-1]), 4)
    shortened = any(len(r[-1]) > room for r in cells) or len(headers[-1]) > room
    cells = [r[:-1] + [_shorten(r[-1], room)] for r in cells]
    headers[-1] = _shorten(headers[-1], room)
    widths[-1] = min(widths[-1], room)
    what = []
    if dropped:
        what.append(f"column{'s' if len(dropped) > 1 else ''} {', '.join(dropped)} cut")
    if shortened:
        what.append(f"'{headers[-1]}' shortened")
    return headers, cells, widths, "; ".join(what)


def _shorten(text: str, room: int) -> str:
    return text if len(text) <= room else text[:room - 3] + "..."
