"""Histogram-based gradient boosting (scikit-learn's HistGradientBoosting*)."""

from warmstart.families.base import Family
from warmstart.spaces import BOOL, CATEGORICAL, FLOAT, INT, Param, SearchSpace


def _space(task: str) -> SearchSpace:
    params = [
        Param("learning_rate", FLOAT, 0.005, 1.0, log=True, default=0.1),
        Param("max_iter", INT, 10, 1000, log=True, default=100),
        Param("max_leaf_nodes", INT, 4, 256, log=True, default=31),
        Param("max_depth", INT, 2, 30, allow_none=True, default=None),
        Param("min_samples_leaf", INT, 1, 200, log=True, default=20),
        Param("l2_regularization", FLOAT, 1e-8, 100.0, log=True, default=1e-8),
        Param("max_features", FLOAT, 0.1, 1.0, default=1.0),
        Param("early_stopping", BOOL, default=False),
    ]
    if task == "classification":
        # Re-weighting classes matters on imbalanced data, where a balanced-accuracy study
        # otherwise finds only configurations that favour the majority class.
        params.append(Param("class_weight", CATEGORICAL, choices=(None, "balanced"),
                            default=None))
    return SearchSpace(tuple(params))


FAMILY = Family(
    name="hist_gradient_boosting",
    description="Histogram gradient-boosted trees; strong default for tabular data.",
    estimators={
        "classification": "sklearn.ensemble.HistGradientBoostingClassifier",
        "regression": "sklearn.ensemble.HistGradientBoostingRegressor",
    },
    spaces={"classification": _space("classification"), "regression": _space("regression")},
    seeded=True,
    categorical_encoding="native",
)
