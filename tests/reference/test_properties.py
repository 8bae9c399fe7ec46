"""Invariance properties on random stable VARs (hypothesis).

Sources: permutation equivariance of generalized responses and of the connectedness table is a
stated motivation of the generalized approach (Pesaran & Shin 1998, Sec. 3; Diebold & Yilmaz 2012,
Sec. 2: "invariant to the ordering"). Scale invariance of variance shares follows from their
definition as ratios (Lütkepohl 2005, eq. 2.3.37): rescaling series i multiplies row i of every
response by the same factor.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import arlib


def random_process(seed: int, n: int, p: int, radius: float) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients (p, n, n) with companion spectral radius `radius`, and an SPD Σ (n, n)."""
    rng = np.random.default_rng(seed)
    coefs = rng.normal(size=(p, n, n))
    current = float(np.abs(np.linalg.eigvals(arlib.companion_matrix(coefs))).max())
    c = radius / current  # scaling A_j by c^j scales every companion eigenvalue by c
    coefs = coefs * (c ** np.arange(1, p + 1))[:, None, None]
    L = rng.normal(size=(n, n))
    sigma = L @ L.T + 0.1 * np.eye(n)
    return coefs, sigma


processes = st.tuples(
    st.integers(0, 2**32 - 1),  # seed
    st.integers(2, 4),  # n
    st.integers(1, 3),  # p
    st.floats(0.05, 0.95),  # spectral radius
)
SETTINGS = settings(max_examples=60, deadline=None)


@SETTINGS
@given(processes, st.integers(1, 15), st.randoms(use_true_random=False))
def test_permuting_series_permutes_generalized_results(spec, horizon, rnd) -> None:
    coefs, sigma = random_process(*spec)
    n = sigma.shape[0]
    perm = list(range(n))
    rnd.shuffle(perm)
    base = arlib.var_process(coefs, sigma)
    moved = arlib.var_process(coefs[:, perm][:, :, perm], sigma[np.ix_(perm, perm)])
    ix = np.ix_(perm, perm)
    g0 = arlib.impulse_responses(base, horizon, shocks="generalized")
    g1 = arlib.impulse_responses(moved, horizon, shocks="generalized")
    np.testing.assert_allclose(g1, g0[:, perm][:, :, perm], rtol=1e-9, atol=1e-12)
    d0 = arlib.variance_decomposition(base, horizon, method="generalized")
    d1 = arlib.variance_decomposition(moved, horizon, method="generalized")
    np.testing.assert_allclose(d1, d0[:, perm][:, :, perm], rtol=1e-9, atol=1e-12)
    c0, c1 = arlib.connectedness(base, horizon), arlib.connectedness(moved, horizon)
    np.testing.assert_allclose(c1.table, c0.table[ix], rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(c1.net, c0.net[perm], rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(c1.to_others, c0.to_others[perm], rtol=1e-9, atol=1e-10)
    assert abs(c1.total - c0.total) <= 1e-9 * max(1.0, c0.total)


@SETTINGS
@given(processes, st.integers(1, 15), st.lists(st.floats(1e-3, 1e3), min_size=4, max_size=4))
def test_rescaling_a_series_changes_no_decomposition(spec, horizon, scales) -> None:
    coefs, sigma = random_process(*spec)
    n = sigma.shape[0]
    D = np.diag(scales[:n])
    Dinv = np.diag(1 / np.array(scales[:n]))
    base = arlib.var_process(coefs, sigma)
    scaled = arlib.var_process(D @ coefs @ Dinv, D @ sigma @ D)  # the process of D y_t
    for method in ("cholesky", "generalized"):
        np.testing.assert_allclose(
            arlib.variance_decomposition(scaled, horizon, method=method),
            arlib.variance_decomposition(base, horizon, method=method),
            rtol=1e-7,
            atol=1e-10,
        )
    c0, c1 = arlib.connectedness(base, horizon), arlib.connectedness(scaled, horizon)
    np.testing.assert_allclose(c1.table, c0.table, rtol=1e-7, atol=1e-8)


@SETTINGS
@given(processes, st.integers(1, 20))
def test_rows_sum_to_one_and_measures_follow_from_the_table(spec, horizon) -> None:
    """Identities that hold for any process (not bounds, which squares and row sums imply):
    rows of the decomposition sum to one; the H-step decomposition of a longer run equals the
    H-step one (step H uses responses 0..H−1 only); the connectedness table is 100 × the last
    step; total = 100 − mean own share (rows sum to 100); net measures sum to zero."""
    coefs, sigma = random_process(*spec)
    proc = arlib.var_process(coefs, sigma)
    for method in ("cholesky", "generalized"):
        fevd = arlib.variance_decomposition(proc, horizon, method=method)
        np.testing.assert_allclose(fevd.sum(axis=-1), 1.0, rtol=1e-12)
        longer = arlib.variance_decomposition(proc, horizon + 3, method=method)
        np.testing.assert_allclose(longer[:horizon], fevd, rtol=1e-10, atol=1e-14)
        c = arlib.connectedness(proc, horizon, method=method)
        np.testing.assert_allclose(c.table, 100 * fevd[-1], rtol=1e-12, atol=1e-12)
        assert c.total == pytest.approx(100 - np.diag(c.table).mean(), abs=1e-9)
        assert abs(c.net.sum()) < 1e-8


def test_permuting_data_columns_permutes_fitted_results() -> None:
    """The same property through estimation: fitting permuted columns gives permuted generalized
    results, Granger tests follow the series, and total connectedness is unchanged."""
    rng = np.random.default_rng(8)
    coefs, sigma = random_process(8, 3, 2, 0.8)
    proc = arlib.var_process(coefs, sigma)
    y = arlib.simulate_var(proc, 300, rng)
    perm = [2, 0, 1]
    f0 = arlib.fit_var(y, 2, names=["a", "b", "c"])
    f1 = arlib.fit_var(y[:, perm], 2, names=["c", "a", "b"])
    c0, c1 = arlib.connectedness(f0, 10), arlib.connectedness(f1, 10)
    np.testing.assert_allclose(c1.table, c0.table[np.ix_(perm, perm)], rtol=1e-9)
    assert abs(c1.total - c0.total) < 1e-9
    g0 = arlib.granger_test(f0, "a", ["b", "c"])
    g1 = arlib.granger_test(f1, "a", ["b", "c"])
    assert abs(g0.f_stat - g1.f_stat) < 1e-9 * g0.f_stat
    # rescaling a column through the fit leaves every decomposition unchanged
    f2 = arlib.fit_var(y * np.array([100.0, 1.0, 0.01]), 2)
    np.testing.assert_allclose(
        arlib.variance_decomposition(f2, 10), arlib.variance_decomposition(f0, 10), rtol=1e-8
    )
