"""Extremely randomised trees (Geurts, Ernst & Wehenkel 2006)."""

from warmstart.families.base import Family
from warmstart.families.random_forest import forest_space

FAMILY = Family(
    name="extra_trees",
    description="Extremely randomised trees: random split thresholds, no bootstrap by default.",
    estimators={
        "classification": "sklearn.ensemble.ExtraTreesClassifier",
        "regression": "sklearn.ensemble.ExtraTreesRegressor",
    },
    spaces={
        "classification": forest_space(("gini", "entropy"), False, 0.3),
        "regression": forest_space((), False, 1.0),
    },
    fixed={"classification": {"n_jobs": 1}, "regression": {"n_jobs": 1}},
    seeded=True,
    categorical_encoding="ordinal",
)
