"""Second moments, spectrum and simulation of a stable VAR.

    Γ(h) = E[(y_t − μ)(y_{t−h} − μ)']                       autocovariance, (n, n)
    Γ_Y(0) = C Γ_Y(0) C' + Σ_U                               companion Lyapunov equation
                                                             (Lütkepohl 2005, eq. 2.1.39)
    Γ_Y(h) = C^h Γ_Y(0),  Γ(h) = top-left n×n block of Γ_Y(h)
    f(ω) = (1/2π) A(e^{−iω})^{-1} Σ_u A(e^{−iω})^{-H},  A(z) = I − A_1 z − ... − A_p z^p
         = (1/2π) Σ_h Γ(h) e^{−iωh},   ω in radians per observation, ∫_{−π}^{π} f = Γ(0)

(C the companion matrix, Σ_U = diag(Σ_u, 0, ..., 0)).

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
    Sec. 2.1.4 (autocovariances, eqs. 2.1.32 and 2.1.39).
Hamilton, J. D. (1994). Time Series Analysis. Princeton. Eq. 10.4.43 (VAR spectrum) and
    Sec. 6.1 (AR spectrum; AR(2) peak).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import linalg, optimize

from ._validate import (
    InvalidInputError,
    VARLike,
    as_data,
    as_real_array,
    as_rng,
    check_int,
    check_model,
    readonly,
    series_indices,
)


def _require_stable(model: VARLike, what: str) -> None:
    if model.spectral_radius >= 1.0:
        msg = (
            f"{what} needs a stable VAR, but the companion spectral radius is "
            f"{model.spectral_radius:.6g} >= 1 (no stationary distribution); difference the data "
            "or use a stable process"
        )
        raise InvalidInputError(msg)


def _companion_covariance(model: VARLike) -> np.ndarray:
    """Γ_Y(0) (n·p, n·p) solving Γ = C Γ C' + Σ_U (discrete Lyapunov)."""
    n, p = model.n, model.lags
    q = np.zeros((n * p, n * p))
    q[:n, :n] = model.sigma_u
    gamma = linalg.solve_discrete_lyapunov(np.asarray(model.companion), q)
    return 0.5 * (gamma + gamma.T)


def stationary_covariance(fit: VARLike) -> np.ndarray:
    """Stationary covariance Γ(0) = Var(y_t), shape (n, n).

    Solved from the companion form Γ_Y(0) = C Γ_Y(0) C' + Σ_U (Lütkepohl 2005, eq. 2.1.39) with
    scipy's discrete Lyapunov solver; Γ(0) is the top-left block. Needs a stable model.
    """
    model = check_model(fit)
    _require_stable(model, "`stationary_covariance`")
    out = _companion_covariance(model)[: model.n, : model.n].copy()
    out.flags.writeable = False
    return out


def autocovariance(fit: VARLike, max_lag: int) -> np.ndarray:
    """Autocovariances Γ(0..L), shape (L+1, n, n); Γ(h)[i, j] = Cov(y_{i,t}, y_{j,t−h}).

    Γ_Y(h) = C^h Γ_Y(0) in companion form (Lütkepohl 2005, Sec. 2.1.4); Γ(−h) = Γ(h)'.
    """
    model = check_model(fit)
    L = check_int(max_lag, "max_lag", minimum=0)
    _require_stable(model, "`autocovariance`")
    n = model.n
    big = _companion_covariance(model)
    C = np.asarray(model.companion)
    out = np.empty((L + 1, n, n))
    for h in range(L + 1):
        out[h] = big[:n, :n]
        big = C @ big
    out.flags.writeable = False
    return out


def spectral_density(fit: VARLike, freqs: Any) -> np.ndarray:
    """Spectral density matrices, shape (F, n, n) complex (Hermitian), for F frequencies.

    f(ω) = (1/2π) A(e^{−iω})^{-1} Σ_u A(e^{−iω})^{-H}, A(z) = I − Σ_j A_j z^j
    (Hamilton 1994, eq. 10.4.43), so that f(ω) = (1/2π) Σ_h Γ(h) e^{−iωh} and
    ∫_{−π}^{π} f(ω) dω = Γ(0). Diagonal entries are real auto-spectra; off-diagonal entries are
    cross-spectra of series i with j.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess` (stable).
    freqs : (F,) angular frequencies in radians per observation, each in [0, π]
        (the period in observations is 2π/ω).
    """
    model = check_model(fit)
    _require_stable(model, "`spectral_density`")
    w = _frequencies(freqs)
    return _spectrum(np.asarray(model.coefs), np.asarray(model.sigma_u), w)


def _frequencies(freqs: Any) -> np.ndarray:
    w = np.atleast_1d(as_real_array(freqs, "freqs", "numbers in [0, π] (radians per observation)"))
    if w.ndim != 1 or w.size == 0:
        msg = f"`freqs` must be a non-empty 1-D array, got shape {w.shape}"
        raise InvalidInputError(msg)
    bad = ~np.isfinite(w) | (w < 0) | (w > np.pi + 1e-12)
    if bad.any():
        msg = (
            f"`freqs` must lie in [0, π] radians per observation; entry {int(np.argmax(bad))} is "
            f"{w[bad][0]!r}; convert a period P (observations) with ω = 2π/P"
        )
        raise InvalidInputError(msg)
    return w


def _spectrum(coefs: np.ndarray, sigma: np.ndarray, w: np.ndarray) -> np.ndarray:
    p, n, _ = coefs.shape
    z = np.exp(-1j * np.outer(w, np.arange(1, p + 1)))  # (F, p): e^{−iωj}
    a = np.eye(n) - np.einsum("fj,jrc->frc", z, coefs)  # A(e^{−iω})
    a_inv = np.linalg.inv(a)
    out = a_inv @ sigma @ np.conj(np.swapaxes(a_inv, -1, -2)) / (2 * np.pi)
    out.flags.writeable = False
    return out


@dataclass(frozen=True)
class SpectralPeak:
    """Where one series' spectral density peaks (the dominant cycle).

    Attributes
    ----------
    frequency : ω* in [0, π] radians per observation maximising f_ii(ω).
    period : 2π/ω* observations (inf when ω* = 0).
    density : f_ii(ω*).
    has_cycle : True when the peak is interior, 0 < ω* < π (a genuine cycle); False when the
        spectrum is highest at frequency 0 (persistence) or π (alternation).
    root_period : 2π/|arg λ| for the complex companion eigenvalue λ of largest modulus, or None
        when all eigenvalues are real. This is the period of the process's damped oscillation; it
        is generally NOT the spectral peak period (for an AR(2) the peak satisfies
        cos ω* = −φ₁(1 − φ₂)/(4φ₂) while the roots give cos θ = φ₁/(2 sqrt(−φ₂))).
    series : name of the series.
    """

    frequency: float
    period: float
    density: float
    has_cycle: bool
    root_period: float | None
    series: str


def spectral_peak(fit: VARLike, *, series: int | str = 0, grid: int = 4096) -> SpectralPeak:
    """Dominant cycle of one series: the frequency maximising its auto-spectrum f_ii(ω).

    Searches `grid` equally spaced frequencies on [0, π], then refines the best one by bounded
    scalar optimisation between its grid neighbours. For an AR(2) with cos ω* =
    −φ₁(1 − φ₂)/(4φ₂) in (−1, 1) this is that ω* (Hamilton 1994, Sec. 6.1; closed form checked in
    tests/reference).

    Parameters
    ----------
    fit : `VARFit` or `VARProcess` (stable); a univariate AR is the n = 1 case.
    series : index or name of the series.   grid : number of search frequencies (>= 16).
    """
    model = check_model(fit)
    _require_stable(model, "`spectral_peak`")
    (i,) = series_indices(series, model.names, "series")
    m = check_int(grid, "grid", minimum=16)
    coefs, sigma = np.asarray(model.coefs), np.asarray(model.sigma_u)

    def density(w: float) -> float:
        return float(_spectrum(coefs, sigma, np.array([w]))[0, i, i].real)

    w = np.linspace(0.0, np.pi, m)
    f = _spectrum(coefs, sigma, w)[:, i, i].real
    j = int(np.argmax(f))
    best_w, best_f = float(w[j]), float(f[j])
    if 0 < j < m - 1:
        res = optimize.minimize_scalar(
            lambda x: -density(x), bounds=(w[j - 1], w[j + 1]), method="bounded",
            options={"xatol": 1e-12},
        )  # fmt: skip
        if -res.fun >= best_f:
            best_w, best_f = float(res.x), float(-res.fun)
    eig = np.linalg.eigvals(np.asarray(model.companion))
    cplx = eig[np.abs(eig.imag) > 1e-12]
    root_period = None
    if cplx.size:
        lam = cplx[np.argmax(np.abs(cplx))]
        root_period = float(2 * np.pi / abs(np.angle(lam)))
    return SpectralPeak(
        frequency=best_w, period=float(2 * np.pi / best_w) if best_w > 0 else float("inf"),
        density=best_f, has_cycle=0 < j < m - 1, root_period=root_period,
        series=model.names[i],
    )  # fmt: skip


def simulate_var(
    process: VARLike,
    steps: int,
    rng: np.random.Generator | int | None = None,
    *,
    burn: int | None = None,
    initial: Any = None,
) -> np.ndarray:
    """Simulate `steps` rows of the VAR with Gaussian innovations, shape (steps, n).

    y_t = c (+ d·(t+1) for a "ct" fit) + Σ_j A_j y_{t−j} + P ε_t, ε_t ~ N(0, I), P P' = Σ_u
    (t counts rows of the returned path from 0; burn-in rows have negative t).

    Parameters
    ----------
    process : `VARProcess` or `VARFit`.
    steps : rows returned (>= 1).
    rng : the only source of randomness, as everywhere in arlib: a numpy Generator (used as
        it is), an integer seed (``np.random.default_rng(seed)``: the same seed, the same
        path) or None (fresh entropy, not reproducible).
    burn : rows simulated and dropped first; default 100 when `initial` is None, else 0.
    initial : (p, n) presample rows y_{−p}..y_{−1} (before the burn-in); default: the stationary
        mean when the process is stable, else zeros.
    """
    model = check_model(process, "process")
    T = check_int(steps, "steps", minimum=1)
    gen = as_rng(rng)
    n, p = model.n, model.lags
    b = check_int(100 if initial is None and burn is None else (burn or 0), "burn", minimum=0)
    coefs = np.asarray(model.coefs)
    c = np.zeros(n) if model.intercept is None else np.asarray(model.intercept)
    slope = getattr(model, "trend_coef", None)
    if initial is None:
        center = _mean(coefs, c) if model.is_stable else np.zeros(n)
        start = np.tile(center, (p, 1))
    else:
        start, _ = as_data(initial, arg="initial")
        if start.shape != (p, n):
            msg = f"`initial` must have shape (p, n) = ({p}, {n}), got {start.shape}"
            raise InvalidInputError(msg)
    chol = np.linalg.cholesky(np.asarray(model.sigma_u))
    shocks = gen.standard_normal((b + T, n)) @ chol.T
    path = np.vstack([start, np.zeros((b + T, n))])
    for t in range(b + T):
        row = c + shocks[t]
        if slope is not None:
            row = row + slope * (t - b + 1)
        for j in range(p):
            row = row + coefs[j] @ path[p + t - 1 - j]
        path[p + t] = row
    out = path[p + b :]
    readonly(out)
    return out


def _mean(coefs: np.ndarray, c: np.ndarray) -> np.ndarray:
    return np.linalg.solve(np.eye(len(c)) - coefs.sum(axis=0), c)
