"""The ``warmstart`` command: each subcommand calls one documented library function.

Exit codes: 0 success; 1 nothing to suggest or a check found problems; 2 bad input
(nothing written).
"""

from __future__ import annotations

import functools
import sys
from pathlib import Path

import click

import warmstart
from cli.output import emit_json, fmt, table
from warmstart.errors import WarmstartError
from warmstart.fingerprint import CATALOGUE_VERSION, GROUPS
from warmstart.history import ENV_VAR, KnowledgeBase, resolve_path
from warmstart.metrics import MAXIMIZE, MINIMIZE
from warmstart.strategies import DEFAULT_STRATEGY, STRATEGIES

TASK = click.Choice(["classification", "regression"])


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
    if fingerprint_file is None:
        if data is None:
            raise warmstart.BadInputError("missing DATA (or --fingerprint FILE)")
        if target is None:
            raise warmstart.BadInputError("missing --target COLUMN")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(warmstart.__version__, prog_name="warmstart")
def main() -> None:
    """Warm-start hyperparameter tuning from your team's history of past studies."""


# -- families ---------------------------------------------------------------------------
@main.command("families")
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
            rows = []
            for p in spec["space"]:
                if p["type"] in ("float", "int"):
                    rng = f"[{fmt(p['low'])}, {fmt(p['high'])}]" + (" log" if p["log"] else "")
                    rng += " or None" if p["allow_none"] else ""
                elif p["type"] == "categorical":
                    rng = " | ".join(fmt(c) if c is not None else "None" for c in p["choices"])
                else:
                    rng = "true | false"
                cond = p.get("condition")
                cond_s = f"if {cond['parent']} in {cond['in']}" if cond else ""
                rows.append([p["name"], p["type"], rng, p["default"], cond_s])
            text = table(rows, ["parameter", "type", "values", "default", "condition"],
                         align="lllll")
            click.echo("\n".join("    " + ln for ln in text.splitlines()))
        click.echo()


# -- fingerprint ------------------------------------------------------------------------
@main.command("fingerprint")
@click.argument("data", required=False, type=click.Path(path_type=Path))
@click.option("--target", "-t", default=None, help="Target column.")
@click.option("--task", type=TASK, default=None, help="Override the inferred task.")
@click.option("--list", "list_catalogue", is_flag=True,
              help="Print the meta-feature catalogue instead (no DATA needed).")
@json_option
@handle_errors
def fingerprint_cmd(data, target, task, list_catalogue, as_json) -> None:
    """Compute a dataset's meta-feature fingerprint (warnings about dirty columns on stderr)."""
    if list_catalogue:
        cat = warmstart.catalogue()
        if as_json:
            emit_json(cat)
            return
        for group, title in GROUPS.items():
            rows = [[m["name"], m["tasks"], m["range"], m["basis"], m["description"]]
                    for m in cat if m["group"] == group]
            if rows:
                click.echo(f"{title} [{group}]")
                click.echo(table(rows, ["meta-feature", "tasks", "range", "basis",
                                        "description"], align="lllll"))
                click.echo()
        click.echo(f"{len(cat)} meta-features in {len(GROUPS)} groups, catalogue version "
                   f"{CATALOGUE_VERSION}; basis: exact = every row, sketch = exact up to "
                   "4096 levels, sample = seeded sample of 5000 rows")
        return
    need_data(data, target, None)
    fp = warmstart.fingerprint(data, target=target, task=task)
    if as_json:
        emit_json(fp.to_dict())
    else:
        click.echo(f"{data}: {fp.task}, target {fp.target!r}, catalogue version "
                   f"{fp.catalogue_version}")
        for group, values in fp.grouped().items():
            click.echo(f"\n{GROUPS[group]} [{group}]")
            rows = [[name, value] for name, value in values.items()]
            click.echo(table(rows, ["meta-feature", "value"], align="lr"))
    for w in fp.warnings:
        click.echo(f"warning: {w}", err=True)


# -- log --------------------------------------------------------------------------------
@main.command("log")
@data_options
@click.option("--family", "-f", required=True, help="Model family (see 'warmstart families').")
@click.option("--trials", "trials_file", required=True, type=click.Path(path_type=Path),
              help="Trials table: CSV, Parquet or JSON lines, one row per trial.")
@click.option("--metric", default=None,
              help="scikit-learn scorer name [default: balanced_accuracy or r2].")
@click.option("--lower-is-better", "direction", flag_value=MINIMIZE, default=None,
              help="The metric is a loss (needed for names scikit-learn does not know).")
@click.option("--higher-is-better", "direction", flag_value=MAXIMIZE,
              help="The metric is a score (needed for names scikit-learn does not know).")
@click.option("--name", default=None, help="Label for the study [default: file name].")
@kb_option
@json_option
@handle_errors
def log_cmd(data, target, task, fingerprint_file, family, trials_file, metric, direction,
            name, kb_path, as_json) -> None:
    """Log a finished study (its trials) into the team history."""
    need_data(data, target, fingerprint_file)
    kb = KnowledgeBase(resolve_path(kb_path))
    study = kb.log(data if fingerprint_file is None else None, target=target, family=family,
                   trials=trials_file, metric=metric, direction=direction, name=name,
                   fingerprint_of=fingerprint_file, task=task)
    if as_json:
        emit_json(study.to_dict())
        return
    what = "new dataset" if study.dataset_is_new else "dataset already in the history"
    click.echo(f"logged study {study.study_id[:12]} ({study.family}, {study.task}, "
               f"{study.metric}): {study.n_trials} trials, {study.n_ok} ok, best "
               f"{fmt(study.best_score)}; {what} {study.dataset_id} '{study.label}'")


# -- similar ----------------------------------------------------------------------------
@main.command("similar")
@data_options
@click.option("-k", default=5, show_default=True, type=click.IntRange(min=1),
              help="How many neighbours.")
@kb_option
@json_option
@handle_errors
def similar_cmd(data, target, task, fingerprint_file, k, kb_path, as_json) -> None:
    """Show the past datasets most similar to DATA, and why."""
    need_data(data, target, fingerprint_file)
    kb = KnowledgeBase(resolve_path(kb_path))
    found = kb.similar(data if fingerprint_file is None else None, target=target, k=k,
                       task=task, fingerprint_of=fingerprint_file)
    if as_json:
        emit_json([n.to_dict() for n in found])
        return
    if not found:
        click.echo("the history has no dataset of this task yet")
        return
    rows = []
    for i, n in enumerate(found, 1):
        agree = ", ".join(f"{m}" for m, _, _ in n.agree)
        differ = ", ".join(f"{m} ({fmt(a)} vs {fmt(b)})" for m, a, b in n.differ)
        rows.append([i, n.name, n.distance, n.similarity, agree, differ or "-"])
    click.echo(table(rows, ["#", "dataset", "distance", "similarity", "agrees most on",
                            "differs most on (this vs it)"], align="rlrrll"))


# -- suggest ----------------------------------------------------------------------------
@main.command("suggest")
@data_options
@click.option("--family", "-f", required=True, help="Model family (see 'warmstart families').")
@click.option("-k", default=10, show_default=True, type=click.IntRange(min=1),
              help="How many configurations.")
@click.option("--metric", default=None, help="Use only studies of this metric.")
@click.option("--strategy", "-s", default=None,
              help=f"Ranking strategy: {', '.join(STRATEGIES)} [default: {DEFAULT_STRATEGY}].")
@click.option("--space", "space_file", type=click.Path(path_type=Path), default=None,
              help="JSON search-space file restricting the suggestions (values outside "
                   "are clipped; categorical values outside drop the configuration).")
@click.option("--max-fit-seconds", type=click.FloatRange(min=0), default=None,
              help="Drop suggestions expected to take longer to fit on DATA.")
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seed for strategies that draw at random.")
@kb_option
@json_option
@handle_errors
def suggest_cmd(data, target, task, fingerprint_file, family, k, metric, strategy,
                space_file, max_fit_seconds, seed, kb_path, as_json) -> None:
    """Suggest starting configurations for FAMILY on DATA."""
    need_data(data, target, fingerprint_file)
    kb = KnowledgeBase(resolve_path(kb_path))
    found = kb.suggest(data if fingerprint_file is None else None, target=target,
                       family=family, k=k, task=task, metric=metric, strategy=strategy,
                       space=space_file, max_fit_seconds=max_fit_seconds, seed=seed,
                       fingerprint_of=fingerprint_file)
    if as_json:
        emit_json([s.to_dict() for s in found])
        return
    click.echo(f"{len(found)} starting configurations for {family} "
               f"({found[0].strategy}, metric {found[0].metric or metric or 'default'}); "
               "norm. score: 1 = best trial of its study")
    if found[0].choice is not None:
        c = found[0].choice
        click.echo(f"auto chose {c['chosen']} on {c['datasets']} datasets ({c['rule']})")
    pooled = any(s.expected_normalised is not None for s in found)
    explained = any(s.gain is not None for s in found)
    rows = [[s.rank, s.source_name or "-", s.distance, s.normalised_score, s.score]
            + ([None if s.expected_normalised is None else
                fmt(s.expected_normalised) + ("*" if s.predicted else "")] if pooled else [])
            + ([_best_on(s), s.gain] if explained else [])
            + [s.expected_fit_seconds, s.config or "(estimator defaults)"] for s in found]
    headers = ["#", "from dataset", "distance", "norm. score", "score"]
    headers += ["expected"] if pooled else []
    headers += ["best on (norm. score)", "adds"] if explained else []
    headers += ["est. fit s", "configuration"]
    click.echo(table(rows, headers, align="rlrrr" + ("r" if pooled else "")
                     + ("lr" if explained else "") + "rl"))
    if pooled:
        click.echo("expected: similarity-weighted mean norm. score over the nearest datasets "
                   "(* = partly predicted by surrogates)")
    if explained:
        click.echo("best on: datasets where it was run and scored highest; adds: its gain in "
                   "the list's objective over the suggestions above it")
    click.echo("Starting points only: validate the tuned model on held-out data.")


def _best_on(s) -> str:
    return ", ".join(f"{b['name']} {fmt(b['normalised'])}" for b in s.best_on[:2]) or "-"


# Command groups kept in their own modules register themselves on ``main``.
from cli import backtest as _backtest  # noqa: E402, F401
from cli import kb as _kb  # noqa: E402, F401
from cli import tune as _tune  # noqa: E402, F401

if __name__ == "__main__":  # pragma: no cover
    main()
