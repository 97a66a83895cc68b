"""warmstart: start each hyperparameter study from what the team learned on similar data.

The public API mirrors the command line one to one::

    from warmstart import KnowledgeBase, fingerprint, families, make_pipeline
    fp = fingerprint(df, target="churned")
    kb = KnowledgeBase("knowledge_base")
    kb.log(df, target="churned", family="random_forest", trials=trials_df)
    kb.similar(df, target="churned", k=5)
    found = kb.suggest(df, target="churned", family="random_forest", k=10)
    model = make_pipeline("random_forest", "classification", found[0].config, X).fit(X, y)
    kb.info()

The public names are loaded on first use (module ``__getattr__``, PEP 562), so that
``import warmstart`` and the command line's start-up do not pay for numpy, pandas and
pyarrow until a command needs them.
"""

from __future__ import annotations

import sys
import types
from importlib import import_module
from typing import TYPE_CHECKING

from warmstart.errors import BadInputError, NothingToSuggestError, WarmstartError
from warmstart.version import __version__

# public name -> the module that defines it
_LAZY = {
    "families": "warmstart.families",  # also a property of _Package below
    "Fingerprint": "warmstart.fingerprint",
    "catalogue": "warmstart.fingerprint",
    "fingerprint": "warmstart.fingerprint",  # also a property of _Package below
    "KnowledgeBase": "warmstart.history",
    "make_pipeline": "warmstart.pipelines",  # pulls in scikit-learn
    "Client": "warmstart.service.client",  # pulls in the HTTP client's modules
}

if TYPE_CHECKING:  # pragma: no cover
    from warmstart.families import families
    from warmstart.fingerprint import Fingerprint, catalogue, fingerprint
    from warmstart.history import KnowledgeBase
    from warmstart.pipelines import make_pipeline
    from warmstart.service.client import Client


def __getattr__(name: str):
    if name not in _LAZY:
        raise AttributeError(f"module 'warmstart' has no attribute {name!r}")
    value = getattr(import_module(_LAZY[name]), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


class _Package(types.ModuleType):
    """``warmstart.families`` and ``warmstart.fingerprint`` name both a subpackage and a
    function; importing the subpackage sets the package attribute to the module, so these
    two stay functions through a property whose setter ignores that assignment."""

    families = property(lambda self: import_module("warmstart.families").families,
                        lambda self, value: None)
    fingerprint = property(lambda self: import_module("warmstart.fingerprint").fingerprint,
                           lambda self, value: None)


sys.modules[__name__].__class__ = _Package

__all__ = ["BadInputError", "Client", "Fingerprint", "KnowledgeBase", "NothingToSuggestError",
           "WarmstartError", "__version__", "catalogue", "families", "fingerprint",
           "make_pipeline"]

