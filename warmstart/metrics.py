"""Metrics: scikit-learn scorer names, whether higher or lower is better, and their range.

Every scikit-learn scorer is *greater is better* (losses are negated, hence the
``neg_`` prefix), so a scorer name fixes which way is better. The range is used to refuse
impossible scores when a study is logged.
"""

from __future__ import annotations

from dataclasses import dataclass

from warmstart.errors import BadInputError
from warmstart.tasks import CLASSIFICATION, REGRESSION

# Which scores are better, as stored in a study's ``better`` field.
HIGHER = "higher"
LOWER = "lower"

DEFAULT_METRIC = {CLASSIFICATION: "balanced_accuracy", REGRESSION: "r2"}

# Scorers bounded in [0, 1]; everything else named ``neg_*`` is bounded above by 0.
_UNIT_INTERVAL_PREFIXES = (
    "accuracy", "balanced_accuracy", "roc_auc", "average_precision", "f1", "precision",
    "recall", "jaccard", "top_k_accuracy", "normalized_mutual_info",
    "homogeneity", "completeness", "v_measure", "fowlkes_mallows", "rand_score",
)
_AT_MOST_ONE = ("r2", "adjusted_mutual_info_score", "explained_variance",
                "d2_absolute_error_score", "d2_brier_score", "d2_log_loss_score",
                "matthews_corrcoef", "adjusted_rand_score")


@dataclass(frozen=True)
class Metric:
    """A metric: its name, whether higher or lower is better, and its closed range."""

    name: str
    better: str  # HIGHER or LOWER
    low: float = float("-inf")
    high: float = float("inf")

    def check(self, score: float) -> str | None:
        """Return a description of why ``score`` is impossible, or None when it is fine."""
        if not (self.low <= score <= self.high):
            return f"score {score!r} is outside the range [{self.low}, {self.high}] of {self.name}"
        return None


def resolve_metric(name: str, better: str | None = None) -> Metric:
    """Return the :class:`Metric` for ``name``.

    Parameters
    ----------
    name : str
        A scikit-learn scorer name (which way is better and range known), or any other
        name together with an explicit ``better``.
    better : {"higher", "lower"}, optional
        Required for names scikit-learn does not know; must agree with the scorer otherwise.
    """
    if better not in (None, HIGHER, LOWER):
        raise BadInputError(f"better must be 'higher' or 'lower', not {better!r}")
    from sklearn.metrics import get_scorer_names  # scikit-learn loads in seconds: only here

    if name in get_scorer_names():
        if better == LOWER:
            raise BadInputError(
                f"metric {name!r} is a scikit-learn scorer, which is higher-is-better; "
                "drop --lower-is-better or log the loss under another name"
            )
        if name.startswith("neg_"):
            return Metric(name, HIGHER, high=0.0)
        if name.startswith(_UNIT_INTERVAL_PREFIXES) or name == "mutual_info_score":
            low = -1.0 if name in ("adjusted_rand_score",) else 0.0
            high = float("inf") if name == "mutual_info_score" else 1.0
            return Metric(name, HIGHER, low=low, high=high)
        if name in _AT_MOST_ONE:
            low = -1.0 if name == "matthews_corrcoef" else float("-inf")
            return Metric(name, HIGHER, low=low, high=1.0)
        return Metric(name, HIGHER)
    if better is None:
        raise BadInputError(
            f"metric {name!r} is not a scikit-learn scorer name; say which way is better with "
            "--higher-is-better or --lower-is-better"
        )
    return Metric(name, better)
