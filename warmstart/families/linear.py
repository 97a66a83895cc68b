"""Regularised linear models: logistic regression (classification), ridge (regression)."""

from warmstart.families.base import Family
from warmstart.spaces import BoolParam, CategoricalParam, FloatParam, SearchSpace

FAMILY = Family(
    name="linear",
    description="L2-regularised linear model: logistic regression or ridge regression.",
    estimators={
        "classification": "sklearn.linear_model.LogisticRegression",
        "regression": "sklearn.linear_model.Ridge",
    },
    spaces={
        "classification": SearchSpace((
            FloatParam("C", 1e-5, 1e5, log=True, default=1.0),
            CategoricalParam("class_weight", (None, "balanced"), default=None),
            BoolParam("fit_intercept", default=True),
        )),
        "regression": SearchSpace((
            FloatParam("alpha", 1e-6, 1e5, log=True, default=1.0),
            BoolParam("fit_intercept", default=True),
        )),
    },
    needs_scaling=True,
    fixed={"classification": {"max_iter": 2000}},
)
