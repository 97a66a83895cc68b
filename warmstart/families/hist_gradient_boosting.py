"""Histogram-based gradient boosting (scikit-learn's HistGradientBoosting*)."""

from warmstart.families.base import Family
from warmstart.spaces import BoolParam, CategoricalParam, FloatParam, IntParam, SearchSpace


def _space(task: str) -> SearchSpace:
    params = [
        FloatParam("learning_rate", 0.005, 1.0, log=True, default=0.1),
        IntParam("max_iter", 10, 1000, log=True, default=100),
        IntParam("max_leaf_nodes", 4, 256, log=True, default=31),
        IntParam("max_depth", 2, 30, allow_none=True, default=None),
        IntParam("min_samples_leaf", 1, 200, log=True, default=20),
        FloatParam("l2_regularization", 1e-8, 100.0, log=True, default=1e-8),
        FloatParam("max_features", 0.1, 1.0, default=1.0),
        BoolParam("early_stopping", default=False),
    ]
    if task == "classification":
        # Re-weighting classes matters on imbalanced data, where a balanced-accuracy study
        # otherwise finds only configurations that favour the majority class.
        params.append(CategoricalParam("class_weight", (None, "balanced"), default=None))
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
