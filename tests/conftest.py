"""Shared fixtures: small real datasets written to disk, and empty histories."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes, load_iris, load_wine

from warmstart.history import KnowledgeBase


def dir_digest(path: Path) -> dict[str, str]:
    """SHA-256 of every file under ``path`` (relative name -> digest)."""
    return {str(p.relative_to(path)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(path.rglob("*")) if p.is_file()}


@pytest.fixture
def kb(tmp_path: Path) -> KnowledgeBase:
    return KnowledgeBase.init(tmp_path / "kb")


def _write(df: pd.DataFrame, path: Path) -> Path:
    df.to_csv(path, index=False)
    return path


@pytest.fixture
def iris_csv(tmp_path: Path) -> Path:
    return _write(load_iris(as_frame=True).frame, tmp_path / "iris.csv")


@pytest.fixture
def cancer_csv(tmp_path: Path) -> Path:
    return _write(load_breast_cancer(as_frame=True).frame, tmp_path / "cancer.csv")


@pytest.fixture
def wine_csv(tmp_path: Path) -> Path:
    return _write(load_wine(as_frame=True).frame, tmp_path / "wine.csv")


@pytest.fixture
def diabetes_csv(tmp_path: Path) -> Path:
    return _write(load_diabetes(as_frame=True).frame, tmp_path / "diabetes.csv")
