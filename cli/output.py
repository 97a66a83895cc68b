"""Rendering results: aligned text tables for people, JSON for machines."""

from __future__ import annotations

import json
import math
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
        return ", ".join(f"{k}={fmt(v)}" for k, v in value.items())
    return str(value)


def table(rows: Sequence[Sequence[Any]], headers: Sequence[str],
          align: str | None = None) -> str:
    """An aligned plain-text table; ``align`` is one 'l'/'r' per column (numbers right)."""
    cells = [[fmt(c) for c in row] for row in rows]
    if align is None:
        align = "".join("r" if rows and all(isinstance(r[i], (int, float)) or r[i] is None
                                            for r in rows) else "l"
                        for i in range(len(headers)))
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]

    def line(values):
        parts = [v.rjust(w) if a == "r" else v.ljust(w)
                 for v, w, a in zip(values, widths, align)]
        return "  ".join(parts).rstrip()

    out = [line(headers), line(["-" * w for w in widths])]
    out += [line(r) for r in cells]
    return "\n".join(out)
