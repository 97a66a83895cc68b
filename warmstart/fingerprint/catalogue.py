"""The meta-feature catalogue: every meta-feature's name, group, meaning and function.

A meta-feature is a function ``profile -> float`` registered with :func:`meta_feature`.
A per-column quantity summarised across columns is registered once with
:func:`column_summary`, which adds one meta-feature per summary statistic
(``_min``, ``_q1``, ``_median``, ``_q3``, ``_max``, ``_mean``).

A meta-feature that is undefined for a dataset (a regression-only one on a
classification task, a categorical summary with no categorical column) is NaN,
never an error.

Each meta-feature states its ``basis``: ``"exact"`` -- computed from one-pass mergeable
summaries of every row (equal, up to rounding, however the rows are batched or
ordered); ``"sketch"`` -- exact while counts stay small (levels, patterns, distinct rows
up to 4096), estimated beyond; ``"sample"`` -- computed on the seeded sample of at most
``SAMPLE_CAP`` rows (all rows for smaller tables); ``"column_sample"`` -- measures over
pairs of columns or over every feature (correlations, principal components, mutual
information, class complexity), computed on the row sample and, in a table of more than
``COLUMN_CAP`` such columns, on a seeded sample of ``COLUMN_CAP`` of them
(:func:`column_sample`), so their cost is bounded in columns as well as rows.

``CATALOGUE_VERSION`` counts changes to the catalogue: bump it whenever a meta-feature
is added, removed, or changes meaning, and regenerate the shipped demo history.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from warmstart.fingerprint.profile import DatasetProfile
from warmstart.fingerprint.sketches import key_of, mix64

CATALOGUE_VERSION = 1
COLUMN_CAP = 500
COLUMN_SEED = np.uint64(0x5EED_C0_1D)
BOTH, CLASSIFICATION, REGRESSION = "both", "classification", "regression"
SUMMARY_STATS = ("min", "q1", "median", "q3", "max", "mean")


@dataclass(frozen=True)
class MetaFeature:
    """One entry of the catalogue.

    Attributes
    ----------
    name : str
        snake_case name, unique in the catalogue.
    group : str
        The group it is listed under.
    description : str
        One line: what it measures.
    method : str
        Formula or method, with its reference where there is one.
    value_range : str
        The range of values, e.g. ``"[0, 1]"``.
    tasks : {"both", "classification", "regression"}
        Where it is defined; elsewhere it is NaN.
    count_like : bool
        A count or size (scaled by log before distances are taken).
    func : callable
        ``func(profile) -> float``.
    basis : {"exact", "sketch", "sample"}
        What the value is computed from (see the module docstring).
    """

    name: str
    group: str
    description: str
    method: str
    value_range: str
    tasks: str
    count_like: bool
    func: Callable[[DatasetProfile], float]
    basis: str = "exact"

    def compute(self, profile: DatasetProfile) -> float:
        if self.tasks != BOTH and self.tasks != profile.task:
            return float("nan")
        try:
            value = float(self.func(profile))
        except (ValueError, ZeroDivisionError, FloatingPointError, np.linalg.LinAlgError):
            # Undefined for this dataset (e.g. too few rows of a class): NaN, not an error.
            return float("nan")
        return value if np.isfinite(value) else float("nan")

    def to_dict(self) -> dict[str, object]:
        return {"name": self.name, "group": self.group, "description": self.description,
                "method": self.method, "range": self.value_range, "tasks": self.tasks,
                "count_like": self.count_like, "basis": self.basis}


CATALOGUE: dict[str, MetaFeature] = {}
GROUPS: dict[str, str] = {}


def group(name: str, title: str) -> str:
    """Declare a group and its one-line title; returns ``name`` for use in decorators."""
    GROUPS[name] = title
    return name


BASES = ("exact", "sketch", "sample", "column_sample")
BASIS_NOTES = {
    "exact": "every row",
    "sketch": "exact up to 4096 levels",
    "sample": "seeded sample of at most 5000 rows",
    "column_sample": f"the row sample, and a seeded sample of {COLUMN_CAP} columns when "
                     "there are more",
}


def column_sample(names: list[str], cap: int = COLUMN_CAP) -> np.ndarray:
    """Positions of the columns a ``"column_sample"`` measure uses, in table order.

    All of them when there are at most ``cap``; else the ``cap`` names of smallest seeded
    hash priority ``mix64(key_of(name) ^ COLUMN_SEED)``, so the choice depends on the
    names alone, not on the order of the columns.

    Parameters
    ----------
    names : list of str, length n_columns

    Returns
    -------
    ndarray of int, shape (min(n_columns, cap),), increasing
    """
    if len(names) <= cap:
        return np.arange(len(names))
    priority = mix64(np.array([key_of(n) for n in names], dtype=np.uint64) ^ COLUMN_SEED)
    return np.sort(np.argsort(priority, kind="stable")[:cap])


def meta_feature(name: str, group: str, description: str, method: str, value_range: str,
                 tasks: str = BOTH, count_like: bool = False, basis: str = "exact"):
    """Register ``func(profile) -> float`` as the meta-feature ``name``."""

    def register(func: Callable[[DatasetProfile], float]):
        if name in CATALOGUE:
            raise ValueError(f"meta-feature {name!r} registered twice")
        if basis not in BASES:
            raise ValueError(f"meta-feature {name!r} has an unknown basis {basis!r}")
        CATALOGUE[name] = MetaFeature(name, group, description, method, value_range, tasks,
                                      count_like, func, basis)
        return func

    return register


def column_summary(prefix: str, group: str, description: str, method: str,
                   value_range: str, tasks: str = BOTH, basis: str = "exact"):
    """Register ``func(profile) -> ndarray`` (one value per column) as six summaries.

    NaN entries (columns where the quantity is undefined) are left out of the summary;
    with no defined column every summary is NaN. The per-column array is computed once
    per profile.
    """

    def register(func: Callable[[DatasetProfile], np.ndarray]):
        def per_column(profile: DatasetProfile) -> np.ndarray:
            key = ("column_summary", prefix)
            if key not in profile.cache:
                with np.errstate(all="ignore"):
                    values = np.asarray(func(profile), dtype=float)
                profile.cache[key] = values[np.isfinite(values)]
            return profile.cache[key]

        reducers = {
            "min": np.min, "q1": lambda v: np.quantile(v, 0.25), "median": np.median,
            "q3": lambda v: np.quantile(v, 0.75), "max": np.max, "mean": np.mean,
        }
        for stat in SUMMARY_STATS:
            reducer = reducers[stat]

            def summary(profile: DatasetProfile, _reduce=reducer) -> float:
                values = per_column(profile)
                return float(_reduce(values)) if values.size else float("nan")

            meta_feature(f"{prefix}_{stat}", group, f"{description} ({stat} over columns)",
                         method, value_range, tasks, basis=basis)(summary)
        return func

    return register


def reduce_or_nan(values: np.ndarray, reducer: Callable[[np.ndarray], float]) -> float:
    """``reducer(values)`` as a float, NaN for an empty array (an undefined summary)."""
    return float(reducer(values)) if np.size(values) else float("nan")


def catalogue() -> list[dict[str, object]]:
    """The catalogue as a list of dicts, in registration order (groups stay together)."""
    return [mf.to_dict() for mf in CATALOGUE.values()]
