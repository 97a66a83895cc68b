"""The :class:`Family` record: a scikit-learn model family and its search spaces."""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import Any

from warmstart.spaces import SearchSpace
from warmstart.tasks import TASKS

CATEGORICAL_ENCODINGS = ("one_hot", "ordinal", "native")


@dataclass(frozen=True)
class Family:
    """A model family with one estimator and one search space per task.

    Parameters
    ----------
    name : str
        The family's name in the history and on the command line.
    description : str
        One line for ``warmstart families``.
    estimators : dict
        Task -> dotted path of the scikit-learn estimator class.
    spaces : dict
        Task -> :class:`SearchSpace`; parameter names are the estimator's keywords.
    needs_scaling : bool
        Whether the model is sensitive to feature scale (distance or margin based), so
        its pipeline standardises numeric columns.
    fixed : dict
        Task -> keyword arguments always passed (not tuned), e.g. ``probability``.
    seeded : bool
        Whether the estimator takes ``random_state``.
    categorical_encoding : {"one_hot", "ordinal", "native"}
        How its pipeline turns categorical columns into numbers: one-hot columns
        (linear, kernel and distance models, for which level codes carry no order),
        ordinal codes (tree ensembles: one column per feature, splits can still isolate
        levels), or ordinal codes declared as categorical to an estimator that splits
        on categories itself (``categorical_features`` of histogram gradient boosting).
    scale_target : bool
        Regression only: standardise the target before fitting (and undo it on
        predictions), for models whose hyperparameters are in target units, such as
        the epsilon-insensitive tube of support vector regression.
    """

    name: str
    description: str
    estimators: dict[str, str]
    spaces: dict[str, SearchSpace]
    needs_scaling: bool = False
    fixed: dict[str, dict[str, Any]] | None = None
    seeded: bool = False
    categorical_encoding: str = "one_hot"
    scale_target: bool = False

    def __post_init__(self) -> None:
        if self.categorical_encoding not in CATEGORICAL_ENCODINGS:
            raise ValueError(f"family {self.name!r}: categorical_encoding must be one of "
                             f"{CATEGORICAL_ENCODINGS}")
        for task in TASKS:
            if task not in self.estimators or task not in self.spaces:
                raise ValueError(f"family {self.name!r} declares no {task} estimator/space")

    def space(self, task: str) -> SearchSpace:
        return self.spaces[task]

    def estimator_class(self, task: str) -> type:
        module, _, cls = self.estimators[task].rpartition(".")
        return getattr(importlib.import_module(module), cls)

    def make_estimator(self, task: str, config: dict[str, Any], seed: int | None = None):
        """Return an unfitted estimator for ``task`` with ``config`` applied."""
        kwargs = dict((self.fixed or {}).get(task, {}))
        kwargs.update(config)
        if self.seeded and seed is not None:
            kwargs["random_state"] = seed
        return self.estimator_class(task)(**kwargs)

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "description": self.description,
            "needs_scaling": self.needs_scaling,
            "categorical_encoding": self.categorical_encoding,
            "tasks": {
                task: {"estimator": self.estimators[task], "space": self.spaces[task].to_dict()}
                for task in TASKS
            },
        }
