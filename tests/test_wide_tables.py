"""Wide tables: the seeded column sample of the column-pair measures, and the width limit."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from cli.main import main
from warmstart import BadInputError, fingerprint
from warmstart.fingerprint import CATALOGUE
from warmstart.fingerprint.catalogue import COLUMN_CAP, column_sample
from warmstart.fingerprint.scan import MAX_COLUMNS


def test_column_sample_keeps_every_column_up_to_the_cap():
    names = [f"x{j}" for j in range(COLUMN_CAP)]
    assert column_sample(names).tolist() == list(range(COLUMN_CAP))


def test_column_sample_is_bounded_seeded_and_independent_of_column_order():
    names = [f"feature_{j}" for j in range(3 * COLUMN_CAP)]
    chosen = column_sample(names)
    assert chosen.size == COLUMN_CAP
    assert np.all(np.diff(chosen) > 0)  # table order
    assert np.array_equal(chosen, column_sample(names))  # same names, same choice
    rng = np.random.default_rng(0)
    shuffled = list(rng.permutation(names))
    assert {shuffled[i] for i in column_sample(shuffled)} == {names[i] for i in chosen}


def test_column_pair_measures_say_so_in_their_basis():
    for name in ("correlation_abs_mean", "pca_first_component_share",
                 "mutual_information_mean", "boundary_fraction"):
        assert CATALOGUE[name].basis == "column_sample"


def _wide_frame(n_columns: int, rows: int = 60) -> pd.DataFrame:
    rng = np.random.default_rng(3)
    base = rng.normal(size=rows)
    X = rng.normal(size=(rows, n_columns)) + np.linspace(0, 2, n_columns) * base[:, None]
    df = pd.DataFrame(X, columns=[f"c{j}" for j in range(n_columns)])
    df["target"] = (base > 0).astype(int)
    return df


def test_correlations_of_a_wide_table_are_those_of_the_sampled_columns():
    df = _wide_frame(COLUMN_CAP + 150)
    fp = fingerprint(df, target="target")
    names = [c for c in df.columns if c != "target"]
    chosen = [names[i] for i in column_sample(names)]
    # reference: numpy.corrcoef (Pearson) on the sampled columns
    r = np.corrcoef(df[chosen].to_numpy(), rowvar=False)
    upper = np.abs(r[np.triu_indices_from(r, k=1)])
    assert fp.values["correlation_abs_max"] == pytest.approx(upper.max(), rel=1e-9)
    assert fp.values["correlation_abs_mean"] == pytest.approx(upper.mean(), rel=1e-9)
    # reference: numpy.linalg.eigvalsh of the same correlation matrix
    ev = np.linalg.eigvalsh(r)
    assert fp.values["pca_first_component_share"] == pytest.approx(ev[-1] / ev.sum(),
                                                                   rel=1e-9)


def test_a_table_wider_than_the_limit_is_refused_before_the_scan():
    df = pd.DataFrame(np.zeros((2, MAX_COLUMNS + 1)))
    df.columns = [f"c{j}" for j in range(MAX_COLUMNS + 1)]
    df["target"] = [0, 1]
    with pytest.raises(BadInputError, match="columns; at most"):
        fingerprint(df, target="target")


def test_the_command_line_refuses_a_too_wide_file_with_one_line_and_exit_2(tmp_path):
    path = tmp_path / "wide.csv"
    header = ",".join(f"c{j}" for j in range(MAX_COLUMNS + 1)) + ",target\n"
    path.write_text(header + ",".join(["0"] * (MAX_COLUMNS + 2)) + "\n")
    result = CliRunner().invoke(main, ["fingerprint", str(path), "-t", "target"])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: the table has 20,002 columns")
