"""k-nearest neighbours (Cover & Hart 1967)."""

from warmstart.families.base import Family
from warmstart.spaces import CategoricalParam, IntParam, SearchSpace


def _space() -> SearchSpace:
    return SearchSpace((
        IntParam("n_neighbors", 1, 100, log=True, default=5),
        CategoricalParam("weights", ("uniform", "distance"), default="uniform"),
        IntParam("p", 1, 2, default=2),
    ))


FAMILY = Family(
    name="knn",
    description="k-nearest neighbours vote (classification) or average (regression).",
    estimators={
        "classification": "sklearn.neighbors.KNeighborsClassifier",
        "regression": "sklearn.neighbors.KNeighborsRegressor",
    },
    spaces={"classification": _space(), "regression": _space()},
    needs_scaling=True,
)
