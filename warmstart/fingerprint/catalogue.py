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

Each entry's ``value_range`` is written once, as text in interval notation, and is
parsed when the entry is registered: numbers, ``inf``, the name of another meta-feature
of the same fingerprint with an optional ``+``/``-`` offset (``"[1, rows]"``,
``"[0, classes - 1)"``), and unions joined by ``or``. Counts are declared
``integer=True``. :func:`range_problem` checks a value against both; loading a
fingerprint from JSON refuses one that fails (:meth:`Fingerprint.from_dict
<warmstart.fingerprint.Fingerprint.from_dict>`).

``CATALOGUE_VERSION`` counts changes to the catalogue: bump it whenever a meta-feature
is added, removed, or changes meaning, and regenerate the shipped demo history.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from warmstart.fingerprint.profile import DatasetProfile
from warmstart.fingerprint.sketches import key_of, mix64

CATALOGUE_VERSION = 1
COLUMN_CAP = 500
COLUMN_SEED = np.uint64(0x5EED_C0_1D)
BOTH, CLASSIFICATION, REGRESSION = "both", "classification", "regression"
SUMMARY_STATS = ("min", "q1", "median", "q3", "max", "mean")


# One end of an interval: a number, or (another meta-feature's name, offset).
Bound = tuple[str | None, float]
Interval = tuple[Bound, Bound]
_INTERVAL = re.compile(r"\s*[\[(]\s*([^,]+?)\s*,\s*([^,]+?)\s*[\])]\s*")
_BOUND = re.compile(r"([a-z][a-z0-9_]*)\s*(?:([+-])\s*([0-9.]+))?")
# Values computed at an end of their range may be off by rounding: never refuse those.
RANGE_TOLERANCE = 1e-9


def _parse_bound(text: str, where: str) -> Bound:
    text = text.strip()
    try:  # "0", "-2", "5000", "inf", "-inf"
        number = float(text.replace(" ", ""))
    except ValueError:
        number = math.nan
    if not math.isnan(number):
        return None, number
    m = _BOUND.fullmatch(text)
    if m is None or m.group(1) in ("nan", "inf"):
        raise ValueError(f"range {where!r}: cannot read the bound {text!r}")
    offset = float(m.group(3) or 0.0)
    return m.group(1), -offset if m.group(2) == "-" else offset


def parse_range(text: str) -> tuple[Interval, ...]:
    """The intervals of a range text such as ``"[0, 1]"``, ``"[1, rows]"`` or
    ``"[0, 1] or (-inf, 1]"`` (raises ValueError on anything else).

    Returns
    -------
    tuple of ((name or None, offset), (name or None, offset))
        Low and high end of each interval: a number when name is None, else the named
        meta-feature's value plus offset.
    """
    out = []
    for part in text.split(" or "):
        m = _INTERVAL.fullmatch(part)
        if m is None:
            raise ValueError(f"range {text!r} is not in interval notation")
        out.append((_parse_bound(m.group(1), text), _parse_bound(m.group(2), text)))
    return tuple(out)


def _end(bound: Bound, values: Mapping[str, float], default: float) -> float:
    name, offset = bound
    if name is None:
        return offset
    ref = values.get(name, math.nan)
    return ref + offset if isinstance(ref, float | int) and math.isfinite(ref) else default


def range_problem(name: str, value: float, values: Mapping[str, float]) -> str | None:
    """Why ``value`` cannot be meta-feature ``name``'s value, or None when it can.

    ``values`` holds the same fingerprint's other values (for ranges such as
    ``[1, rows]``; an undefined reference leaves that end open). Ends are checked as
    closed with a relative tolerance of ``RANGE_TOLERANCE``, so a value computed at an
    end of its range (a rounding away from it) is never refused. NaN (undefined) is
    always allowed.
    """
    mf = CATALOGUE[name]
    if math.isnan(value):
        return None
    if mf.integer and value != math.floor(value):
        return f"is {value:.10g}, not a whole number (it is a count)"
    for low, high in mf.bounds:
        lo, hi = _end(low, values, -math.inf), _end(high, values, math.inf)
        slack = RANGE_TOLERANCE * max(1.0, abs(value))
        if lo - slack <= value <= hi + slack:
            return None
    return f"is {value:.10g}, outside its range {mf.value_range}"


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
    integer : bool
        The value is a whole number (a count).
    bounds : tuple of Interval
        ``value_range`` parsed (see :func:`parse_range`).
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
    integer: bool = False
    bounds: tuple[Interval, ...] = ()

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
                "count_like": self.count_like, "basis": self.basis,
                "integer": self.integer}


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
                 tasks: str = BOTH, count_like: bool = False, basis: str = "exact",
                 integer: bool = False):
    """Register ``func(profile) -> float`` as the meta-feature ``name``.

    ``value_range`` is parsed here (see :func:`parse_range`): a range the parser cannot
    read fails at import, not when a fingerprint is checked.
    """

    def register(func: Callable[[DatasetProfile], float]):
        if name in CATALOGUE:
            raise ValueError(f"meta-feature {name!r} registered twice")
        if basis not in BASES:
            raise ValueError(f"meta-feature {name!r} has an unknown basis {basis!r}")
        CATALOGUE[name] = MetaFeature(name, group, description, method, value_range, tasks,
                                      count_like, func, basis, integer,
                                      parse_range(value_range))
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
