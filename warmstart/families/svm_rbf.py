"""Support vector machines with a radial-basis-function kernel (SVC / SVR)."""

from warmstart.families.base import Family
from warmstart.spaces import CategoricalParam, FloatParam, SearchSpace

FAMILY = Family(
    name="svm_rbf",
    description="Kernel support vector machine with an RBF kernel.",
    estimators={
        "classification": "sklearn.svm.SVC",
        "regression": "sklearn.svm.SVR",
    },
    spaces={
        "classification": SearchSpace((
            FloatParam("C", 1e-3, 1e4, log=True, default=1.0),
            FloatParam("gamma", 1e-5, 10.0, log=True, default=0.1),
            CategoricalParam("class_weight", (None, "balanced"), default=None),
        )),
        "regression": SearchSpace((
            FloatParam("C", 1e-3, 1e4, log=True, default=1.0),
            FloatParam("gamma", 1e-5, 10.0, log=True, default=0.1),
            FloatParam("epsilon", 1e-4, 1.0, log=True, default=0.1),
        )),
    },
    needs_scaling=True,
    # epsilon (and so C) is in target units: searched on the standardised target.
    scale_target=True,
    fixed={"classification": {"kernel": "rbf"}, "regression": {"kernel": "rbf"}},
)
