"""The commands about one dataset: ``fingerprint``, ``log``, ``similar`` and ``suggest``."""

from __future__ import annotations

from pathlib import Path

import click

import warmstart
from cli.common import (
    TASK,
    data_options,
    dataset_input,
    family_option,
    handle_errors,
    json_option,
    kb_option,
    need_data,
    open_history,
)
from cli.output import emit_json, fmt, table
from warmstart.fingerprint import CATALOGUE_VERSION, GROUPS
from warmstart.metrics import MAXIMIZE, MINIMIZE
from warmstart.strategies import DEFAULT_STRATEGY, STRATEGIES


# -- fingerprint ------------------------------------------------------------------------
@click.command("fingerprint")
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
        _echo_catalogue(as_json)
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


def _echo_catalogue(as_json: bool) -> None:
    """``fingerprint --list``: the catalogue, one table per group."""
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


# -- log --------------------------------------------------------------------------------
@click.command("log")
@data_options
@family_option
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
    data = dataset_input(data, target, fingerprint_file)
    study = open_history(kb_path).log(
        data, target=target, family=family, trials=trials_file, metric=metric,
        direction=direction, name=name, fingerprint_of=fingerprint_file, task=task)
    if as_json:
        emit_json(study.to_dict())
        return
    what = "new dataset" if study.dataset_is_new else "dataset already in the history"
    click.echo(f"logged study {study.study_id[:12]} ({study.family}, {study.task}, "
               f"{study.metric}): {study.n_trials} trials, {study.n_ok} ok, best "
               f"{fmt(study.best_score)}; {what} {study.dataset_id} '{study.label}'")


# -- similar ----------------------------------------------------------------------------
@click.command("similar")
@data_options
@click.option("-k", default=5, show_default=True, type=click.IntRange(min=1),
              help="How many neighbours.")
@kb_option
@json_option
@handle_errors
def similar_cmd(data, target, task, fingerprint_file, k, kb_path, as_json) -> None:
    """Show the past datasets most similar to DATA, and why."""
    data = dataset_input(data, target, fingerprint_file)
    found = open_history(kb_path).similar(data, target=target, k=k, task=task,
                                          fingerprint_of=fingerprint_file)
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
@click.command("suggest")
@data_options
@family_option
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
    data = dataset_input(data, target, fingerprint_file)
    found = open_history(kb_path).suggest(
        data, target=target, family=family, k=k, task=task, metric=metric,
        strategy=strategy, space=space_file, max_fit_seconds=max_fit_seconds, seed=seed,
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
    _echo_suggestions(found)
    click.echo("Starting points only: validate the tuned model on held-out data.")


def _echo_suggestions(found) -> None:
    """The suggestions table; the "expected" column only when some suggestion has one,
    "best on" and "adds" only when some suggestion explains its rank."""
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


def _best_on(s) -> str:
    return ", ".join(f"{b['name']} {fmt(b['normalised'])}" for b in s.best_on[:2]) or "-"
