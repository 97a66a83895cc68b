"""warmstart: start each hyperparameter study from what the team learned on similar data.

The public API mirrors the command line one to one::

    from warmstart import KnowledgeBase, fingerprint, families
    fp = fingerprint(df, target="churned")
    kb = KnowledgeBase("knowledge_base")
    kb.log(df, target="churned", family="random_forest", trials=trials_df)
    kb.similar(df, target="churned", k=5)
    kb.suggest(df, target="churned", family="random_forest", k=10)
    kb.info()
"""

from warmstart.errors import BadInputError, NothingToSuggestError, WarmstartError  # noqa: E402
from warmstart.families import families  # noqa: E402
from warmstart.fingerprint import Fingerprint, catalogue, fingerprint  # noqa: E402
from warmstart.history import KnowledgeBase  # noqa: E402
from warmstart.version import __version__  # noqa: E402

__all__ = ["BadInputError", "Client", "Fingerprint", "KnowledgeBase", "NothingToSuggestError",
           "WarmstartError", "__version__", "catalogue", "families", "fingerprint"]


def __getattr__(name: str):
    # imported on first use: the client pulls in modules a plain ``import warmstart`` skips
    if name == "Client":
        from warmstart.service.client import Client

        return Client
    raise AttributeError(f"module 'warmstart' has no attribute {name!r}")
