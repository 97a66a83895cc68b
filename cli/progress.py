"""Progress shown on standard error while a long command runs.

The library reports progress through plain callbacks (``tune(progress=...)`` gets each
finished trial, ``backtest(progress=...)`` gets ``(done, total)``); drawing is the
command line's business and lives here.
"""

from __future__ import annotations

import os
import sys
import time
from typing import Any, TextIO

import click

from warmstart.trials import OK
from warmstart.tune import TuneTrial

PROGRESS_ENV = "WARMSTART_PROGRESS"


class TrialProgressBar:
    """A one-line bar of a tuning study with the best score so far, redrawn in place.

    Called with each finished :class:`~warmstart.tune.TuneTrial`; :meth:`close` ends the
    line.

    Parameters
    ----------
    budget : int
        Trials planned.
    stream : text stream, optional
        Where to draw; defaults to standard error.
    enabled : bool, optional
        Draw or not; by default only when ``stream`` is a terminal or the environment
        variable ``WARMSTART_PROGRESS`` is ``1`` (which lets tests and logs force it).
    width : int
        Characters of the bar itself.
    """

    def __init__(self, budget: int, stream: TextIO | None = None, enabled: bool | None = None,
                 width: int = 24):
        self.budget, self.width = budget, width
        self.stream = stream if stream is not None else sys.stderr
        if enabled is None:
            enabled = os.environ.get(PROGRESS_ENV) == "1" or bool(
                getattr(self.stream, "isatty", lambda: False)())
        self.enabled = enabled
        self.start = time.monotonic()
        self.best: float | None = None
        self.drawn = False

    def __call__(self, trial: TuneTrial) -> None:
        if not self.enabled:
            return
        if trial.status == OK and (self.best is None or trial.score > self.best):
            self.best = trial.score
        done = trial.index + 1
        filled = int(round(self.width * min(done, self.budget) / max(1, self.budget)))
        best = "-" if self.best is None else f"{self.best:.4g}"
        line = (f"\r[{'#' * filled}{'.' * (self.width - filled)}] {done}/{self.budget} "
                f"best {best}  {time.monotonic() - self.start:.0f}s ")
        self.stream.write(line)
        self.stream.flush()
        self.drawn = True

    def close(self) -> None:
        if self.drawn:
            self.stream.write("\n")
            self.stream.flush()


class CountProgressBar:
    """click's progress bar driven by a ``(done, total)`` callback; opened on the first
    call, when the total is known, and closed when ``done`` reaches it."""

    def __init__(self, label: str):
        self.label = label
        self.bar: Any = None

    def __call__(self, done: int, total: int) -> None:
        if self.bar is None:
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(1)
        if done == total:
            self.bar.__exit__(None, None, None)
