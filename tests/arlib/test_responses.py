"""Impulse responses: recursions, identification schemes, orderings."""

from __future__ import annotations

import numpy as np
import pytest

import arlib

from .conftest import A1, A2, SIGMA


@pytest.fixture(scope="module")
def proc2() -> arlib.VARProcess:
    return arlib.var_process(np.stack([A1, A2]), SIGMA, names=["x", "y", "z"])


def test_ma_coefficients_equal_companion_powers(proc2: arlib.VARProcess) -> None:
    """Φ_h = J C^h J' with J = [I_n, 0] (Lütkepohl 2005, eq. 2.1.17)."""
    phi = arlib.ma_coefficients(proc2, 8)
    C = proc2.companion
    for h in range(9):
        np.testing.assert_allclose(phi[h], np.linalg.matrix_power(C, h)[:3, :3], atol=1e-14)


def test_shapes_and_readonly(proc2: arlib.VARProcess) -> None:
    for shocks in ("cholesky", "generalized", "unit"):
        irf = arlib.impulse_responses(proc2, 12, shocks=shocks)
        assert irf.shape == (13, 3, 3)
        assert not irf.flags.writeable


def test_generalized_impact_and_relation_to_cholesky(proc2: arlib.VARProcess) -> None:
    g = arlib.impulse_responses(proc2, 5, shocks="generalized")
    sd = np.sqrt(np.diag(SIGMA))
    np.testing.assert_allclose(g[0], SIGMA / sd[None, :], rtol=1e-14)
    # generalized response to shock j = Cholesky response to j when j is ordered first
    for j in range(3):
        order = [j] + [i for i in range(3) if i != j]
        chol = arlib.impulse_responses(proc2, 5, order=order)
        np.testing.assert_allclose(g[:, :, j], chol[:, :, j], atol=1e-13)


def test_order_matches_permuting_the_columns(proc2: arlib.VARProcess) -> None:
    perm = [2, 0, 1]
    permuted = arlib.var_process(
        proc2.coefs[:, perm][:, :, perm], SIGMA[np.ix_(perm, perm)], names=["z", "x", "y"]
    )
    by_columns = arlib.impulse_responses(permuted, 6)
    by_option = arlib.impulse_responses(proc2, 6, order=["z", "x", "y"])
    inv = np.argsort(perm)
    np.testing.assert_allclose(by_option, by_columns[:, inv][:, :, inv], atol=1e-14)
    # impact matrix reproduces Σ whatever the order
    np.testing.assert_allclose(by_option[0] @ by_option[0].T, SIGMA, atol=1e-14)


def test_cumulative_is_running_sum(proc2: arlib.VARProcess) -> None:
    irf = arlib.impulse_responses(proc2, 7, shocks="unit")
    cum = arlib.impulse_responses(proc2, 7, shocks="unit", cumulative=True)
    np.testing.assert_allclose(cum, np.cumsum(irf, axis=0))
    # long-run cumulative unit response → (I − A_1 − A_2)^{-1}
    far = arlib.impulse_responses(proc2, 400, shocks="unit", cumulative=True)[-1]
    np.testing.assert_allclose(far, np.linalg.inv(np.eye(3) - A1 - A2), atol=1e-10)


def test_fit_and_process_agree(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 2)
    same = arlib.var_process(fit.coefs, fit.sigma_u, fit.intercept)
    for shocks in ("cholesky", "generalized", "unit"):
        np.testing.assert_array_equal(
            arlib.impulse_responses(fit, 4, shocks=shocks),
            arlib.impulse_responses(same, 4, shocks=shocks),
        )
