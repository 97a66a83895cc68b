"""The commands about one dataset: ``fingerprint``, ``log``, ``similar`` and ``suggest``."""

from __future__ import annotations

import json
from pathlib import Path

import click

import warmstart
from cli.common import (
    SPACE_HELP,
    TASK,
    cluster_option,
    data_options,
    direction_options,
    family_option,
    handle_errors,
    json_option,
    kb_option,
    need_data,
    open_history,
    query_fingerprint,
    task_line,
)
from cli.output import emit_json, fmt, plural, table
from warmstart.errors import NothingToSuggestError
from warmstart.fingerprint import CATALOGUE_VERSION, GROUPS
from warmstart.fingerprint.catalogue import BASIS_NOTES
from warmstart.strategies import DEFAULT_STRATEGY, STRATEGIES


# -- fingerprint ------------------------------------------------------------------------
@click.command("fingerprint")
@click.argument("data", required=False, type=click.Path(path_type=Path))
@click.option("--target", "-t", default=None, help="Target column.")
@click.option("--task", type=TASK, default=None, help="Override the inferred task.")
@click.option("--list", "list_catalogue", is_flag=True,
              help="Print the meta-feature catalogue instead (no DATA needed).")
@cluster_option
@json_option
@handle_errors
def fingerprint_cmd(data, target, task, list_catalogue, cluster, as_json) -> None:
    """Compute a dataset's meta-feature fingerprint (warnings about dirty columns on stderr)."""
    if list_catalogue:
        _echo_catalogue(as_json)
        return
    need_data(data, target, None)
    fp = warmstart.fingerprint(data, target=target, task=task, cluster=cluster)
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
               f"{CATALOGUE_VERSION}; basis: "
               + ", ".join(f"{b} = {note}" for b, note in BASIS_NOTES.items()))


# -- log --------------------------------------------------------------------------------
@click.command("log")
@data_options
@family_option
@click.option("--trials", "trials_file", required=True, type=click.Path(path_type=Path),
              help="Trials table (CSV, Parquet or JSON lines), one row per trial: a column "
                   "per hyperparameter named as the estimator's keyword (blank = its "
                   "default), 'score' (required), and optional 'fit_seconds', 'status' "
                   "(ok | failed [default: ok]) and 'error'.")
@click.option("--metric", default=None,
              help="scikit-learn scorer name [default: balanced_accuracy or r2].")
@direction_options
@click.option("--name", default=None,
              help="Label for the study, and the dataset's name: renames a dataset "
                   "already in the history [default: its name, else the file name].")
@cluster_option
@kb_option
@json_option
@handle_errors
def log_cmd(data, target, task, fingerprint_file, family, trials_file, metric, better,
            name, cluster, kb_path, server, as_json) -> None:
    """Log a finished study (its trials) into the team history."""
    kb = open_history(kb_path, server)
    fp = query_fingerprint(data, target, task, fingerprint_file, cluster)
    # DATA goes along so that its file name labels a new dataset, as when the library
    # reads DATA itself (the fingerprint computed here is the one used)
    study = kb.log(
        None if fingerprint_file is not None else data, target=target, family=family,
        trials=trials_file, metric=metric, better=better, fingerprint_of=fp, task=task,
        name=name)
    for w in fp.warnings:
        click.echo(f"warning: {w}", err=True)
    if as_json:  # its "metric" says which metric was recorded
        emit_json(study.to_dict())
        return
    if study.already_logged:
        click.echo(f"already logged as {study.study_id} (same dataset, family, metric and "
                   "trials); nothing written")
        return
    what = "new dataset" if study.dataset_is_new else "dataset already in the history"
    click.echo(f"logged study {study.study_id[:12]} ({study.family}, {study.task}, "
               f"{study.metric}): {study.trial_count} trials, {study.n_ok} ok, best "
               f"{fmt(study.best_score)}; {what} {study.dataset_id} '{study.label}'")
    if metric is None:
        click.echo(_metric_note(study))


def _metric_note(study) -> str:
    """Which metric the scores were recorded as when the user named none."""
    note = (f"note: no --metric given, so the scores were recorded as {study.metric} (the "
            "default); ")
    if study.task == "classification":
        # a search without scoring= uses the estimator's score(): accuracy for classifiers
        return note + "a search without scoring= reports accuracy: log those with " \
                      "--metric accuracy"
    return note + "for another metric, log with --metric NAME"


# -- similar ----------------------------------------------------------------------------
@click.command("similar")
@data_options
@click.option("-k", default=5, show_default=True, type=click.IntRange(min=1),
              help="How many neighbours.")
@cluster_option
@kb_option
@json_option
@handle_errors
def similar_cmd(data, target, task, fingerprint_file, k, cluster, kb_path, server,
                as_json) -> None:
    """Show the past datasets most similar to DATA, and why."""
    kb = open_history(kb_path, server)
    fp = query_fingerprint(data, target, task, fingerprint_file, cluster)
    found = kb.similar(target=target, k=k, task=task, fingerprint_of=fp)
    if not found:
        raise NothingToSuggestError(
            f"nothing to compare with: the history at {kb.path} has no {fp.task} dataset "
            f"yet; fill it with 'warmstart log' (a finished study) or 'warmstart tune'")
    if as_json:
        emit_json([n.to_dict() for n in found])
        return
    click.echo(task_line(fp, task, fingerprint_file))
    rows = []
    for i, n in enumerate(found, 1):
        agree = ", ".join(f"{m}" for m, _, _ in n.agree)
        differ = ", ".join(f"{m} ({fmt(a)} vs {fmt(b)})" for m, a, b in n.differ)
        rows.append([i, n.name, n.distance, n.similarity, agree, differ or "(none)"])
    click.echo(table(rows, ["#", "dataset", "distance", "similarity", "agrees most on",
                            "differs most on (this vs it)"], align="rlrrll"))
    if len(found) < k:
        click.echo(f"only {plural(len(found), fp.task + ' dataset')} in the history "
                   f"(asked for {k})")


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
              help=SPACE_HELP + " Values outside are clipped; categorical values "
                   "outside drop the configuration.")
@click.option("--max-fit-seconds", type=click.FloatRange(min=0), default=None,
              help="Drop suggestions expected to take longer to fit on DATA [default: "
                   "no limit].")
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seed for strategies that draw at random.")
@click.option("--format", "out_format", type=click.Choice(["table", "json", "grid"]),
              default=None, help="table (default), json (as --json), or grid: the "
                                 "configurations as a JSON list of one-value-per-parameter "
                                 "dicts, a param_grid for scikit-learn's GridSearchCV.")
@cluster_option
@kb_option
@json_option
@handle_errors
def suggest_cmd(data, target, task, fingerprint_file, family, k, metric, strategy,
                space_file, max_fit_seconds, seed, out_format, cluster, kb_path,
                server, as_json) -> None:
    """Suggest starting configurations for FAMILY on DATA."""
    if as_json and out_format not in (None, "json"):
        raise click.UsageError(f"--json and --format {out_format} contradict each other")
    kb = open_history(kb_path, server)
    fp = query_fingerprint(data, target, task, fingerprint_file, cluster)
    try:
        found = kb.suggest(
            target=target, family=family, k=k, task=task, metric=metric,
            strategy=strategy, space=space_file, max_fit_seconds=max_fit_seconds, seed=seed,
            fingerprint_of=fp)
    except NothingToSuggestError as exc:  # worded like similar's and backtest's
        raise NothingToSuggestError(f"nothing to compare with: {exc}") from None
    if out_format == "grid":  # one configuration a line, full precision
        grid = [json.dumps(g, allow_nan=False) for g in found.to_grid()]
        click.echo("[\n" + ",\n".join(f"  {g}" for g in grid) + "\n]")
        return
    if as_json or out_format == "json":
        emit_json([s.to_dict() for s in found])
        return
    click.echo(task_line(fp, task, fingerprint_file))
    used = found[0].metric or metric
    click.echo(f"{plural(len(found), 'starting configuration')} for {family} "
               f"({found[0].strategy}" + (f", metric {used}" if used else "") + "); "
               "norm. score: 1 = best trial of its study")
    if found[0].choice is not None:
        c = found[0].choice
        click.echo(f"auto chose {c['chosen']} on {c['datasets']} datasets ({c['rule']})")
    _echo_suggestions(found)
    click.echo("distance: scaled over the datasets with a study of this family, so it can "
               "differ from 'similar', which scales over every dataset of the task")
    click.echo("Starting points only: validate the tuned model on held-out data.")


def _echo_suggestions(found) -> None:
    """The suggestions table; the "expected" column only when some suggestion has one,
    "best on" and "adds" only when some suggestion explains its rank."""
    pooled = any(s.expected_normalised is not None for s in found)
    explained = any(s.gain is not None for s in found)
    moved = any(s.moved for s in found)
    rows = [[s.rank, s.source_name or "-", s.distance, s.normalised_score, s.score]
            + ([None if s.expected_normalised is None else
                fmt(s.expected_normalised) + ("*" if s.predicted else "")] if pooled else [])
            + ([_best_on(s), s.gain] if explained else [])
            + [s.expected_fit_seconds] + ([_moved(s) or "-"] if moved else [])
            + [s.config or "(estimator defaults)"] for s in found]
    headers = ["#", "from dataset", "distance", "norm. score", "score"]
    headers += ["expected"] if pooled else []
    headers += ["best on (norm. score)", "adds"] if explained else []
    headers += ["est. fit s"] + (["moved into the space"] if moved else []) + ["configuration"]
    click.echo(table(rows, headers, align="rlrrr" + ("r" if pooled else "")
                     + ("lr" if explained else "") + "r" + ("l" if moved else "") + "l"))
    if pooled:
        click.echo("expected: similarity-weighted mean norm. score over the nearest datasets "
                   "(* = partly predicted by surrogates)")
    if any(s.source_name is None or s.expected_fit_seconds is None for s in found):
        click.echo("-: none (a configuration not taken from a past study has no source, "
                   "distance or score; a fit time without past fits is not estimated)")
    if explained:
        click.echo("best on: datasets where it was run and scored highest; adds: its gain in "
                   "the list's objective over the suggestions above it")
    if moved:
        click.echo("moved into the space: the source trial's values (as logged) that were "
                   "brought into the search space (--space, or the family's)")


def _moved(s) -> str:
    """``gamma: 50 -> 10; tol: 0.01 -> not searched``."""
    def value(v):
        return "None" if v is None else fmt(v)
    return "; ".join(f"{m['parameter']}: {value(m['from'])} -> "
                     + ("not searched" if m.get("dropped") else value(m["to"]))
                     for m in s.moved)


def _best_on(s) -> str:
    return ", ".join(f"{b['name']} {fmt(b['normalised'])}" for b in s.best_on[:2]) or "-"
