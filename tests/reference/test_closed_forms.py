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


@pytest.mark.parametrize("phi", [0.9, 0.5, -0.7])
@pytest.mark.parametrize("s2", [1.0, 2.5])
def test_ar1_stationary_variance(phi: float, s2: float) -> None:
    """AR(1): Var(y) = σ²/(1 − φ²) (Hamilton 1994, eq. 3.4.4); φ = 0.9 gives 5.263σ²."""
    var = arlib.stationary_covariance(arlib.var_process([phi], s2))[0, 0]
    assert var == pytest.approx(s2 / (1 - phi**2), rel=1e-12)
    if phi == 0.9:
        assert round(var / s2, 3) == 5.263
    # autocovariances decay as φ^h (eq. 3.4.5)
    g = arlib.autocovariance(arlib.var_process([phi], s2), 4)[:, 0, 0]
    np.testing.assert_allclose(g, var * phi ** np.arange(5), rtol=1e-12)


def test_var1_lyapunov_by_vectorisation() -> None:
    """VAR(1): vec Γ(0) = (I − A ⊗ A)^{-1} vec Σ_u (Lütkepohl 2005, eq. 2.1.39 with p = 1)."""
    gamma = arlib.stationary_covariance(arlib.var_process(A, SIGMA))
    vec = np.linalg.solve(np.eye(4) - np.kron(A, A), SIGMA.reshape(-1, order="F"))
    np.testing.assert_allclose(gamma, vec.reshape(2, 2, order="F"), rtol=1e-12)
    np.testing.assert_allclose(gamma, A @ gamma @ A.T + SIGMA, rtol=1e-12)


@pytest.mark.parametrize(("phi1", "phi2"), [(1.0, -0.5), (1.2, -0.6), (0.5, -0.8), (-0.4, -0.5)])
def test_ar2_spectral_peak(phi1: float, phi2: float) -> None:
    """AR(2) spectrum peaks at cos ω* = −φ₁(1 − φ₂)/(4φ₂) when that is in (−1, 1)
    (Hamilton 1994, Sec. 6.1; it follows from d/dω |1 − φ₁e^{−iω} − φ₂e^{−2iω}|² = 0).

    The peak is not at the roots' argument θ (cos θ = φ₁/(2√−φ₂)): the period 2π/θ of the damped
    oscillation differs from the period 2π/ω* of the spectral peak.
    Tolerance 1e-7: the density is flat at its maximum, so locating the maximiser numerically is
    accurate only to about sqrt(machine epsilon) ≈ 1e-8 relative.
    """
    cos_w = -phi1 * (1 - phi2) / (4 * phi2)
    assert -1 < cos_w < 1
    peak = arlib.spectral_peak(arlib.var_process([phi1, phi2], 1.0))
    assert peak.has_cycle
    assert peak.frequency == pytest.approx(np.arccos(cos_w), abs=1e-7)
    assert peak.period == pytest.approx(2 * np.pi / np.arccos(cos_w), rel=1e-6)
    theta = np.arccos(phi1 / (2 * np.sqrt(-phi2)))
    assert peak.root_period == pytest.approx(2 * np.pi / theta, rel=1e-10)
    assert abs(peak.frequency - theta) > 1e-3  # they differ
    # the density at the peak is the closed-form AR(2) spectrum there
    w = peak.frequency
    closed = 1 / (2 * np.pi * abs(1 - phi1 * np.exp(-1j * w) - phi2 * np.exp(-2j * w)) ** 2)
    assert peak.density == pytest.approx(closed, rel=1e-12)


def test_ar2_without_interior_peak() -> None:
    """When −φ₁(1 − φ₂)/(4φ₂) lies outside (−1, 1) the AR(2) spectrum peaks at 0 (φ₁ > 0) even
    with complex roots (Hamilton 1994, Sec. 6.1)."""
    phi1, phi2 = 1.0, -0.3  # cos ω* = 1.083 > 1, roots complex (φ₁² + 4φ₂ = −0.2 < 0)
    assert -phi1 * (1 - phi2) / (4 * phi2) > 1 and phi1**2 + 4 * phi2 < 0
    peak = arlib.spectral_peak(arlib.var_process([phi1, phi2], 1.0))
    assert peak.frequency == 0.0 and not peak.has_cycle
    assert peak.root_period is not None  # the roots still oscillate
