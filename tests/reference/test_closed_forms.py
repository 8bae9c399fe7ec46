"""Checks against closed forms that follow from the model's definition.

Each check names where the formula comes from. These need no data: the process is given
by its parameters, so agreement is to rounding (tolerances ~1e-12 relative).
"""

from __future__ import annotations

import numpy as np
import pytest

import arlib

A = np.array([[0.5, 0.2], [-0.3, 0.7]])
SIGMA = np.array([[2.0, 0.6], [0.6, 1.0]])


def test_var1_unit_responses_are_matrix_powers() -> None:
    """VAR(1): Φ_h = A^h (Lütkepohl 2005, eq. 2.1.6 / 2.3.9)."""
    irf = arlib.impulse_responses(arlib.var_process(A, SIGMA), 10, shocks="unit")
    for h in range(11):
        np.testing.assert_allclose(irf[h], np.linalg.matrix_power(A, h), rtol=1e-12, atol=1e-15)


def test_orthogonal_impact_is_the_cholesky_factor() -> None:
    """Θ_0 = P, P lower triangular with P P' = Σ_u (Lütkepohl 2005, eq. 2.3.33)."""
    irf = arlib.impulse_responses(arlib.var_process(A, SIGMA), 3)
    P = np.array([[np.sqrt(2.0), 0.0], [0.6 / np.sqrt(2.0), np.sqrt(1.0 - 0.18)]])
    np.testing.assert_allclose(irf[0], P, rtol=1e-14)
    np.testing.assert_allclose(irf[2], np.linalg.matrix_power(A, 2) @ P, rtol=1e-13)


@pytest.mark.parametrize("method", ["cholesky", "generalized"])
def test_decomposition_rows_sum_to_one(method: str) -> None:
    """Rows of an FEVD sum to one (Lütkepohl 2005 eq. 2.3.37; DY 2012 normalisation)."""
    fevd = arlib.variance_decomposition(arlib.var_process(A, SIGMA), 12, method=method)
    np.testing.assert_allclose(fevd.sum(axis=-1), 1.0, rtol=1e-14)


@pytest.mark.parametrize("rho", [0.0, 0.3, -0.5, 0.9])
@pytest.mark.parametrize("horizon", [1, 10])
def test_white_noise_pair_total_connectedness(rho: float, horizon: int) -> None:
    """Two white-noise series with correlation ρ: the generalized table has off-diagonal share
    ρ²/(1 + ρ²), so total connectedness = 100 ρ²/(1 + ρ²) at every horizon (derived from
    Diebold & Yilmaz 2012, eq. 2, with Φ_h = 0 for h > 0)."""
    proc = arlib.var_process(np.zeros((2, 2)), np.array([[1.0, rho], [rho, 1.0]]) * 3.0)
    c = arlib.connectedness(proc, horizon)
    expected = 100 * rho**2 / (1 + rho**2)
    assert c.total == pytest.approx(expected, abs=1e-12)
    np.testing.assert_allclose(c.from_others, expected, atol=1e-12)
    np.testing.assert_allclose(c.net, 0.0, atol=1e-12)
