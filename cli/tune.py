"""``warmstart tune``: a warm-started tuning study, logged into the history."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from cli.common import (
    EXIT_INTERRUPTED,
    SPACE_HELP,
    TASK,
    cluster_option,
    family_option,
    handle_errors,
    json_option,
    kb_option,
    open_history,
)
from cli.output import emit_json, fmt, table
from cli.progress import PROGRESS_ENV, TrialProgressBar
from warmstart.tune import GP_EI, SEARCHES, TuneResult, tune


@click.command("tune")
@click.argument("data", type=click.Path(path_type=Path))
@click.option("--target", "-t", required=True, help="Target column.")
@family_option
@click.option("--budget", "-n", required=True, type=int,
              help="Trials to run (warm start included).")
@click.option("--metric", default=None,
              help="scikit-learn scorer name [default: balanced_accuracy or r2].")
@click.option("--cv", default=5, show_default=True, type=int, help="Cross-validation folds.")
@click.option("--seed", default=0, show_default=True, type=int, help="Random seed.")
@click.option("--jobs", "-j", default=1, show_default=True, type=int,
              help="Folds fitted in parallel (-1: all cores).")
@click.option("--time-limit", type=float, default=None,
              help="Seconds; no new trial starts after this [default: no limit].")
@click.option("--search", type=click.Choice(SEARCHES), default=GP_EI, show_default=True,
              help="What proposes trials after the warm start.")
@click.option("--warm-start", "warm_start", type=int, default=None,
              help="Suggestions to evaluate first [default: min(5, budget // 2)].")
@click.option("--strategy", "-s", default=None,
              help="Ranking strategy of the warm-start suggestions (see 'suggest') "
                   "[default: the suggest default].")
@click.option("--space", "space_file", type=click.Path(path_type=Path), default=None,
              help=SPACE_HELP)
@click.option("--max-fit-seconds", type=click.FloatRange(min=0), default=None,
              help="Leave out warm-start suggestions expected to take longer to fit on "
                   "DATA [default: no limit].")
@click.option("--no-log", "no_log", is_flag=True, help="Do not log the study.")
@click.option("--out", type=click.Path(path_type=Path), default=None,
              help="Write the best configuration as JSON to this file (checked before "
                   "any trial) [default: not written].")
@click.option("--name", default=None, help="Label for the study [default: file name].")
@click.option("--task", type=TASK, default=None, help="Override the inferred task.")
@click.option("--progress/--no-progress", default=None,
              help="Progress bar on stderr [default: when stderr is a terminal, or "
                   f"{PROGRESS_ENV}=1].")
@cluster_option
@kb_option
@json_option
@handle_errors
def tune_cmd(data, target, family, budget, metric, cv, seed, jobs, time_limit, search,
             warm_start, strategy, space_file, max_fit_seconds, no_log, out, name, task,
             progress, cluster, kb_path, server, as_json) -> None:
    """Tune FAMILY on DATA: warm-start suggestions first, then Bayesian optimisation."""
    history = open_history(kb_path, server, must_exist=False)  # a path or a Client
    bar = TrialProgressBar(budget, stream=sys.stderr, enabled=progress)
    try:
        # without --no-log a missing history is an error; with it, a cold start
        result = tune(data, target=target, family=family, budget=budget, metric=metric, cv=cv,
                      seed=seed, jobs=jobs, time_limit=time_limit, search=search, kb=history,
                      log=not no_log, task=task, out=out, name=name, warm_start=warm_start,
                      space=space_file, strategy=strategy, progress=bar,
                      max_fit_seconds=max_fit_seconds, cluster=cluster,
                      refit=False)  # the command keeps no model: nothing is pickled
    finally:
        bar.close()
    if as_json:
        emit_json(result.to_dict())
    else:
        _echo_result(result, getattr(history, "path", history), out)
    if result.interrupted:
        click.echo("interrupted: the finished trials were kept", err=True)
        sys.exit(EXIT_INTERRUPTED)


def _echo_result(result: TuneResult, path: Path, out: Path | None) -> None:
    """The notes, the trials best first, the best configuration and what was written."""
    click.echo(f"task: {result.task}")
    for note in result.notes:
        click.echo(note)
    rows = [[i, t.index + 1, t.origin, t.score, t.fold_sd, t.fit_seconds, t.status,
             t.error if t.error else fmt(t.config)]
            for i, t in enumerate(result.ranked(), 1)]
    click.echo(table(rows, ["rank", "trial", "from", result.metric, "fold sd", "fit s",
                            "status", "configuration / error"], align="rrlrrrll"))
    click.echo(f"{len(result.trials)} trials ({result.n_ok} ok) in {result.seconds:.1f} s, "
               f"{result.cv}-fold CV on {result.rows} rows; stopped: {result.stopped}")
    best = result.best
    if best is not None:
        click.echo(f"best: trial {best.index + 1}, {result.metric} {fmt(best.score)}: "
                   f"{fmt(best.config)}")
    if result.logged is not None:
        lg = result.logged
        click.echo(f"logged study {lg.study_id[:12]} into {path} "
                   f"({'new dataset' if lg.dataset_is_new else 'known dataset'} "
                   f"{lg.dataset_id} '{lg.label}')")
    if out is not None and best is not None:
        click.echo(f"best configuration written to {out}")
    click.echo("The scores above were used to choose the configuration: validate the "
               "final model on held-out data.")
