"""The two learning tasks, named once for the whole library."""

CLASSIFICATION = "classification"
REGRESSION = "regression"
TASKS = (CLASSIFICATION, REGRESSION)

__all__ = ["CLASSIFICATION", "REGRESSION", "TASKS"]
