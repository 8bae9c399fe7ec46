"""Variance decompositions and connectedness: identities between the measures."""

from __future__ import annotations

import numpy as np
import pytest

import arlib

from .conftest import A1, A2, SIGMA


@pytest.fixture(scope="module")
def proc2() -> arlib.VARProcess:
    return arlib.var_process(np.stack([A1, A2]), SIGMA, names=["x", "y", "z"])


@pytest.mark.parametrize("method", ["cholesky", "generalized"])
def test_rows_sum_to_one_and_shape(proc2: arlib.VARProcess, method: str) -> None:
    fevd = arlib.variance_decomposition(proc2, 10, method=method)
    assert fevd.shape == (10, 3, 3)
    np.testing.assert_allclose(fevd.sum(axis=-1), 1.0, rtol=1e-14)


def test_cholesky_step_one_uses_impact_only(proc2: arlib.VARProcess) -> None:
    P = np.linalg.cholesky(SIGMA)
    fevd = arlib.variance_decomposition(proc2, 3)
    np.testing.assert_allclose(fevd[0], P**2 / (P**2).sum(axis=1, keepdims=True), rtol=1e-14)
    # the first series in the order is explained only by its own shock at step 1
    np.testing.assert_allclose(fevd[0, 0], [1.0, 0.0, 0.0])


def test_cholesky_shares_times_mse_are_squared_response_sums(proc2: arlib.VARProcess) -> None:
    """ω_ij(H) · MSE_i(H) = Σ_{h<H} θ_ij,h² and MSE_i(H) = Σ_{h<H} (Φ_h Σ Φ_h')_ii (eqs. 2.3.36-37)."""
    H = 6
    theta = arlib.impulse_responses(proc2, H - 1)
    phi = arlib.ma_coefficients(proc2, H - 1)
    mse = np.einsum("hij,jk,hik->i", phi, SIGMA, phi)
    fevd = arlib.variance_decomposition(proc2, H)
    np.testing.assert_allclose(fevd[-1] * mse[:, None], (theta**2).sum(axis=0), rtol=1e-12)


def test_connectedness_is_the_normalised_generalized_table(proc2: arlib.VARProcess) -> None:
    c = arlib.connectedness(proc2, 10)
    g = arlib.variance_decomposition(proc2, 10, method="generalized")[-1]
    np.testing.assert_allclose(c.table, 100 * g)
    off = c.table - np.diag(np.diag(c.table))
    np.testing.assert_allclose(c.from_others, off.sum(axis=1))
    np.testing.assert_allclose(c.to_others, off.sum(axis=0))
    np.testing.assert_allclose(c.net, c.to_others - c.from_others)
    assert c.net.sum() == pytest.approx(0.0, abs=1e-12)
    assert c.total == pytest.approx(c.from_others.mean()) == pytest.approx(c.to_others.mean())
    assert c.total == pytest.approx(off.sum() / 3)
    np.testing.assert_allclose(c.pairwise_net, -c.pairwise_net.T)
    np.testing.assert_allclose(c.pairwise_net.sum(axis=1), c.net, atol=1e-12)
    assert c.names == ("x", "y", "z") and c.horizon == 10
    assert not c.table.flags.writeable


def test_cholesky_connectedness_option(proc2: arlib.VARProcess) -> None:
    c = arlib.connectedness(proc2, 10, method="cholesky")
    np.testing.assert_allclose(c.table, 100 * arlib.variance_decomposition(proc2, 10)[-1])


def test_uncorrelated_independent_series_have_zero_connectedness() -> None:
    proc = arlib.var_process(np.diag([0.5, -0.2, 0.9]), np.diag([1.0, 4.0, 0.1]))
    c = arlib.connectedness(proc, 20)
    np.testing.assert_allclose(c.table, 100 * np.eye(3), atol=1e-12)
    assert c.total == pytest.approx(0.0, abs=1e-12)
