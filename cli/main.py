"""The ``warmstart`` command group: each subcommand calls one documented library function.

This module only assembles the group; the commands live in their own modules and share
options and error handling through :mod:`cli.common`. Nothing imports this module but
the entry points (the ``warmstart`` script and ``python -m cli.main``).

Exit codes: 0 success; 1 nothing to suggest or a check found problems; 2 bad input
(nothing written); 130 ``tune`` interrupted.
"""

from __future__ import annotations

import click

import warmstart
from cli.backtest import backtest_cmd
from cli.dataset_commands import fingerprint_cmd, log_cmd, similar_cmd, suggest_cmd
from cli.families import families_cmd
from cli.kb import kb_group
from cli.tune import tune_cmd


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(warmstart.__version__, prog_name="warmstart")
def main() -> None:
    """Warm-start hyperparameter tuning from your team's history of past studies."""


for _command in (families_cmd, fingerprint_cmd, log_cmd, similar_cmd, suggest_cmd,
                 backtest_cmd, tune_cmd, kb_group):
    main.add_command(_command)

if __name__ == "__main__":  # pragma: no cover
    main()
