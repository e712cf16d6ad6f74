"""Sanity checks of the NIST StRD loader (tests/nist_data.py) and its files."""

from __future__ import annotations

import csv

import numpy as np
import pytest
from nist_data import ALL_NIST, load_nist


def test_norris_lstsq_reproduces_certified_coefficients() -> None:
    # Source: NIST StRD, Norris (linear regression, lower difficulty), certified
    # B0 and B1. numpy.linalg.lstsq is the independent computation.
    case = load_nist("Norris")
    assert case.formula == "y ~ x"
    data = np.loadtxt(case.csv_path, delimiter=",", skiprows=1)
    y, x = data[:, 0], data[:, 1]
    X = np.column_stack([np.ones_like(x), x])
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    np.testing.assert_allclose(beta, case.coefficients, rtol=1e-9, atol=0.0)


@pytest.mark.parametrize("name", ALL_NIST)
def test_every_case_loads_consistently(name: str) -> None:
    # Source: NIST StRD file headers (parameter count, observations); checks the
    # loader and the CSV agree with each other, not any fit.
    case = load_nist(name)
    with case.csv_path.open(newline="", encoding="ascii") as handle:
        rows = list(csv.reader(handle))
    header, body = rows[0], rows[1:]
    assert header[0] == "y"
    n_params = len(case.coefficients)
    assert len(case.std_errors) == n_params
    assert case.df_residual == len(body) - n_params
    assert case.formula.endswith(" - 1") is not case.intercept
    terms = case.formula.removeprefix("y ~ ").removesuffix(" - 1").split(" + ")
    assert len(terms) == n_params - (1 if case.intercept else 0)
    assert all(term.startswith(("x", "I(x**")) for term in terms)


def test_unknown_name_is_refused() -> None:
    with pytest.raises(ValueError, match="unknown NIST StRD set"):
        load_nist("Nonesuch")
