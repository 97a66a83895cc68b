"""The model families warmstart knows, declared once here.

Adding a family: write one module in this package that defines ``FAMILY`` (a
:class:`~warmstart.families.base.Family`) and add its name to ``_MODULES`` below. The
tests in ``tests/test_families.py`` are parametrised over ``FAMILIES`` and pick it up:
its parameter names against the estimator's keywords, its defaults and samples, and its
pipeline fitted on real data for both tasks.
"""

from __future__ import annotations

from importlib import import_module

from warmstart.errors import BadInputError
from warmstart.families.base import TASKS, Family

_MODULES = ("hist_gradient_boosting", "random_forest", "extra_trees", "linear", "svm_rbf",
            "knn")

FAMILIES: dict[str, Family] = {
    fam.name: fam for fam in (import_module(f"{__name__}.{m}").FAMILY for m in _MODULES)
}


def get_family(name: str) -> Family:
    """Return the family called ``name``; raise :class:`BadInputError` for an unknown one."""
    try:
        return FAMILIES[name]
    except KeyError:
        raise BadInputError(
            f"unknown model family {name!r}; known families: {', '.join(FAMILIES)}"
        ) from None


def families() -> list[dict]:
    """Describe every family and its search spaces (what ``warmstart families`` prints)."""
    return [fam.to_dict() for fam in FAMILIES.values()]


__all__ = ["FAMILIES", "TASKS", "Family", "families", "get_family"]
