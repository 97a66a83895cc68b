"""``warmstart families``: the model families and their search spaces."""

from __future__ import annotations

from typing import Any

import click

import warmstart
from cli.common import handle_errors, json_option
from cli.output import emit_json, fmt, table


@click.command("families")
@json_option
@handle_errors
def families_cmd(as_json: bool) -> None:
    """List the model families and their search spaces."""
    fams = warmstart.families()
    if as_json:
        emit_json(fams)
        return
    for fam in fams:
        click.echo(f"{fam['name']}: {fam['description']}")
        for task, spec in fam["tasks"].items():
            click.echo(f"  {task}: {spec['estimator']}")
            text = table([_parameter_row(p) for p in spec["space"]],
                         ["parameter", "type", "values", "default", "condition"],
                         align="lllll")
            click.echo("\n".join("    " + ln for ln in text.splitlines()))
        click.echo()


def _parameter_row(p: dict[str, Any]) -> list[Any]:
    """One parameter of a family's space as a table row (values shown as the user types them)."""
    if p["type"] in ("float", "int"):
        values = f"[{fmt(p['low'])}, {fmt(p['high'])}]" + (" log" if p["log"] else "")
        values += " or None" if p["allow_none"] else ""
    elif p["type"] == "categorical":
        values = " | ".join(fmt(c) if c is not None else "None" for c in p["choices"])
    else:
        values = "true | false"
    cond = p.get("condition")
    cond_s = f"if {cond['parent']} in {cond['in']}" if cond else ""
    return [p["name"], p["type"], values, p["default"], cond_s]
