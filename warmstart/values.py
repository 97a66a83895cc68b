"""Values for strict JSON: NaN and infinities become None (JSON has no such numbers)."""

from __future__ import annotations

import math
from typing import Any


def finite_or_none(value: Any) -> float | None:
    """``value`` as a float, or None when it is None, NaN or infinite."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def to_jsonable(obj: Any) -> Any:
    """``obj`` with every non-finite float replaced by None, recursively (dicts, lists,
    tuples, numpy scalars), so that ``json.dumps(..., allow_nan=False)`` accepts it."""
    if isinstance(obj, float):
        return finite_or_none(obj)
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if hasattr(obj, "item") and callable(obj.item):  # numpy scalar
        return to_jsonable(obj.item())
    return obj


__all__ = ["finite_or_none", "to_jsonable"]
