"""Search spaces: typed hyperparameters, validation, sampling, clipping and encoding.

A configuration is a plain ``dict`` from parameter name (exactly the scikit-learn
estimator's keyword) to a JSON-compatible value. ``None`` is a legal value only for
numeric parameters declared ``allow_none`` (for example ``max_depth=None``, "no limit")
and for categorical parameters that list it among their choices.

There is one class per kind of parameter: :class:`FloatParam`, :class:`IntParam`,
:class:`CategoricalParam` and :class:`BoolParam`. Each owns its validation, sampling,
clipping, its columns in the unit-cube encoding (:meth:`Param.to_unit` and its inverse
:meth:`Param.from_unit`), its JSON form and a one-line description; a
:class:`SearchSpace` composes them.

Conditional parameters carry a :class:`Condition`: the parameter is *active* only when
another parameter takes one of the listed values; an inactive parameter is left out
of a configuration.
"""

from __future__ import annotations

import json
import math
import os
from abc import ABC, abstractmethod
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, ClassVar, Protocol

import numpy as np

from warmstart.errors import BadInputError
from warmstart.io import read_json_file

FLOAT, INT, CATEGORICAL, BOOL = "float", "int", "categorical", "bool"
# The share of draws that take "None" for a numeric parameter that allows it.
NONE_SHARE = 0.2


@dataclass(frozen=True)
class Condition:
    """The owning parameter applies only when ``parent`` takes one of ``values``."""

    parent: str
    values: tuple[Any, ...]

    def holds(self, config: Mapping[str, Any]) -> bool:
        return config.get(self.parent, _MISSING) in self.values

    def to_dict(self) -> dict[str, Any]:
        return {"parent": self.parent, "in": list(self.values)}


_MISSING = object()
# What :meth:`Param.clip` returns for a value that cannot be brought inside the space.
UNUSABLE = object()


_NUMBERS = (int, float, np.integer, np.floating)
_BOOLS = (bool, np.bool_)


def _is_number(value: Any) -> bool:
    return isinstance(value, _NUMBERS)


def _is_bool(value: Any) -> bool:
    return isinstance(value, _BOOLS)


def _same(a: Any, b: Any) -> bool:
    """Equal as configuration values: numbers by value, anything else by type and value."""
    if a is None or b is None:
        return a is b
    if _is_number(a) and _is_number(b) and not isinstance(a, bool):
        return a == b
    return type(a) is type(b) and a == b


def _g(x: Any) -> str:
    return f"{x:g}" if _is_number(x) and not _is_bool(x) else str(x)


class Param(ABC):
    """What every kind of hyperparameter shares.

    Every subclass is a frozen dataclass with at least ``name`` (the estimator's keyword,
    verbatim), ``default`` (the value that stands for the parameter when a configuration
    leaves it out: the estimator's own default where that is a value of this kind,
    otherwise a representative value; SVC's ``gamma="scale"`` is encoded as 0.1, which is
    what "scale" gives on standardised data with ten columns) and ``condition`` (when
    set, the parameter is active only under it).
    """

    kind: ClassVar[str]
    name: str
    default: Any
    condition: Condition | None
    # Read alike for every kind by code that only asks "may it be None / has it choices".
    allow_none: bool = False
    choices: tuple[Any, ...] = ()

    @property
    def accepts_none(self) -> bool:
        """Whether ``None`` is a legal value."""
        return self.allow_none

    @property
    def width(self) -> int:
        """Number of columns this parameter takes in :meth:`SearchSpace.encode`."""
        return 1

    # -- validation -------------------------------------------------------------------
    def problem(self, value: Any) -> str | None:
        """Return why ``value`` is not allowed for this parameter, or None when it is."""
        if value is None:
            return None if self.accepts_none else f"parameter {self.name!r} may not be empty/None"
        return self._problem(value)

    def coerce(self, value: Any) -> Any:
        """Return ``value`` as the canonical Python type (after :meth:`problem` said None)."""
        return None if value is None else self._coerce(value)

    @abstractmethod
    def clip(self, value: Any) -> Any:
        """The nearest allowed value, or :data:`UNUSABLE` when there is none."""

    @abstractmethod
    def _problem(self, value: Any) -> str | None: ...

    @abstractmethod
    def _coerce(self, value: Any) -> Any: ...

    # -- sampling and encoding --------------------------------------------------------
    @abstractmethod
    def sample(self, rng: np.random.Generator) -> Any:
        """One value drawn at random (uniformly, or log-uniformly where declared)."""

    @abstractmethod
    def to_unit(self, value: Any) -> list[float]:
        """The value's ``width`` columns in the numeric encoding, each in [0, 1]."""

    @abstractmethod
    def from_unit(self, u: float | Sequence[float]) -> Any:
        """Inverse of :meth:`to_unit`: ``width`` columns (any reals) back to a valid value."""

    # -- JSON and description ---------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """The JSON description (an entry of ``warmstart families --json``)."""
        d: dict[str, Any] = {"name": self.name, "type": self.kind, **self._spec()}
        d["default"] = self.default
        if self.condition is not None:
            d["condition"] = self.condition.to_dict()
        return d

    def _spec(self) -> dict[str, Any]:
        return {}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Param:
        """Rebuild a parameter from :meth:`to_dict`'s output."""
        if not isinstance(d, Mapping) or not isinstance(d.get("type"), str) \
                or d["type"] not in KINDS:
            raise BadInputError(f"a parameter needs a 'type' among {list(KINDS)}, got {d!r}")
        cond = d.get("condition")
        try:
            condition = None if cond is None else Condition(cond["parent"], tuple(cond["in"]))
            return KINDS[d["type"]]._from_spec(d, condition)
        except (KeyError, TypeError, ValueError) as exc:
            raise BadInputError(f"parameter description {d!r} is not valid: {exc}") from None

    @classmethod
    @abstractmethod
    def _from_spec(cls, d: Mapping[str, Any], condition: Condition | None) -> Param: ...

    def restrict(self, entry: Mapping[str, Any]) -> Param:
        """This parameter narrowed by a user's search-space entry (see
        :meth:`SearchSpace.from_dict`); kinds with nothing to narrow return themselves."""
        return self

    @abstractmethod
    def describe(self) -> str:
        """The allowed values in one line, e.g. ``[2, 30] or None`` or ``gini | entropy``."""


@dataclass(frozen=True)
class NumericParam(Param):
    """A number in ``[low, high]``: what :class:`FloatParam` and :class:`IntParam` share.

    Parameters
    ----------
    name : str
        The estimator's keyword argument, verbatim.
    low, high : float
        Inclusive bounds (whole numbers for :class:`IntParam`).
    log : bool
        Sample and encode on a log scale (needs ``low > 0``).
    allow_none : bool
        ``None`` is also allowed (scikit-learn's "no limit"); the encoding places it at
        the top of the range with an extra 0/1 column.
    default : float, int or None
        The value that stands for the parameter when a configuration leaves it out (it
        may lie outside a user-narrowed range; see :meth:`SearchSpace.clip`).
    condition : Condition, optional
        When set, the parameter is active only under that condition.
    """

    name: str
    low: float
    high: float
    log: bool = False
    allow_none: bool = False
    default: Any = None
    condition: Condition | None = None

    def __post_init__(self) -> None:
        if not self.low <= self.high:
            raise ValueError(f"parameter {self.name!r}: low must not exceed high")
        if self.log and not self.low > 0:
            raise ValueError(f"parameter {self.name!r}: a log scale needs low > 0")

    @property
    def width(self) -> int:
        return 2 if self.allow_none else 1

    @abstractmethod
    def _snap(self, x: float) -> Any:
        """``x`` brought inside the bounds, as a value of this kind."""

    def _step_problem(self, value: Any) -> str | None:
        return None

    def _problem(self, value: Any) -> str | None:
        if _is_bool(value) or not _is_number(value):
            return f"parameter {self.name!r} must be a number ({self.kind}), not {value!r}"
        if not math.isfinite(float(value)):
            return f"parameter {self.name!r} must be finite, not {value!r}"
        why = self._step_problem(value)
        if why is None and not (self.low <= float(value) <= self.high):
            why = f"parameter {self.name!r} = {value!r} is outside [{self.low:g}, {self.high:g}]"
        return why

    def clip(self, value: Any) -> Any:
        if value is None:
            return None if self.allow_none else UNUSABLE
        if isinstance(value, _NUMBERS) and not isinstance(value, bool):
            return self._snap(float(value))
        return UNUSABLE

    def sample(self, rng: np.random.Generator) -> Any:
        if self.allow_none and rng.random() < NONE_SHARE:
            return None
        if self.log:
            x = float(np.exp(rng.uniform(np.log(self.low), np.log(self.high))))
        else:
            x = float(rng.uniform(self.low, self.high))
        return self._snap(x)

    def unit(self, value: Any) -> float:
        """A value's position on the scale: 0 at ``low``, 1 at ``high`` (log where declared)."""
        lo, hi, v = float(self.low), float(self.high), float(value)
        if self.log:
            lo, hi, v = math.log(lo), math.log(hi), math.log(v)
        return 0.0 if hi == lo else (v - lo) / (hi - lo)

    def to_unit(self, value: Any) -> list[float]:
        # A logged value outside the space (0 on a log scale, text such as 'sqrt') is
        # encoded where the space would hold it: at the nearest bound, else the default.
        if value is not None and not (type(value) in (int, float)
                                      and self.low <= value <= self.high):
            value = self.clip(value)
            value = self.default if value is UNUSABLE else value
        # "no limit" sits at the top of the range; its own column tells it apart
        cols = [1.0 if value is None else min(1.0, max(0.0, self.unit(value)))]
        if self.allow_none:
            cols.append(1.0 if value is None else 0.0)
        return cols

    def from_unit(self, u: float | Sequence[float]) -> Any:
        """A position on the scale (clipped to [0, 1]) back to a valid value; given both
        columns of a parameter that allows None, a second column >= 0.5 means None."""
        cols = np.ravel(u)
        if self.allow_none and cols.size > 1 and cols[1] >= 0.5:
            return None
        pos = min(1.0, max(0.0, float(cols[0])))
        lo, hi = float(self.low), float(self.high)
        if self.log:
            x = math.exp(math.log(lo) + pos * (math.log(hi) - math.log(lo)))
        else:
            x = lo + pos * (hi - lo)
        return self._snap(x)

    def _spec(self) -> dict[str, Any]:
        return {"low": self.low, "high": self.high, "log": self.log,
                "allow_none": self.allow_none}

    @classmethod
    def _from_spec(cls, d: Mapping[str, Any], condition: Condition | None) -> Param:
        return cls(d["name"], d["low"], d["high"], bool(d.get("log", False)),
                   bool(d.get("allow_none", False)), d.get("default"), condition)

    def restrict(self, entry: Mapping[str, Any]) -> Param:
        try:
            low, high = float(entry.get("low", self.low)), float(entry.get("high", self.high))
        except (TypeError, ValueError):
            low = high = math.nan
        if not (self.low <= low <= high <= self.high):
            raise BadInputError(
                f"search-space range for {self.name!r} must lie inside "
                f"[{self.low:g}, {self.high:g}] with low <= high"
            )
        why = self._step_problem(low) or self._step_problem(high)
        if why:
            raise BadInputError(f"search-space range: {why}")
        log = bool(entry.get("log", self.log)) and low > 0
        return replace(self, low=low, high=high, log=log)

    def describe(self) -> str:
        return (f"[{_g(self.low)}, {_g(self.high)}]" + (" log" if self.log else "")
                + (" or None" if self.allow_none else ""))


@dataclass(frozen=True)
class FloatParam(NumericParam):
    """A real-valued hyperparameter (fields as :class:`NumericParam`)."""

    kind: ClassVar[str] = FLOAT

    def _snap(self, x: float) -> Any:
        return min(self.high, max(self.low, x))

    def _coerce(self, value: Any) -> Any:
        return float(value)


@dataclass(frozen=True)
class IntParam(NumericParam):
    """An integer hyperparameter (fields as :class:`NumericParam`); real values round to
    the nearest integer (half to even, Python's ``round``), then clip to the bounds."""

    kind: ClassVar[str] = INT

    def __post_init__(self) -> None:
        super().__post_init__()
        if self._step_problem(self.low) or self._step_problem(self.high):
            raise ValueError(f"parameter {self.name!r}: integer bounds must be whole numbers")

    def _snap(self, x: float) -> Any:
        return int(min(self.high, max(self.low, round(x))))

    def _step_problem(self, value: Any) -> str | None:
        if float(value) != int(value):
            return f"parameter {self.name!r} must be an integer, not {value!r}"
        return None

    def _coerce(self, value: Any) -> Any:
        return int(value)


@dataclass(frozen=True)
class CategoricalParam(Param):
    """One of a fixed tuple of values; encoded one-hot.

    Parameters
    ----------
    name : str
        The estimator's keyword argument, verbatim.
    choices : tuple
        The allowed values, JSON scalars; ``None`` may be one of them.
    default : Any
        The choice that stands for the parameter when a configuration leaves it out.
    condition : Condition, optional
        When set, the parameter is active only under that condition.
    """

    kind: ClassVar[str] = CATEGORICAL
    name: str
    choices: tuple[Any, ...]
    default: Any = None
    condition: Condition | None = None

    def __post_init__(self) -> None:
        if not self.choices:
            raise ValueError(f"parameter {self.name!r}: a categorical needs choices")

    @property
    def accepts_none(self) -> bool:
        return None in self.choices

    @property
    def width(self) -> int:
        return len(self.choices)

    def _match(self, value: Any) -> Any:
        """The declared choice equal to ``value`` (numbers by value), or _MISSING."""
        if _is_number(value) and not isinstance(value, bool):
            matches = (c for c in self.choices if _is_number(c) and c == value)
        else:
            matches = (c for c in self.choices if c == value and type(c) is type(value))
        return next(matches, _MISSING)

    def _problem(self, value: Any) -> str | None:
        if self._match(value) is _MISSING:
            return f"parameter {self.name!r} must be one of {list(self.choices)}, not {value!r}"
        return None

    def _coerce(self, value: Any) -> Any:
        return self._match(value)

    def clip(self, value: Any) -> Any:
        match = self._match(value)  # None matches a None choice
        return UNUSABLE if match is _MISSING else match

    def sample(self, rng: np.random.Generator) -> Any:
        return self.choices[int(rng.integers(len(self.choices)))]

    def to_unit(self, value: Any) -> list[float]:
        return [1.0 if _same(c, value) else 0.0 for c in self.choices]

    def from_unit(self, u: float | Sequence[float]) -> Any:
        """The choice whose column is largest (the first on ties)."""
        return self.choices[int(np.argmax(np.ravel(u)[: len(self.choices)]))]

    def _spec(self) -> dict[str, Any]:
        return {"choices": list(self.choices)}

    @classmethod
    def _from_spec(cls, d: Mapping[str, Any], condition: Condition | None) -> Param:
        return cls(d["name"], tuple(d["choices"]), d.get("default"), condition)

    def restrict(self, entry: Mapping[str, Any]) -> Param:
        choices = entry.get("choices", self.choices)
        ok = isinstance(choices, (list, tuple)) and choices \
            and all(self.problem(c) is None for c in choices)
        if not ok:
            raise BadInputError(
                f"search-space choices for {self.name!r} must be a non-empty subset of "
                f"{list(self.choices)}"
            )
        return replace(self, choices=tuple(self.coerce(c) for c in choices))

    def describe(self) -> str:
        return " | ".join("None" if c is None else _g(c) for c in self.choices)


@dataclass(frozen=True)
class BoolParam(Param):
    """``True`` or ``False``; encoded as one 0/1 column."""

    kind: ClassVar[str] = BOOL
    name: str
    default: Any = None
    condition: Condition | None = None

    def _problem(self, value: Any) -> str | None:
        if _is_bool(value):
            return None
        return f"parameter {self.name!r} must be true or false, not {value!r}"

    def _coerce(self, value: Any) -> Any:
        return bool(value)

    def clip(self, value: Any) -> Any:
        return bool(value) if isinstance(value, _BOOLS) else UNUSABLE

    def sample(self, rng: np.random.Generator) -> Any:
        return bool(rng.integers(2))

    def to_unit(self, value: Any) -> list[float]:
        return [1.0 if value else 0.0]

    def from_unit(self, u: float | Sequence[float]) -> Any:
        """True when the column is at least 0.5."""
        return bool(np.ravel(u)[0] >= 0.5)

    @classmethod
    def _from_spec(cls, d: Mapping[str, Any], condition: Condition | None) -> Param:
        return cls(d["name"], d.get("default"), condition)

    def describe(self) -> str:
        return "true | false"


KINDS: dict[str, type[Param]] = {c.kind: c for c in (FloatParam, IntParam, CategoricalParam,
                                                     BoolParam)}


def from_unit(param: Param, u: float | Sequence[float]) -> Any:
    """Inverse of the parameter's unit encoding (:meth:`Param.from_unit`): for a numeric
    parameter, a position in [0, 1] (clipped there) back to a valid value."""
    return param.from_unit(u)


@dataclass(frozen=True)
class SearchSpace:
    """An ordered set of parameters for one estimator; parents come before the
    parameters whose :class:`Condition` names them."""

    params: tuple[Param, ...]
    _by_name: dict[str, Param] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        by_name: dict[str, Param] = {}
        for p in self.params:
            if p.name in by_name:
                raise ValueError(f"parameter {p.name!r} is declared twice")
            if p.condition is not None and p.condition.parent not in by_name:
                raise ValueError(f"parameter {p.name!r}: its condition's parent "
                                 f"{p.condition.parent!r} must be declared before it")
            by_name[p.name] = p
        object.__setattr__(self, "_by_name", by_name)

    def __iter__(self):
        return iter(self.params)

    def __contains__(self, name: str) -> bool:
        return name in self._by_name

    def __getitem__(self, name: str) -> Param:
        return self._by_name[name]

    @property
    def names(self) -> list[str]:
        return [p.name for p in self.params]

    @property
    def width(self) -> int:
        """Number of columns of :meth:`encode`."""
        return sum(p.width for p in self.params)

    def is_active(self, param: Param, config: Mapping[str, Any]) -> bool:
        return param.condition is None or param.condition.holds(config)

    def _active(self, config: dict[str, Any]) -> dict[str, Any]:
        """``config`` without the parameters its own values make inactive."""
        return {k: v for k, v in config.items() if self.is_active(self._by_name[k], config)}

    def validate(self, config: Mapping[str, Any]) -> dict[str, Any]:
        """Check a configuration and return it with canonical types.

        Unknown names and ill-typed or out-of-range values raise :class:`BadInputError`.
        Missing parameters are allowed (the estimator's default applies); a value given
        for an inactive conditional parameter is dropped.
        """
        out: dict[str, Any] = {}
        for name, value in config.items():
            if name not in self._by_name:
                raise BadInputError(
                    f"unknown parameter {name!r}; this family declares {self.names}"
                )
            param = self._by_name[name]
            why = param.problem(value)
            if why:
                raise BadInputError(why)
            out[name] = param.coerce(value)
        return self._active(out)

    def defaults(self) -> dict[str, Any]:
        """The declared defaults as a full configuration, restricted to active parameters."""
        return self._active({p.name: p.default for p in self.params})

    def sample(self, rng: np.random.Generator) -> dict[str, Any]:
        """Draw one configuration uniformly (log-uniformly where declared).

        Parameters are drawn in declaration order, one after another from ``rng``; an
        inactive parameter draws nothing.
        """
        config: dict[str, Any] = {}
        for p in self.params:  # parents are declared before their children
            if self.is_active(p, config):
                config[p.name] = p.sample(rng)
        return config

    def clip(self, config: Mapping[str, Any]) -> dict[str, Any] | None:
        """Bring a configuration inside this space.

        Numeric values outside the bounds are clipped to the nearest bound (integers
        rounded first); a categorical or boolean value that is not allowed makes the
        configuration unusable (None is returned, the caller drops it); parameters this
        space does not declare are dropped; parameters it declares but the
        configuration lacks take their default.
        """
        out: dict[str, Any] = {}
        for p in self.params:
            value = p.clip(config.get(p.name, p.default))
            if value is UNUSABLE:
                return None
            out[p.name] = value
        return self._active(out)

    def encode(self, configs: Iterable[Mapping[str, Any]]) -> np.ndarray:
        """Encode configurations as a numeric matrix for surrogate models.

        Returns
        -------
        X : ndarray of shape (n_configs, width)
            Numeric parameters scaled to [0, 1] (log scale where declared), with an
            extra 0/1 column for "None" where allowed; categoricals one-hot; booleans
            0/1 (see each parameter's ``to_unit``). An inactive or missing parameter is
            encoded as its default, so that identical effective configurations get
            identical rows.
        """
        rows = [[u for p in self.params for u in p.to_unit(config.get(p.name, p.default))]
                for config in configs]
        return np.asarray(rows, dtype=float).reshape(-1, self.width)

    def decode(self, X: np.ndarray) -> list[dict[str, Any]]:
        """Inverse of :meth:`encode`: rows of shape (n, width) back to configurations.

        Each parameter reads its own columns (:meth:`Param.from_unit`); parameters made
        inactive by the decoded values are dropped.
        """
        X = np.asarray(X, dtype=float).reshape(-1, self.width)
        edges = np.cumsum([0] + [p.width for p in self.params])
        return [self._active({p.name: p.from_unit(row[a:b])
                              for p, a, b in zip(self.params, edges[:-1], edges[1:])})
                for row in X]

    def to_dict(self) -> list[dict[str, Any]]:
        """A JSON-compatible description (what ``warmstart families --json`` prints)."""
        return [p.to_dict() for p in self.params]

    @classmethod
    def from_dict(cls, spec: list[dict[str, Any]],
                  within: SearchSpace | None = None) -> SearchSpace:
        """Build a space from JSON.

        With ``within``, a user restriction checked against that declared space: each
        entry names a declared parameter and may narrow its ``low``/``high``/``log`` or
        its ``choices``; parameters not mentioned keep their declared range. Without it,
        ``spec`` is a full description as :meth:`to_dict` writes it.
        """
        if not isinstance(spec, list) or not all(isinstance(e, dict) for e in spec):
            raise BadInputError("a search-space file must be a JSON list of parameter objects")
        if within is None:
            try:
                return cls(tuple(Param.from_dict(e) for e in spec))
            except ValueError as exc:
                raise BadInputError(f"search space is not valid: {exc}") from None
        overrides: dict[str, dict[str, Any]] = {}
        for entry in spec:
            name = entry.get("name")
            if not isinstance(name, str) or name not in within:
                raise BadInputError(
                    f"search-space file names unknown parameter {name!r}; "
                    f"this family declares {within.names}"
                )
            overrides[name] = entry
        return cls(tuple(p.restrict(overrides[p.name]) if p.name in overrides else p
                         for p in within.params))


class _HasSpaces(Protocol):
    def space(self, task: str) -> SearchSpace: ...


def user_space(spec: Any, family: _HasSpaces, task: str) -> SearchSpace:
    """A user restriction of ``family``'s space for ``task``.

    ``spec`` is a :class:`SearchSpace` (returned as is), a JSON list as accepted by
    :meth:`SearchSpace.from_dict`, or the path of a JSON file holding one.
    """
    if isinstance(spec, SearchSpace):
        return spec
    if isinstance(spec, (str, os.PathLike)):
        spec = read_json_file(spec, "search-space")
    return SearchSpace.from_dict(spec, within=family.space(task))


def config_key(config: Mapping[str, Any]) -> str:
    """A canonical JSON string of a configuration, used to de-duplicate and to store."""
    return json.dumps({k: config[k] for k in sorted(config)}, sort_keys=True,
                      separators=(",", ":"))
