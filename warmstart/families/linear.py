"""Regularised linear models: logistic regression (classification), ridge (regression)."""

from warmstart.families.base import Family
from warmstart.spaces import BOOL, CATEGORICAL, FLOAT, Param, SearchSpace

FAMILY = Family(
    name="linear",
    description="L2-regularised linear model: logistic regression or ridge regression.",
    estimators={
        "classification": "sklearn.linear_model.LogisticRegression",
        "regression": "sklearn.linear_model.Ridge",
    },
    spaces={
        "classification": SearchSpace((
            Param("C", FLOAT, 1e-5, 1e5, log=True, default=1.0),
            Param("class_weight", CATEGORICAL, choices=(None, "balanced"), default=None),
            Param("fit_intercept", BOOL, default=True),
        )),
        "regression": SearchSpace((
            Param("alpha", FLOAT, 1e-6, 1e5, log=True, default=1.0),
            Param("fit_intercept", BOOL, default=True),
        )),
    },
    needs_scaling=True,
    fixed={"classification": {"max_iter": 2000}},
)
