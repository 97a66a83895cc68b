"""Search spaces: typed hyperparameters, validation, sampling, clipping and encoding.

A configuration is a plain ``dict`` from parameter name (exactly the scikit-learn
estimator's keyword) to a JSON-compatible value. ``None`` is a legal value only for
parameters declared ``allow_none`` (for example ``max_depth=None``, "no limit").

Conditional parameters carry a :class:`Condition`: the parameter is *active* only when
another parameter takes one of the listed values; an inactive parameter is left out
of a configuration.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from warmstart.errors import BadInputError

FLOAT, INT, CATEGORICAL, BOOL = "float", "int", "categorical", "bool"


@dataclass(frozen=True)
class Condition:
    """The owning parameter applies only when ``parent`` takes one of ``values``."""

    parent: str
    values: tuple[Any, ...]

    def holds(self, config: Mapping[str, Any]) -> bool:
        return config.get(self.parent, _MISSING) in self.values


_MISSING = object()


@dataclass(frozen=True)
class Param:
    """One hyperparameter.

    Parameters
    ----------
    name : str
        The estimator's keyword argument, verbatim.
    kind : {"float", "int", "categorical", "bool"}
    low, high : float, optional
        Inclusive bounds for numeric kinds.
    log : bool
        Sample and encode on a log scale (numeric kinds, ``low > 0``).
    choices : tuple, optional
        Allowed values for categorical parameters (``None`` may be one of them).
    allow_none : bool
        Numeric parameters only: ``None`` is also allowed (scikit-learn's "no limit").
    default : Any
        The value that stands for this parameter when a configuration leaves it out:
        the estimator's own default where that is a value of this kind, otherwise a
        representative value (SVC's ``gamma="scale"`` is encoded as 0.1, which is what
        "scale" gives on standardised data with ten columns).
    condition : Condition, optional
        When set, the parameter is active only under that condition.
    """

    name: str
    kind: str
    low: float | None = None
    high: float | None = None
    log: bool = False
    choices: tuple[Any, ...] = ()
    allow_none: bool = False
    default: Any = None
    condition: Condition | None = None

    def __post_init__(self) -> None:
        if self.kind in (FLOAT, INT):
            assert self.low is not None and self.high is not None and self.low <= self.high
            assert not self.log or self.low > 0
        elif self.kind == CATEGORICAL:
            assert self.choices
        else:
            assert self.kind == BOOL

    # -- validation -------------------------------------------------------------
    def problem(self, value: Any) -> str | None:
        """Return why ``value`` is not allowed for this parameter, or None when it is."""
        if value is None:
            if self.allow_none or (self.kind == CATEGORICAL and None in self.choices):
                return None
            return f"parameter {self.name!r} may not be empty/None"
        if self.kind == BOOL:
            if isinstance(value, (bool, np.bool_)):
                return None
            return f"parameter {self.name!r} must be true or false, not {value!r}"
        if self.kind == CATEGORICAL:
            if _is_number(value) and not isinstance(value, bool):
                matches = [c for c in self.choices if _is_number(c) and c == value]
            else:
                matches = [c for c in self.choices if c == value and type(c) is type(value)]
            if matches:
                return None
            return f"parameter {self.name!r} must be one of {list(self.choices)}, not {value!r}"
        if isinstance(value, (bool, np.bool_)) or not _is_number(value):
            return f"parameter {self.name!r} must be a number ({self.kind}), not {value!r}"
        if not math.isfinite(float(value)):
            return f"parameter {self.name!r} must be finite, not {value!r}"
        if self.kind == INT and float(value) != int(value):
            return f"parameter {self.name!r} must be an integer, not {value!r}"
        if not (self.low <= float(value) <= self.high):
            return f"parameter {self.name!r} = {value!r} is outside [{self.low:g}, {self.high:g}]"
        return None

    def coerce(self, value: Any) -> Any:
        """Return ``value`` as the canonical Python type (after :meth:`problem` said None)."""
        if value is None:
            return None
        if self.kind == INT:
            return int(value)
        if self.kind == FLOAT:
            return float(value)
        if self.kind == BOOL:
            return bool(value)
        if _is_number(value):
            return next(c for c in self.choices if _is_number(c) and c == value)
        return value

    # -- sampling and encoding ----------------------------------------------------
    def sample(self, rng: np.random.Generator) -> Any:
        if self.kind == BOOL:
            return bool(rng.integers(2))
        if self.kind == CATEGORICAL:
            return self.choices[int(rng.integers(len(self.choices)))]
        if self.allow_none and rng.random() < 0.2:
            return None
        if self.log:
            x = float(np.exp(rng.uniform(np.log(self.low), np.log(self.high))))
        else:
            x = float(rng.uniform(self.low, self.high))
        if self.kind == INT:
            return int(min(self.high, max(self.low, round(x))))
        return x

    def unit(self, value: Any) -> float:
        """Map a numeric value to [0, 1] (log scale when declared)."""
        lo, hi, v = float(self.low), float(self.high), float(value)
        if self.log:
            lo, hi, v = math.log(lo), math.log(hi), math.log(v)
        return 0.0 if hi == lo else (v - lo) / (hi - lo)

    def encoded_width(self) -> int:
        if self.kind == CATEGORICAL:
            return len(self.choices)
        return 2 if self.allow_none else 1


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating))


@dataclass(frozen=True)
class SearchSpace:
    """An ordered set of :class:`Param` for one estimator."""

    params: tuple[Param, ...]
    _by_name: dict[str, Param] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_by_name", {p.name: p for p in self.params})

    def __iter__(self):
        return iter(self.params)

    def __contains__(self, name: str) -> bool:
        return name in self._by_name

    def __getitem__(self, name: str) -> Param:
        return self._by_name[name]

    @property
    def names(self) -> list[str]:
        return [p.name for p in self.params]

    def is_active(self, param: Param, config: Mapping[str, Any]) -> bool:
        return param.condition is None or param.condition.holds(config)

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
        return {k: v for k, v in out.items() if self.is_active(self._by_name[k], out)}

    def defaults(self) -> dict[str, Any]:
        """The declared defaults as a full configuration, restricted to active parameters."""
        config = {p.name: p.default for p in self.params}
        return {p.name: config[p.name] for p in self.params if self.is_active(p, config)}

    def sample(self, rng: np.random.Generator) -> dict[str, Any]:
        """Draw one configuration uniformly (log-uniformly where declared)."""
        config: dict[str, Any] = {}
        for p in self.params:  # parents are declared before their children
            if self.is_active(p, config):
                config[p.name] = p.sample(rng)
        return config

    def clip(self, config: Mapping[str, Any]) -> dict[str, Any] | None:
        """Bring a configuration inside this space.

        Numeric values outside the bounds are clipped to the nearest bound; a
        categorical value that is not among the choices makes the configuration
        unusable (None is returned, the caller drops it); parameters this space does
        not declare are dropped; parameters it declares but the configuration lacks
        take their default.
        """
        out: dict[str, Any] = {}
        for p in self.params:
            value = config.get(p.name, p.default)
            if value is None and (p.allow_none or None in p.choices):
                out[p.name] = None
            elif p.kind in (FLOAT, INT) and _is_number(value) and not isinstance(value, bool):
                x = min(p.high, max(p.low, float(value)))
                out[p.name] = int(round(x)) if p.kind == INT else x
            elif p.problem(value) is None:
                out[p.name] = p.coerce(value)
            else:
                return None
        return {k: v for k, v in out.items() if self.is_active(self._by_name[k], out)}

    def encode(self, configs: Iterable[Mapping[str, Any]]) -> np.ndarray:
        """Encode configurations as a numeric matrix for surrogate models.

        Returns
        -------
        X : ndarray of shape (n_configs, width)
            Numeric parameters scaled to [0, 1] (log scale where declared), with an
            extra 0/1 column for "None" where allowed; categoricals one-hot; booleans
            0/1. An inactive or missing parameter is encoded as its default, so that
            identical effective configurations get identical rows.
        """
        rows = []
        for config in configs:
            row: list[float] = []
            for p in self.params:
                value = config.get(p.name, p.default)
                if p.kind == CATEGORICAL:
                    row.extend(1.0 if _same(c, value) else 0.0 for c in p.choices)
                elif p.kind == BOOL:
                    row.append(1.0 if value else 0.0)
                else:
                    if value is None:
                        row.append(1.0)  # "no limit" sits at the top of the range
                    else:
                        row.append(min(1.0, max(0.0, p.unit(value))))
                    if p.allow_none:
                        row.append(1.0 if value is None else 0.0)
            rows.append(row)
        width = sum(p.encoded_width() for p in self.params)
        return np.asarray(rows, dtype=float).reshape(-1, width)

    def to_dict(self) -> list[dict[str, Any]]:
        """A JSON-compatible description (what ``warmstart families --json`` prints)."""
        out = []
        for p in self.params:
            d: dict[str, Any] = {"name": p.name, "type": p.kind}
            if p.kind in (FLOAT, INT):
                d.update(low=p.low, high=p.high, log=p.log, allow_none=p.allow_none)
            if p.kind == CATEGORICAL:
                d["choices"] = list(p.choices)
            d["default"] = p.default
            if p.condition is not None:
                d["condition"] = {"parent": p.condition.parent, "in": list(p.condition.values)}
            out.append(d)
        return out

    @classmethod
    def from_dict(cls, spec: list[dict[str, Any]], within: SearchSpace) -> SearchSpace:
        """Build a user-restricted space from JSON, checked against the declared ``within``.

        Each entry names a declared parameter and may narrow its ``low``/``high``/``log``
        or its ``choices``; parameters not mentioned keep their declared range.
        """
        if not isinstance(spec, list) or not all(isinstance(e, dict) for e in spec):
            raise BadInputError("a search-space file must be a JSON list of parameter objects")
        overrides: dict[str, dict[str, Any]] = {}
        for entry in spec:
            name = entry.get("name")
            if name not in within:
                raise BadInputError(
                    f"search-space file names unknown parameter {name!r}; "
                    f"this family declares {within.names}"
                )
            overrides[name] = entry
        params = []
        for p in within.params:
            e = overrides.get(p.name)
            if e is None:
                params.append(p)
                continue
            if p.kind in (FLOAT, INT):
                low, high = float(e.get("low", p.low)), float(e.get("high", p.high))
                if not (p.low <= low <= high <= p.high):
                    raise BadInputError(
                        f"search-space range for {p.name!r} must lie inside "
                        f"[{p.low:g}, {p.high:g}] with low <= high"
                    )
                log = bool(e.get("log", p.log)) and low > 0
                params.append(Param(p.name, p.kind, low, high, log, (), p.allow_none,
                                    p.default, p.condition))
            elif p.kind == CATEGORICAL:
                choices = tuple(e.get("choices", p.choices))
                bad = [c for c in choices if p.problem(c)]
                if bad or not choices:
                    raise BadInputError(
                        f"search-space choices for {p.name!r} must be a non-empty subset of "
                        f"{list(p.choices)}"
                    )
                params.append(Param(p.name, p.kind, choices=choices, default=p.default,
                                    condition=p.condition))
            else:
                params.append(p)
        return cls(tuple(params))


def _same(a: Any, b: Any) -> bool:
    if a is None or b is None:
        return a is b
    if _is_number(a) and _is_number(b) and not isinstance(a, bool):
        return a == b
    return type(a) is type(b) and a == b


def config_key(config: Mapping[str, Any]) -> str:
    """A canonical JSON string of a configuration, used to de-duplicate and to store."""
    return json.dumps({k: config[k] for k in sorted(config)}, sort_keys=True,
                      separators=(",", ":"))
