"""Start-up time of the command line, against importing click alone.

Usage::

    python benchmarks/startup.py [--repeat 7]

Runs, alternating, fresh processes of ``python -c "import click"`` (the floor any click
program pays), ``warmstart --help``, ``warmstart families --json``, ``warmstart kb info``
on an empty history and ``python -c "import warmstart"``; prints the median wall time of
each and its ratio to the click floor (target for ``--help``: <= 2x). The median of
alternating runs is used because the machine is shared.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time

ENTRY = "import sys; from cli.main import main; sys.argv = ['warmstart'] + sys.argv[1:]; main()"


def wall(args: list[str]) -> float:
    t = time.perf_counter()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    args = ap.parse_args()
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        kb = os.path.join(tmp, "kb")
        subprocess.run([py, "-c", ENTRY, "kb", "init", kb], check=True,
                       stdout=subprocess.DEVNULL)
        cases = {
            'python -c "import click"': [py, "-c", "import click"],
            "warmstart --help": [py, "-c", ENTRY, "--help"],
            "warmstart families --json": [py, "-c", ENTRY, "families", "--json"],
            "warmstart kb info": [py, "-c", ENTRY, "kb", "info", "--kb", kb],
            'python -c "import warmstart"': [py, "-c", "import warmstart"],
        }
        runs: dict[str, list[float]] = {name: [] for name in cases}
        for _ in range(args.repeat):
            for name, cmd in cases.items():
                runs[name].append(wall(cmd))
    floor = statistics.median(runs['python -c "import click"'])
    print(f"{'':<32}{'median s':>9}{'ratio':>7}   ({args.repeat} alternating runs each)")
    for name, values in runs.items():
        note = "   target <= 2.0" if name == "warmstart --help" else ""
        print(f"{name:<32}{statistics.median(values):>9.3f}"
              f"{statistics.median(values) / floor:>7.2f}{note}")


if __name__ == "__main__":
    main()
