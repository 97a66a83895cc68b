"""The catalogue: complete, documented, listed by the CLI, NaN where undefined."""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pandas as pd
from click.testing import CliRunner

from cli.main import main
from warmstart import fingerprint
from warmstart.fingerprint import CATALOGUE, CATALOGUE_VERSION, GROUPS, Fingerprint, catalogue

REQUIRED_GROUPS = {"shape", "target", "missing", "numeric", "categorical", "structure",
                   "information", "landmarks", "complexity"}


def test_catalogue_is_complete_and_documented():
    cat = catalogue()
    assert len(cat) >= 60
    # a fresh fingerprint is of the current catalogue and defines a value (maybe NaN)
    # for every entry of it (reference: the catalogue listing itself)
    fp = fingerprint(pd.DataFrame({"a": np.arange(20.0), "y": np.arange(20) % 2}), target="y")
    assert fp.catalogue_version == CATALOGUE_VERSION
    assert set(fp.values) == {m["name"] for m in cat}
    assert REQUIRED_GROUPS <= set(GROUPS) and {m["group"] for m in cat} == set(GROUPS)
    for m in cat:
        assert re.fullmatch(r"[a-z][a-z0-9]*(_[a-z0-9]+)*", m["name"]), m["name"]
        assert m["description"] and m["method"] and m["range"]
        assert m["tasks"] in ("both", "classification", "regression")
        assert m["basis"] in ("exact", "sketch", "sample")
    assert len({m["description"] for m in cat}) == len(cat)
    # the published methods are credited in the method text
    methods = " ".join(m["method"] for m in cat)
    for source in ("Ho & Basu 2002", "Lorena et al. 2019", "Michie et al. 1994", "Tukey 1977"):
        assert source in methods
    assert CATALOGUE["sample_rows"].basis == "sample"


def test_undefined_meta_features_are_nan_not_errors():
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"a": rng.normal(size=50), "y": rng.integers(0, 2, 50)})
    fp = fingerprint(df, target="y")
    for name, mf in CATALOGUE.items():
        if mf.tasks == "regression":
            assert math.isnan(fp.values[name]), name
    assert math.isnan(fp.values["categorical_entropy_mean"])  # no categorical column
    assert math.isnan(fp.values["correlation_abs_mean"])      # a single numeric column
    reg = fingerprint(df.assign(y=rng.normal(size=50)), target="y")
    assert all(math.isnan(reg.values[n]) for n, mf in CATALOGUE.items()
               if mf.tasks == "classification")
    again = Fingerprint.from_dict(json.loads(reg.to_json()))
    assert again.dataset_hash == reg.dataset_hash
    assert all(math.isnan(v) if math.isnan(reg.values[k]) else v == reg.values[k]
               for k, v in again.values.items())


def test_cli_lists_the_catalogue_grouped_and_as_json():
    res = CliRunner().invoke(main, ["fingerprint", "--list"])
    assert res.exit_code == 0
    for group, title in GROUPS.items():
        assert f"{title} [{group}]" in res.stdout
    assert f"{len(CATALOGUE)} meta-features" in res.stdout
    res = CliRunner().invoke(main, ["fingerprint", "--list", "--json"])
    listed = json.loads(res.stdout)
    assert [m["name"] for m in listed] == list(CATALOGUE)
    assert all("method" in m and "basis" in m for m in listed)
