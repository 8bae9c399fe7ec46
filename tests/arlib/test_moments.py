"""Moments, spectrum, spectral peak and simulation."""

from __future__ import annotations

import numpy as np
import pytest

import arlib

from .conftest import A1, A2, SIGMA


@pytest.fixture(scope="module")
def proc2() -> arlib.VARProcess:
    return arlib.var_process(np.stack([A1, A2]), SIGMA, [0.1, 0.2, 0.3])


def test_autocovariances_satisfy_yule_walker(proc2: arlib.VARProcess) -> None:
    """Γ(h) = A_1 Γ(h−1) + A_2 Γ(h−2) for h >= 1, with Γ(−1) = Γ(1)' (Lütkepohl 2005, eq. 2.1.37);
    Γ(0) = A_1 Γ(1)' + A_2 Γ(2)' + Σ_u (eq. 2.1.36)."""
    g = arlib.autocovariance(proc2, 6)
    np.testing.assert_allclose(g[0], arlib.stationary_covariance(proc2))
    np.testing.assert_allclose(g[1], A1 @ g[0] + A2 @ g[1].T, atol=1e-12)
    for h in range(2, 7):
        np.testing.assert_allclose(g[h], A1 @ g[h - 1] + A2 @ g[h - 2], atol=1e-12)
    np.testing.assert_allclose(g[0], A1 @ g[1].T + A2 @ g[2].T + SIGMA, atol=1e-12)


def test_spectrum_integrates_to_variance_and_is_hermitian(proc2: arlib.VARProcess) -> None:
    """∫_{−π}^{π} f(ω) dω = Γ(0); f(−ω) = conj f(ω), so the integral is 2 ∫_0^π Re f."""
    w = np.linspace(0, np.pi, 20001)
    f = arlib.spectral_density(proc2, w)
    assert f.shape == (20001, 3, 3) and np.iscomplexobj(f)
    np.testing.assert_allclose(f, np.conj(np.swapaxes(f, 1, 2)), atol=1e-15)
    from scipy.integrate import simpson

    integral = 2 * simpson(f.real, x=w, axis=0)
    np.testing.assert_allclose(integral, arlib.stationary_covariance(proc2), rtol=1e-8, atol=1e-10)


def test_spectrum_equals_fourier_sum_of_autocovariances(proc2: arlib.VARProcess) -> None:
    """f(ω) = (1/2π) Σ_h Γ(h) e^{−iωh} (Γ(−h) = Γ(h)')."""
    g = arlib.autocovariance(proc2, 200)
    w = np.array([0.0, 0.4, 1.3, np.pi])
    f = arlib.spectral_density(proc2, w)
    for k, om in enumerate(w):
        s = g[0] + sum(
            g[h] * np.exp(-1j * om * h) + g[h].T * np.exp(1j * om * h) for h in range(1, 201)
        )
        np.testing.assert_allclose(f[k], s / (2 * np.pi), atol=1e-12)


def test_spectral_peak_of_persistent_ar1_is_at_zero() -> None:
    peak = arlib.spectral_peak(arlib.var_process([0.7], 1.0))
    assert peak.frequency == 0.0 and peak.period == float("inf")
    assert not peak.has_cycle and peak.root_period is None
    assert peak.density == pytest.approx(1 / (2 * np.pi * 0.3**2))


def test_simulation_is_seeded_and_has_right_moments() -> None:
    proc = arlib.var_process(A1, SIGMA, [1.0, 0.0, -1.0], names=["a", "b", "c"])
    a = arlib.simulate_var(proc, 50, np.random.default_rng(5))
    b = arlib.simulate_var(proc, 50, np.random.default_rng(5))
    np.testing.assert_array_equal(a, b)
    long = arlib.simulate_var(proc, 200_000, np.random.default_rng(6))
    # sample mean and covariance: standard errors ~ sd · sqrt(persistence / T) ≈ 0.01
    np.testing.assert_allclose(long.mean(axis=0), proc.mean, atol=0.05)
    np.testing.assert_allclose(
        np.cov(long.T), arlib.stationary_covariance(proc), rtol=0.05, atol=0.03
    )


def test_simulation_initial_rows_and_errors() -> None:
    proc = arlib.var_process(np.stack([A1, A2]), SIGMA)
    init = np.ones((2, 3))
    path = arlib.simulate_var(proc, 3, np.random.default_rng(0), initial=init)
    assert path.shape == (3, 3)
    with pytest.raises(
        arlib.InvalidInputError, match=r"`initial` must have shape \(p, n\) = \(2, 3\)"
    ):
        arlib.simulate_var(proc, 3, np.random.default_rng(0), initial=np.ones((1, 3)))
    with pytest.raises(arlib.InvalidInputError, match="`rng` must be a numpy Generator"):
        arlib.simulate_var(proc, 3, 4.2)  # type: ignore[arg-type]  # a float seed, refused on purpose


def test_unstable_process_has_no_moments() -> None:
    with pytest.warns(arlib.UnstableProcessWarning):
        walk = arlib.var_process([1.0], 1.0)
    for call in (
        lambda: arlib.stationary_covariance(walk),
        lambda: arlib.autocovariance(walk, 2),
        lambda: arlib.spectral_density(walk, [0.5]),
    ):
        with pytest.raises(arlib.InvalidInputError, match="spectral radius is 1 >= 1"):
            call()


def test_bad_frequencies(proc2: arlib.VARProcess) -> None:
    with pytest.raises(arlib.InvalidInputError, match=r"`freqs` must lie in \[0, π\]"):
        arlib.spectral_density(proc2, [0.1, 4.0])
