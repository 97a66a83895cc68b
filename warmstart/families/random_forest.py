"""Random forest (Breiman 2001): bagged, feature-subsampled decision trees."""

from warmstart.families.base import Family
from warmstart.spaces import (
    BoolParam,
    CategoricalParam,
    Condition,
    FloatParam,
    IntParam,
    SearchSpace,
)


def forest_space(criteria: tuple[str, ...], bootstrap_default: bool,
                 max_features_default: float) -> SearchSpace:
    """The search space shared by the two forest families (random and extremely random).

    ``criteria`` lists the split criteria worth searching (the first is the default); an
    empty tuple leaves the criterion at the estimator's default.
    """
    criterion = [CategoricalParam("criterion", criteria, default=criteria[0])
                 ] if criteria else []
    return SearchSpace((
        IntParam("n_estimators", 10, 1000, log=True, default=100),
        *criterion,
        IntParam("max_depth", 2, 60, allow_none=True, default=None),
        IntParam("min_samples_split", 2, 50, log=True, default=2),
        IntParam("min_samples_leaf", 1, 50, log=True, default=1),
        FloatParam("max_features", 0.05, 1.0, default=max_features_default),
        BoolParam("bootstrap", default=bootstrap_default),
        FloatParam("max_samples", 0.1, 1.0, allow_none=True, default=None,
              condition=Condition("bootstrap", (True,))),
    ))


FAMILY = Family(
    name="random_forest",
    description="Random forest of bootstrapped decision trees.",
    estimators={
        "classification": "sklearn.ensemble.RandomForestClassifier",
        "regression": "sklearn.ensemble.RandomForestRegressor",
    },
    spaces={
        # max_features defaults: "sqrt" for classifiers, 1.0 for regressors; the space
        # is expressed as a fraction, so the classifier's default is its usual fraction.
        # The absolute-error criterion is left out for regression: its fit time grows
        # quadratically with rows, which would make a few trials dominate a study's cost.
        "classification": forest_space(("gini", "entropy"), True, 0.3),
        "regression": forest_space((), True, 1.0),
    },
    fixed={"classification": {"n_jobs": 1}, "regression": {"n_jobs": 1}},
    seeded=True,
    categorical_encoding="ordinal",
)
