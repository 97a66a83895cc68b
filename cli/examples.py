"""One worked example per command, shown at the end of its ``--help``.

Kept in one place, beside no command, so that every command (the ``kb`` ones too) ends
its help the same way; :mod:`cli.main` attaches them when it assembles the group.
"""

from __future__ import annotations

import click

DEMO = "examples/quillmarsh_loyalty_churn.csv"
DEMO_TRIALS = "examples/quillmarsh_loyalty_churn_trials.csv"

EXAMPLES: dict[str, str] = {
    "warmstart": "warmstart suggest " + DEMO + " -t churned -f random_forest -k 5",
    "families": "warmstart families --json",
    "fingerprint": f"warmstart fingerprint {DEMO} --target churned",
    "log": (f"warmstart log {DEMO} -t churned -f hist_gradient_boosting "
            f"--trials {DEMO_TRIALS} --kb /tmp/scratch-kb"),
    "similar": f"warmstart similar {DEMO} -t churned -k 5",
    "suggest": (f"warmstart suggest {DEMO} -t churned -f random_forest -k 5 "
                "--space examples/space_random_forest.json"),
    "backtest": "warmstart backtest -f random_forest --ks 1,3,10 --plot regret.png",
    "tune": (f"warmstart tune {DEMO} -t churned -f random_forest --budget 20 "
             "--out best.json --no-log"),
    "kb": "warmstart kb info",
    "kb init": "warmstart kb init /tmp/scratch-kb",
    "kb info": "warmstart kb info --kb knowledge_base",
    "kb check": "warmstart kb check --repair",
    "kb compact": "warmstart kb compact --kb knowledge_base",
    "kb export": "warmstart kb export team-history.zip",
    "kb import": "warmstart kb import other-team.zip --kb knowledge_base",
    "kb migrate": "warmstart kb migrate --kb old_history",
    "kb list": "warmstart kb list --kb knowledge_base",
    "kb show": "warmstart kb show quillmarsh-basket-size --kb knowledge_base",
    "kb delete": "warmstart kb delete 3f2a9c1e --kb /tmp/scratch-kb",
}


def attach_examples(command: click.Command, name: str = "warmstart") -> None:
    """Give ``command`` (and, for a group, each subcommand) its example as the epilog.

    ``name`` is the command's path below ``warmstart`` (``"kb info"``); a command
    without an entry gets a line naming its --help, so that no help ends bare.
    """
    example = EXAMPLES.get(name, f"warmstart {name} --help")
    # "\b" keeps click from re-wrapping the example into the paragraph above it
    command.epilog = f"\b\nExample:\n  {example}"
    if isinstance(command, click.Group):
        for sub_name, sub in command.commands.items():
            attach_examples(sub, sub_name if name == "warmstart" else f"{name} {sub_name}")
