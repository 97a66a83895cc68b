"""The ``warmstart`` command group: each subcommand calls one documented library function.

This module only assembles the group; the commands live in their own modules and share
options and error handling through :mod:`cli.common`. Nothing imports this module but
the entry points (the ``warmstart`` script and ``python -m cli.main``).

A command's module is imported only when that command runs (or its own help is asked
for): ``warmstart --help`` lists the commands from the one-line summaries below, so it
loads click and nothing else, and ``warmstart families`` does not pay for pandas or
scikit-learn. ``tests/test_cli_lazy.py`` checks each summary against its command.

Exit codes: 0 success; 1 nothing to suggest or a check found problems; 2 bad input
(nothing written); 130 ``tune`` interrupted.
"""

from __future__ import annotations

from importlib import import_module

import click

import warmstart
from cli.common import CommandGroup
from cli.examples import attach_examples

# name -> (module, attribute, the first line of the command's help)
COMMANDS: dict[str, tuple[str, str, str]] = {
    "families": ("cli.families", "families_cmd",
                 "List the model families and their search spaces."),
    "fingerprint": ("cli.dataset_commands", "fingerprint_cmd",
                    "Compute a dataset's meta-feature fingerprint (warnings about dirty "
                    "columns on stderr)."),
    "log": ("cli.dataset_commands", "log_cmd",
            "Log a finished study (its trials) into the team history."),
    "similar": ("cli.dataset_commands", "similar_cmd",
                "Show the past datasets most similar to DATA, and why."),
    "suggest": ("cli.dataset_commands", "suggest_cmd",
                "Suggest starting configurations for FAMILY on DATA."),
    "backtest": ("cli.backtest", "backtest_cmd",
                 "Leave-one-dataset-out backtest of the ranking strategies on the history."),
    "tune": ("cli.tune", "tune_cmd",
             "Tune FAMILY on DATA: warm-start suggestions first, then Bayesian optimisation."),
    "kb": ("cli.kb", "kb_group", "Create and inspect the team history."),
    "serve": ("cli.serve", "serve_cmd",
              "Serve the history over HTTP: a JSON API and a read-only web view at /."),
    "map": ("cli.serve", "map_cmd",
            "Draw the history's datasets by meta-feature distance; optionally place DATA."),
    "report": ("cli.serve", "report_cmd",
               "Write one self-contained HTML report of DATA against the history."),
}


class LazyGroup(CommandGroup):
    """A group whose commands are imported from their modules on first use.

    Each command gets its worked example (:mod:`cli.examples`) when it is loaded.
    """

    def __init__(self, *args, lazy: dict[str, tuple[str, str, str]], **kwargs):
        super().__init__(*args, **kwargs)
        self.lazy = lazy

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(set(super().list_commands(ctx)) | set(self.lazy))

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name in self.lazy and cmd_name not in self.commands:
            module, attribute, _ = self.lazy[cmd_name]
            command = getattr(import_module(module), attribute)
            attach_examples(command, cmd_name)
            self.add_command(command, cmd_name)
        return super().get_command(ctx, cmd_name)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """The command list from the summaries, without importing unloaded commands."""
        names = self.list_commands(ctx)
        if not names:
            return
        limit = formatter.width - 6 - max(len(n) for n in names)
        rows = []
        for name in names:
            if name in self.commands:
                rows.append((name, self.commands[name].get_short_help_str(limit)))
            else:
                stand_in = click.Command(name, help=self.lazy[name][2])  # click's truncation
                rows.append((name, stand_in.get_short_help_str(limit)))
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(cls=LazyGroup, lazy=COMMANDS,
             context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(warmstart.__version__, prog_name="warmstart")
def main() -> None:
    """Warm-start hyperparameter tuning from your team's history of past studies."""


attach_examples(main)  # the group's own; each command gets its own when loaded

if __name__ == "__main__":  # pragma: no cover
    main()
