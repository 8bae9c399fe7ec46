"""Natural-conjugate shrinkage VAR: a Minnesota-type prior, closed-form posterior and marginal
likelihood, tightness chosen by maximising the marginal likelihood.

Model (T observations, n series, p lags, rows oldest first; N = T − p usable rows)::

    Y = 1 c' + X B + U,   rows of U ~ N(0, Σ)                       Y (N, n), X (N, k'), k' = n·p

X holds [y_{t−1}', ..., y_{t−p}'] (the layout of `fit_var`'s design without its constant), so
row (l−1)·n + j of B (k', n) is the effect of series j at lag l; column i is equation i.

Prior (natural conjugate: Kadiyala & Karlsson 1997, Sec. 3; Bańbura, Giannone & Reichlin 2010,
Sec. 2.2; Giannone, Lenza & Primiceri 2015, Sec. 3)::

    Σ ~ IW(S₀, ν₀),  ν₀ = n + 2,  S₀ = diag(σ_1², ..., σ_n²)         (E[Σ] = S₀)
    vec B | Σ ~ N(vec B₀, Σ ⊗ Ω),  Ω = diag(ω),  ω_(l,j) = λ² / (l^(2·decay) σ_j²)
    c: flat (zero prior precision; see "Intercept" below)

so Var[(A_l)_ij | Σ] = λ² Σ_ii / (l^(2·decay) σ_j²), the Minnesota scale with E[Σ_ii] = σ_i²:
λ is the overall tightness, `lag_decay` how fast more distant lags shrink (1 = the 1/l² of
BGR 2010), σ_j² puts the series in common units. B₀ is zero except (A_1)_ii = δ_i, the prior
mean of each series' own first lag:

    δ_i = 1 "random_walk" — for series in levels (log levels), which behave like random walks;
    δ_i = 0 "white_noise" — for changes and returns (differences, log returns, percent changes).

arlib takes the rule as an argument; the pipeline passes it from each universe's transform.
σ_j² is the residual variance Σ_t û_t² / (N − 2) of an AR(1) with intercept fitted by least
squares to series j on the window's N usable rows (N − 1 without intercept, trend "n").

Posterior (closed form; KK 1997 Sec. 3; BGR 2010 Sec. 2 — section numbers recalled from memory)::

    Ω̄⁻¹ = X'X + Ω⁻¹,   B̄ = Ω̄ (X'Y + Ω⁻¹ B₀),   ν̄ = ν₀ + N
    S̄ = S₀ + (Y − X B̄)'(Y − X B̄) + (B̄ − B₀)' Ω⁻¹ (B̄ − B₀)
    Σ | Y ~ IW(S̄, ν̄),   vec B | Σ, Y ~ N(vec B̄, Σ ⊗ Ω̄)

computed on centred data when there is an intercept (X, Y less their column means: the flat
intercept is then c̄ = ȳ − B̄' x̄). Responses, decompositions, connectedness and forecasts use the
posterior mean: coefficients B̄ and Σ_u = E[Σ | Y] = S̄ / (ν̄ − n − 1).

Log marginal likelihood (GLP 2015, Appendix — formula recalled from memory and checked in
tests/reference/test_shrinkage_reference.py against the matrix-variate t density of Y, Gupta &
Nagar 2000, Def. 4.2.1, and against numeric integration)::

    log p(Y | λ) = −(nN/2) log π + log Γ_n(ν̄/2) − log Γ_n(ν₀/2) − (n/2) log|Ω|
                   − (n/2) log|Ω̄⁻¹| + (ν₀/2) log|S₀| − (ν̄/2) log|S̄|

Intercept: with a flat prior the marginal likelihood is defined up to a factor free of λ; we
report lim_{v→∞} [log p_v(Y) + (n/2) log v], where p_v has the proper intercept prior
c | Σ ~ N(0, v Σ): the formula above with Ω̄⁻¹ including the intercept row (det = N · det of the
centred block) and Ω omitting it. It ranks λ exactly as p_v does for large v and does not
depend on where the data are shifted to, so rolling windows may sum in any coordinates.

Computation: with D = diag(1/ω)·λ² = diag(l^(2·decay) σ_j²) and μ = λ⁻², the scaled
cross-products D^{-1/2} X'X D^{-1/2} = V diag(e) V' are diagonalised once per window; then for
any λ (w_i = 1/(e_i + μ), G = V' D^{-1/2} X'Y, H = V' D^{1/2} B₀)::

    log|Ω| + log|Ω̄⁻¹| = −k' log μ + Σ_i log(e_i + μ)          (the log|D| terms cancel)
    R = diag(w)(G + μH),  B̄ = D^{-1/2} V R
    S̄(μ) = S₀ + Y'Y + μ H'H − (G + μH)' R
    dS̄/dμ = (H − R)'(H − R)
    d log p / dμ = (n/2)(k'/μ − Σ_i w_i) − (ν̄/2) tr(S̄⁻¹ (H − R)'(H − R))
    (second derivative in `log_ml_slope`)

each O(k'n² + n³) per λ, batched over windows.

Choosing λ ("auto"): maximise log p(Y | λ) over log λ in [log 1e-3, log 10] (`TIGHTNESS_RANGE`):
the criterion on a grid of `GRID_POINTS` (9, two per decade) points equally spaced in log λ;
the best grid point and the neighbour its slope points to bracket a maximum, whose slope root is
then found by Newton's method on d log p / d log λ (analytic first and second derivatives,
below), safeguarded by bisection of the bracket whenever a step leaves it or the curvature is
not negative, until a Newton step is below `ROOT_TOL` (1e-7 in log λ), which is then taken —
converging quadratically, the error left is about its square, near 1e-14 (at most `ROOT_STEPS`
steps). A maximum on the range's edge is the edge. The steps are the same for a single fit and
for every rolling window (batched), so the rolling engine reproduces a single fit's λ to the
rounding of its cross-products.

References
----------
Kadiyala, K. R. and Karlsson, S. (1997). Numerical methods for estimation and inference in
    Bayesian VAR-models. Journal of Applied Econometrics 12(2), 99–132.
Bańbura, M., Giannone, D. and Reichlin, L. (2010). Large Bayesian vector auto regressions.
    Journal of Applied Econometrics 25(1), 71–92 (the prior and its dummy observations, Sec. 2).
Giannone, D., Lenza, M. and Primiceri, G. E. (2015). Prior selection for vector
    autoregressions. Review of Economics and Statistics 97(2), 436–451 (marginal likelihood).
Gupta, A. K. and Nagar, D. K. (2000). Matrix Variate Distributions. Chapman & Hall (Def. 4.2.1; number recalled from memory).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from ._bands import Bands
from ._estimate import companion_matrix, design_matrix
from ._validate import (
    InvalidInputError,
    as_data,
    check_int,
    check_option,
    readonly,
    warn_unstable,
)

#: Prior mean of each series' own first lag, by rule (the one place to add a rule).
PRIOR_MEANS: dict[str, float] = {"random_walk": 1.0, "white_noise": 0.0}
#: Trends the shrinkage VAR accepts: "c" (flat intercept) or "n" (none).
SHRINK_TRENDS = ("c", "n")
#: Bounds of the tightness search (λ), and the number of grid points over log λ.
TIGHTNESS_RANGE = (1e-3, 10.0)
GRID_POINTS = 9
#: Newton step (log λ) below which the root search stops, and its step limit.
ROOT_TOL = 1e-7
ROOT_STEPS = 50


# ---------------------------------------------------------------------------------------------
# kernels (batched over a leading window axis W; trust their inputs)
# ---------------------------------------------------------------------------------------------


@dataclass
class Prepared:
    """Per-window quantities that do not depend on λ (see module docstring), W windows.

    e (W, k') eigenvalues of D^{-1/2}X'XD^{-1/2};  V (W, k', k');  scale (W, k') = D^{-1/2};
    G (W, k', n);  H (W, k', n);  HtH (W, n) diagonal of H'H = B₀'DB₀;  base (W, n, n) S₀ + Y'Y;
    s2 (W, n) σ_j²;  const (W,) the λ-free part of log p;  nu (W,) ν̄;  n, k'.
    """

    e: np.ndarray
    V: np.ndarray
    scale: np.ndarray
    G: np.ndarray
    H: np.ndarray
    HtH: np.ndarray
    base: np.ndarray
    s2: np.ndarray
    const: np.ndarray
    nu: np.ndarray
    n: int
    k: int

    def take(self, sel: np.ndarray) -> Prepared:
        """The windows `sel`, without V and the scales (what the λ search needs)."""
        return Prepared(
            self.e[sel], self.V[:0], self.scale[:0], self.G[sel], self.H[sel], self.HtH[sel],
            self.base[sel], self.s2[sel], self.const[sel], self.nu[sel], self.n, self.k,
        )  # fmt: skip


def ar1_variances(
    XX: np.ndarray, XY: np.ndarray, YY: np.ndarray, N: np.ndarray, centred: bool
) -> np.ndarray:
    """(W, n) σ_j² = (Σ y_j² − (Σ y_j y_j,−1)² / Σ y_j,−1²) / (N − 1 − centred): the AR(1)
    residual variance of each series from its own lag-1 cross-products (centred when `centred`)."""
    n = YY.shape[-1]
    idx = np.arange(n)
    sxx = XX[:, idx, idx]
    sxy = XY[:, idx, idx]
    syy = YY[:, idx, idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        return (syy - sxy * sxy / sxx) / (N - 1.0 - centred)[:, None]


def prepare(
    XX: np.ndarray, XY: np.ndarray, YY: np.ndarray, N: np.ndarray, delta: np.ndarray,
    p: int, decay: float, centred: bool,
) -> Prepared:  # fmt: skip
    """λ-free quantities from cross-products XX (W, k', k'), XY (W, k', n), YY (W, n, n) of N (W,)
    observations (centred when `centred`), prior means δ (n,), p lags and lag decay."""
    W, n = YY.shape[0], YY.shape[-1]
    k = n * p
    s2 = ar1_variances(XX, XY, YY, N, centred)
    lagpow = np.repeat(np.arange(1, p + 1, dtype=np.float64) ** (2.0 * decay), n)  # l^(2 decay)
    dvec = lagpow[None, :] * np.tile(s2, (1, p))  # D = diag(l^(2 decay) σ_j²)   (W, k')
    scale = 1.0 / np.sqrt(dvec)
    M = XX * scale[:, :, None] * scale[:, None, :]  # D^{-1/2} X'X D^{-1/2}
    e, V = np.linalg.eigh(M)
    e = np.maximum(e, 0.0)
    Vt = np.swapaxes(V, 1, 2)
    G = Vt @ (XY * scale[:, :, None])  # V' D^{-1/2} X'Y
    h0 = np.sqrt(dvec[:, :n]) * delta[None, :]  # D^{1/2} B₀: only rows (1, j), column j
    H = Vt[:, :, :n] * h0[:, None, :]
    HtH = h0 * h0
    nu0 = n + 2.0
    nu = nu0 + N
    S0 = s2  # diag(σ²)·(ν₀ − n − 1), ν₀ − n − 1 = 1
    base = YY.copy()
    idx = np.arange(n)
    base[:, idx, idx] += S0
    const = (
        -0.5 * n * N * np.log(np.pi)
        + _multigammaln(nu / 2.0, n)
        - _multigammaln(np.full(W, nu0 / 2.0), n)
        + 0.5 * nu0 * np.log(S0).sum(axis=-1)
        - (0.5 * n * np.log(N) if centred else 0.0)
    )
    return Prepared(e, V, scale, G, H, HtH, base, s2, const, nu, n, k)


def _multigammaln(a: np.ndarray, n: int) -> np.ndarray:
    """log Γ_n(a) = n(n−1)/4 log π + Σ_{j=1}^n log Γ(a + (1 − j)/2), elementwise over a."""
    j = np.arange(1, n + 1)
    return 0.25 * n * (n - 1) * np.log(np.pi) + special.gammaln(a[..., None] + 0.5 * (1 - j)).sum(
        axis=-1
    )


def sbar(prep: Prepared, mu: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """S̄(μ) (W, n, n), R (W, k', n) and w (W, k') at μ = λ⁻² (W,)."""
    w = 1.0 / (prep.e + mu[:, None])
    Q = prep.G + mu[:, None, None] * prep.H
    R = Q * w[:, :, None]
    S = prep.base - np.swapaxes(Q, 1, 2) @ R
    idx = np.arange(prep.n)
    S[:, idx, idx] += mu[:, None] * prep.HtH
    return 0.5 * (S + np.swapaxes(S, 1, 2)), R, w


def log_ml(prep: Prepared, x: np.ndarray) -> np.ndarray:
    """(W,) log p(Y | λ) at log λ = x (W,)."""
    mu = np.exp(-2.0 * x)
    S, _, _ = sbar(prep, mu)
    _, logdet = np.linalg.slogdet(S)
    n, k = prep.n, prep.k
    return (
        prep.const
        + 0.5 * n * (k * np.log(mu) - np.log(prep.e + mu[:, None]).sum(axis=-1))
        - 0.5 * prep.nu * logdet
    )


def log_ml_slope(prep: Prepared, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(W,) first and second derivatives of log p(Y | λ) in log λ at log λ = x (W,).

    With M = H − R:  dS̄/dμ = M'M,  d²S̄/dμ² = −2 M' diag(w) M,  and
        f_μ  = (n/2)(k'/μ − Σ w_i) − (ν̄/2) tr(S̄⁻¹ M'M)
        f_μμ = −(n/2)(k'/μ² − Σ w_i²) + (ν̄/2)[2 tr(S̄⁻¹ M'WM) + tr((S̄⁻¹ M'M)²)]
    and with μ = e^{−2x}:  f_x = −2μ f_μ,  f_xx = 4μ² f_μμ + 4μ f_μ.
    """
    mu = np.exp(-2.0 * x)
    S, R, w = sbar(prep, mu)
    M = prep.H - R
    Mt = np.swapaxes(M, 1, 2)
    dS = Mt @ M
    d2 = Mt @ (M * w[:, :, None])
    Sinv = np.linalg.inv(S)
    P = Sinv @ dS
    n, k = prep.n, prep.k
    tr1 = np.trace(P, axis1=1, axis2=2)
    tr2 = (Sinv * d2).sum(axis=(1, 2))
    tr3 = (P * np.swapaxes(P, 1, 2)).sum(axis=(1, 2))
    f_mu = 0.5 * n * (k / mu - w.sum(axis=-1)) - 0.5 * prep.nu * tr1
    f_mumu = -0.5 * n * (k / mu**2 - (w * w).sum(axis=-1)) + 0.5 * prep.nu * (2.0 * tr2 + tr3)
    return -2.0 * mu * f_mu, 4.0 * mu * mu * f_mumu + 4.0 * mu * f_mu


def search_tightness(prep: Prepared) -> np.ndarray:
    """(W,) log λ maximising log p(Y | λ) over `TIGHTNESS_RANGE` (grid, then safeguarded Newton)."""
    W = prep.e.shape[0]
    grid = np.linspace(np.log(TIGHTNESS_RANGE[0]), np.log(TIGHTNESS_RANGE[1]), GRID_POINTS)
    vals = np.stack([log_ml(prep, np.full(W, x)) for x in grid], axis=1)  # (W, grid)
    best = np.argmax(np.where(np.isfinite(vals), vals, -np.inf), axis=1)
    x = grid[best].copy()
    g, h = log_ml_slope(prep, x)
    # f(x_best) >= f at both neighbours, so a maximum lies between x_best and the neighbour the
    # slope points to; at the range's edge with the slope pointing out, the edge is the answer
    right = g > 0
    nb = np.where(right, best + 1, best - 1)
    active = (nb >= 0) & (nb < GRID_POINTS) & (g != 0)
    nbc = np.clip(nb, 0, GRID_POINTS - 1)
    a = np.where(right, x, grid[nbc])
    b = np.where(right, grid[nbc], x)
    for _ in range(ROOT_STEPS):
        act = np.flatnonzero(active)
        if act.size == 0:
            break
        xa, ga, ha, lo, hi = x[act], g[act], h[act], a[act], b[act]
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(ha < 0, -ga / ha, np.nan)  # Newton on the slope where f is concave
        xn = xa + step
        newton = (xn > lo) & (xn < hi)
        xn = np.where(newton, xn, 0.5 * (lo + hi))  # else bisect the bracket
        # a Newton step below ROOT_TOL leaves an error of about its square: take it and stop
        last = newton & (np.abs(step) < ROOT_TOL)
        x[act[last]] = xn[last]
        active[act[last]] = False
        act, xn, lo, hi = act[~last], xn[~last], lo[~last], hi[~last]
        if act.size == 0:
            break
        gn, hn = log_ml_slope(prep.take(act), xn)
        a[act] = np.where(gn > 0, xn, lo)
        b[act] = np.where(gn > 0, hi, xn)
        x[act], g[act], h[act] = xn, gn, hn
        active[act] = (gn != 0) & (b[act] - a[act] > 1e-15)
    return x


def posterior(prep: Prepared, x: np.ndarray) -> dict[str, np.ndarray]:
    """Posterior at log λ = x (W,): "B" (W, k', n) B̄ of the lags, "S" (W, n, n) S̄,
    "Sigma" (W, n, n) E[Σ | Y] = S̄/(ν̄ − n − 1), "omega" (W, k', k') Ω̄ of the lags, "log_ml" (W,)."""
    mu = np.exp(-2.0 * x)
    S, R, w = sbar(prep, mu)
    B = prep.scale[:, :, None] * (prep.V @ R)  # D^{-1/2} V R
    VD = prep.scale[:, :, None] * prep.V  # D^{-1/2} V
    omega = (VD * w[:, None, :]) @ np.swapaxes(VD, 1, 2)  # D^{-1/2} V diag(w) V' D^{-1/2}
    Sigma = S / (prep.nu - prep.n - 1.0)[:, None, None]
    return {"B": B, "S": S, "Sigma": Sigma, "omega": omega, "log_ml": log_ml(prep, x)}


def lag_coefs(B: np.ndarray, n: int, p: int) -> np.ndarray:
    """(W, p, n, n) coefs[w, l] = A_{l+1} from B̄ (W, n·p, n) (row (l, j), column i → A_l[i, j])."""
    W = B.shape[0]
    return np.swapaxes(B.reshape(W, p, n, n), 2, 3)


# ---------------------------------------------------------------------------------------------
# arguments
# ---------------------------------------------------------------------------------------------


def prior_means(prior_mean: Any, names: tuple[str, ...]) -> np.ndarray:
    """δ (n,) from a rule name (every series) or one rule name or number per series."""
    n = len(names)
    if isinstance(prior_mean, str):
        check_option(prior_mean, "prior_mean", PRIOR_MEANS)
        return np.full(n, PRIOR_MEANS[prior_mean])
    if isinstance(prior_mean, Sequence | np.ndarray) and len(prior_mean) == n:
        out = np.empty(n)
        for j, item in enumerate(prior_mean):
            if isinstance(item, str):
                if item not in PRIOR_MEANS:
                    msg = (
                        f"`prior_mean` for series {names[j]!r} is {item!r}; use one of "
                        f"{sorted(PRIOR_MEANS)} or a number (the prior mean of its own first lag)"
                    )
                    raise InvalidInputError(msg)
                out[j] = PRIOR_MEANS[item]
            elif isinstance(item, int | float | np.integer | np.floating) and np.isfinite(item):
                out[j] = float(item)
            else:
                msg = f"`prior_mean` for series {names[j]!r} is {item!r}; use a rule name or a finite number"
                raise InvalidInputError(msg)
        return out
    msg = (
        f"`prior_mean` must be one of {sorted(PRIOR_MEANS)} or a list of {n} rules/numbers "
        f"(one per series), got {prior_mean!r}"
    )
    raise InvalidInputError(msg)


def check_tightness(tightness: Any) -> float | None:
    """None for "auto", else λ as a positive finite float."""
    if isinstance(tightness, str) and tightness == "auto":
        return None
    if isinstance(tightness, bool) or not isinstance(
        tightness, int | float | np.integer | np.floating
    ):
        msg = f'`tightness` must be "auto" or a positive number (λ), got {tightness!r}'
        raise InvalidInputError(msg)
    lam = float(tightness)
    if not (np.isfinite(lam) and lam > 0):
        msg = f'`tightness` must be "auto" or a positive finite number (λ), got {tightness!r}'
        raise InvalidInputError(msg)
    return lam


def check_decay(lag_decay: Any) -> float:
    """Lag decay as a finite float >= 0."""
    if isinstance(lag_decay, bool) or not isinstance(
        lag_decay, int | float | np.integer | np.floating
    ):
        msg = f"`lag_decay` must be a number >= 0 (prior sd shrinks as 1/lag^decay), got {lag_decay!r}"
        raise InvalidInputError(msg)
    out = float(lag_decay)
    if not (np.isfinite(out) and out >= 0):
        msg = f"`lag_decay` must be a finite number >= 0, got {lag_decay!r}"
        raise InvalidInputError(msg)
    return out


# ---------------------------------------------------------------------------------------------
# result
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class ShrinkageFit:
    """A natural-conjugate shrinkage VAR fit (posterior mean); accepted everywhere a `VARFit` is
    for responses, decompositions, connectedness and forecasts. Arrays are read-only.

    Attributes
    ----------
    y : (T, n) data.   names : n series names.   trend : "c" | "n".   lags : p.
    nobs : N = T − p usable rows.
    coefs : (p, n, n) posterior mean, ``coefs[i]`` = A_{i+1}.
    intercept : (n,) c̄ = ȳ − B̄'x̄ (trend "c") or None.
    sigma_u : (n, n) posterior mean of Σ, S̄/(ν̄ − n − 1).
    tightness : λ used (chosen or given).   tightness_chosen : whether it was chosen ("auto").
    lag_decay : decay exponent.   prior_mean : (n,) δ.   prior_scales : (n,) σ_j².
    log_marginal_likelihood : log p(Y | λ) (module docstring; flat intercept as a limit).
    post_coef : (n·p, n) B̄ of the lags (row (l−1)·n + j, column i).
    post_omega : (n·p, n·p) Ω̄ of the lags.   post_scale : (n, n) S̄.   post_dof : ν̄.
    companion, spectral_radius, is_stable : as in `VARFit`.
    """

    y: np.ndarray
    names: tuple[str, ...]
    trend: str
    lags: int
    nobs: int
    coefs: np.ndarray
    intercept: np.ndarray | None
    sigma_u: np.ndarray
    tightness: float
    tightness_chosen: bool
    lag_decay: float
    prior_mean: np.ndarray
    prior_scales: np.ndarray
    log_marginal_likelihood: float
    post_coef: np.ndarray
    post_omega: np.ndarray
    post_scale: np.ndarray
    post_dof: float
    companion: np.ndarray
    spectral_radius: float
    is_stable: bool

    @property
    def n(self) -> int:
        """Number of series."""
        return int(self.y.shape[1])

    def __repr__(self) -> str:
        how = "chosen" if self.tightness_chosen else "fixed"
        return (
            f"ShrinkageFit(n={self.n}, lags={self.lags}, trend={self.trend!r}, nobs={self.nobs}, "
            f"tightness={self.tightness:.4g} ({how}), log_ml={self.log_marginal_likelihood:.6g})"
        )


def window_moments(
    data: np.ndarray, p: int, centred: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Cross-products (1-window batch) XX, XY, YY, N and the column means x̄ (k',), ȳ (n,)."""
    X = design_matrix(data, p, "n")
    Y = data[p:]
    xbar = X.mean(axis=0) if centred else np.zeros(X.shape[1])
    ybar = Y.mean(axis=0) if centred else np.zeros(Y.shape[1])
    Xc, Yc = X - xbar, Y - ybar
    return (
        (Xc.T @ Xc)[None], (Xc.T @ Yc)[None], (Yc.T @ Yc)[None],
        np.array([float(Y.shape[0])]), xbar, ybar,
    )  # fmt: skip


def shrinkage_var(
    y: Any,
    lags: int,
    *,
    tightness: float | str = "auto",
    prior_mean: str | Sequence[Any] = "white_noise",
    lag_decay: float = 1.0,
    trend: str = "c",
    names: Sequence[str] | None = None,
) -> ShrinkageFit:
    """Fit a VAR(p) with the natural-conjugate Minnesota prior (module docstring).

    Parameters
    ----------
    y : (T, n) data, rows oldest first.   lags : p >= 1.
    tightness : λ > 0, or "auto" to choose it by maximising the marginal likelihood over
        `TIGHTNESS_RANGE` (grid, then root of the slope; module docstring).
    prior_mean : "white_noise" (δ = 0: changes, returns) or "random_walk" (δ = 1: levels), or
        one rule or number per series — the prior mean of each series' own first lag.
    lag_decay : prior sd of lag-l coefficients ∝ 1/l^decay (default 1).
    trend : "c" (intercept, flat prior) or "n".
    names : optional n series names.

    Returns
    -------
    ShrinkageFit (posterior mean coefficients and E[Σ | Y]; usable by `impulse_responses`,
    `variance_decomposition`, `connectedness`, `forecast` ...).

    Raises
    ------
    InvalidInputError : NaN/inf, too few rows (need N = T − p >= 3 for the AR(1) scales), a
        constant series, bad options.
    """
    data, labels = as_data(y, names)
    p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
    check_option(trend, "trend", SHRINK_TRENDS)
    lam = check_tightness(tightness)
    decay = check_decay(lag_decay)
    delta = prior_means(prior_mean, labels)
    T, n = data.shape
    if T - p < 3 + (trend == "c"):
        msg = (
            f"`y` has {T} rows; with lags={p} that leaves {T - p} observations, too few for the "
            f"AR(1) prior scales (need at least {3 + (trend == 'c')}); use more rows"
        )
        raise InvalidInputError(msg)
    centred = trend == "c"
    XX, XY, YY, N, xbar, ybar = window_moments(data, p, centred)
    s2 = ar1_variances(XX, XY, YY, N, centred)[0]
    bad = np.flatnonzero(~(s2 > 0))
    if bad.size:
        msg = (
            f"`y` series {labels[int(bad[0])]!r} has no variation left after its own lag "
            "(AR(1) residual variance is zero), so it gives no prior scale; drop it"
        )
        raise InvalidInputError(msg)
    prep = prepare(XX, XY, YY, N, delta, p, decay, centred)
    x = search_tightness(prep) if lam is None else np.array([np.log(lam)])
    post = posterior(prep, x)
    B = post["B"][0]
    coefs = lag_coefs(post["B"], n, p)[0].copy()
    intercept = ybar - B.T @ xbar if centred else None
    comp = companion_matrix(coefs)
    radius = float(np.abs(np.linalg.eigvals(comp)).max())
    sigma = post["Sigma"][0]
    fit = ShrinkageFit(
        y=data, names=labels, trend=trend, lags=p, nobs=int(N[0]), coefs=coefs,
        intercept=intercept, sigma_u=sigma, tightness=float(np.exp(x[0])),
        tightness_chosen=lam is None, lag_decay=decay, prior_mean=delta, prior_scales=s2,
        log_marginal_likelihood=float(post["log_ml"][0]), post_coef=B,
        post_omega=post["omega"][0], post_scale=post["S"][0], post_dof=float(prep.nu[0]),
        companion=comp, spectral_radius=radius, is_stable=radius < 1.0,
    )  # fmt: skip
    readonly(data, coefs, intercept, sigma, delta, s2, B, post["omega"][0], post["S"][0], comp)
    if radius >= 1.0:
        warn_unstable(radius, what="shrinkage VAR posterior mean")
    return fit


def shrinkage_draws(
    fit: ShrinkageFit, draws: int, *, seed: int | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Exact draws from the matrix-normal–inverse-Wishart posterior of a `ShrinkageFit`.

    Σ ~ IW(S̄, ν̄) (drawn as the inverse of a Wishart(S̄⁻¹, ν̄) by the Bartlett decomposition),
    then vec B | Σ ~ N(vec B̄, Σ ⊗ Ω̄) as B = B̄ + chol(Ω̄) Z chol(Σ)' with Z (k', n) standard
    normal (KK 1997, Sec. 3). The intercept is not drawn (responses do not depend on it).

    Returns coefs (draws, p, n, n) and sigma (draws, n, n).
    """
    if not isinstance(fit, ShrinkageFit):
        msg = f"`fit` must be a ShrinkageFit (from `shrinkage_var`), got {type(fit).__name__}"
        raise InvalidInputError(msg)
    m = check_int(draws, "draws", minimum=1)
    rng = np.random.default_rng(seed)
    n, p = fit.n, fit.lags
    S_inv = np.linalg.inv(fit.post_scale)
    L_w = np.linalg.cholesky(0.5 * (S_inv + S_inv.T))
    L_om = np.linalg.cholesky(fit.post_omega)
    nu = fit.post_dof
    coefs = np.empty((m, p, n, n))
    sig = np.empty((m, n, n))
    for d in range(m):
        # Bartlett: W = L A A' L', A lower, A_ii² ~ χ²(ν − i + 1), A_ij ~ N(0, 1) below diagonal
        A = np.tril(rng.standard_normal((n, n)), -1)
        A[np.diag_indices(n)] = np.sqrt(rng.chisquare(nu - np.arange(n)))
        LA = L_w @ A
        Sigma = np.linalg.inv(LA @ LA.T)
        Sigma = 0.5 * (Sigma + Sigma.T)
        B = fit.post_coef + L_om @ rng.standard_normal((n * p, n)) @ np.linalg.cholesky(Sigma).T
        coefs[d] = lag_coefs(B[None], n, p)[0]
        sig[d] = Sigma
    readonly(coefs, sig)
    return coefs, sig


def shrinkage_bands(
    fit: ShrinkageFit,
    horizon: int,
    *,
    shocks: str = "generalized",
    draws: int = 1000,
    coverage: float = 0.9,
    seed: int | None = None,
) -> Bands:
    """Pointwise posterior bands of impulse responses from exact posterior draws.

    Each draw (Σ, B) from the matrix-normal–inverse-Wishart posterior (`shrinkage_draws`) gives
    responses Φ_h(B) M(Σ) (the `impulse_responses` identification `shocks`); the band is the
    ((1 − coverage)/2, (1 + coverage)/2) quantiles of the draws per entry (equal-tailed credible
    intervals), `point` the responses of the posterior mean (`fit` itself).

    Returns `Bands` with kind "posterior" (shape (H+1, n, n) [horizon, response, shock]).
    """
    from ._responses import SHOCKS, response_kernel
    from ._validate import check_fraction

    H = check_int(horizon, "horizon", minimum=0)
    check_option(shocks, "shocks", SHOCKS)
    level = check_fraction(coverage, "coverage")
    coefs, sig = shrinkage_draws(fit, draws, seed=seed)
    resp = response_kernel(coefs, sig, H, shocks, None)  # (draws, H+1, n, n)
    lo, hi = np.quantile(resp, [(1 - level) / 2, (1 + level) / 2], axis=0)
    point = response_kernel(np.asarray(fit.coefs), np.asarray(fit.sigma_u), H, shocks, None)
    med = np.median(resp, axis=0)
    std = resp.std(axis=0, ddof=1) if draws > 1 else np.zeros_like(point)
    readonly(point, lo, hi, med, std)
    return Bands(point=point, lower=lo, upper=hi, median=med, std=std, coverage=level,
                 kind="posterior", draws=int(draws), bias_corrected=False)  # fmt: skip
