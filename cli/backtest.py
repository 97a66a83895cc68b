"""``warmstart backtest``: how the ranking strategies would have done on the history."""

from __future__ import annotations

from pathlib import Path

import click

from cli.common import family_option, handle_errors, json_option, kb_option, open_history
from cli.output import emit_json, fmt, table
from cli.progress import CountProgressBar
from warmstart.backtest import DEFAULT_KS, backtest, check_plot_output, plot_regret, verdict
from warmstart.errors import BadInputError
from warmstart.strategies import STRATEGIES


def _int_list(text: str, what: str) -> list[int]:
    try:
        values = [int(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise BadInputError(f"{what} must be comma-separated integers, not {text!r}") from None
    if not values or min(values) < 1:
        raise BadInputError(f"{what} must be positive integers")
    return values


@click.command("backtest")
@family_option
@click.option("--ks", default=",".join(map(str, DEFAULT_KS)), show_default=True,
              help="List lengths to score, comma-separated.")
@click.option("--strategies", default=None,
              help="Comma-separated strategy names [default: all: "
                   + ", ".join(STRATEGIES) + "].")
@click.option("--metric", default=None, help="Use only studies of this metric.")
@click.option("--random-repeats", default=10, show_default=True, type=click.IntRange(min=1),
              help="Seeds averaged for the random baseline.")
@click.option("--seed", type=int, default=0, show_default=True)
@click.option("--plot", "plot_file", type=click.Path(path_type=Path), default=None,
              help="Write a PNG of regret against k (needs matplotlib).")
@kb_option
@json_option
@handle_errors
def backtest_cmd(family, ks, strategies, metric, random_repeats, seed, plot_file, kb_path,
                 server, as_json) -> None:
    """Leave-one-dataset-out backtest of the ranking strategies on the history.

    Regret 0 = the list found the held-out dataset's best known configuration,
    1 = no better than its median trial.
    """
    if plot_file is not None:
        check_plot_output(plot_file)
    kb = open_history(kb_path, server)
    names = [s.strip() for s in strategies.split(",")] if strategies else None
    result = backtest(kb, family, _int_list(ks, "--ks"), names, metric=metric, seed=seed,
                      random_repeats=random_repeats,
                      progress=CountProgressBar("held-out datasets"))
    if plot_file is not None:
        plot_regret(result, plot_file)
    if as_json:
        emit_json(result.to_dict())
        return
    metrics = ", ".join(f"{t}: {m}" for t, m in result.metrics.items())
    click.echo(f"backtest of {result.family} over {result.n_held_out} held-out datasets "
               f"({metrics}); normalised regret, lower is better")
    rows = []
    for r in result.summary():
        rows.append([r["strategy"], r["k"], r["mean_regret"], r["std_regret"],
                     f"{fmt(r['q25'])}-{fmt(r['q75'])}",
                     "-" if r.get("beats_random") is None else f"{100 * r['beats_random']:.0f}%",
                     f"{100 * r['predicted_share']:.0f}%"])
    click.echo(table(rows, ["strategy", "k", "mean", "std", "IQR", "beats random",
                            "predicted lookups"], align="lrrrrrr"))
    for line in verdict(result):
        click.echo(line)
    if result.skipped:
        click.echo(f"skipped (best = median): {', '.join(result.skipped)}")
    if plot_file is not None:
        click.echo(f"plot written to {plot_file}")
