"""Time-varying-parameter VAR filtered with forgetting factors, and its connectedness per date.

Model (Koop & Korobilis 2013, 2014; Antonakakis, Chatziantoniou & Gabauer 2020), for rows t of y:

    y_t = B_t' z_t + ε_t,   ε_t ~ N(0, Σ_t),   z_t = [1, y_{t−1}', …, y_{t−p}']'  (k = d + n·p)
    vec B_t = vec B_{t−1} + η_t                                        (random-walk coefficients)

`B_t` (k, n) holds equation i's coefficients in column i, laid out like `fit_var`'s `params`.
Instead of estimating Cov(η_t), the prediction step *forgets* a share of the coefficient
precision (forgetting factor κ₁), and Σ_t is an exponentially weighted average of residual outer
products (decay factor κ₂). One date of the filter, as we read the papers (equation layout of
Antonakakis et al. 2020, Sec. 2, recalled from memory; β = vec B, X_t = I_n ⊗ z_t'):

    P_{t|t−1} = P_{t−1|t−1} / κ₁                                       (forgetting, κ₁ ∈ (0, 1])
    e_t = y_t − X_t β_{t−1|t−1}                                        (one-step prediction error)
    Σ_{t|t−1} = κ₂ Σ_{t−1|t−1} + (1 − κ₂) e_t e_t'
    K_t = P_{t|t−1} X_t' (X_t P_{t|t−1} X_t' + Σ_{t|t−1})^{-1}
    β_{t|t} = β_{t−1|t−1} + K_t e_t,      P_{t|t} = (I − K_t X_t) P_{t|t−1}
    ε_t = y_t − X_t β_{t|t}                                            (filtered residual)
    Σ_{t|t} = κ₂ Σ_{t−1|t−1} + (1 − κ₂) ε_t ε_t'

The outputs of date t are B_{t|t} and Σ_{t|t}, and the connectedness measures of the VAR they
define. κ₁ = 1 forgets nothing: the filter is then the Bayesian update of constant coefficients.
With κ₁ < 1 the coefficients' effective memory is about 1/(1 − κ₁) dates (100 for κ₁ = 0.99):
an observation m dates old carries weight κ₁^m, and after a break the estimate covers a share
1 − κ₁^m of the jump m dates later (63 % after 1/(1 − κ₁) dates, 95 % after 3/(1 − κ₁);
measured in the tests over 40 simulated breaks with κ₁ = 0.98: 0.42, 0.63, 0.85, 0.94 of the jump
after 25, 50, 100, 150 dates against 0.40, 0.64, 0.87, 0.95).
Σ_t's memory is 1/(1 − κ₂) dates likewise.

State covariance: full or Kronecker
-----------------------------------
The papers filter the full state covariance P (n·k × n·k) with Σ_{t|t−1} in the gain:
O((n·k)²·n) work per date and (n·k)² numbers of state — for n = 30, p = 2 that is 1,830² = 3.3
million numbers and ~1e8 flops per date, minutes for 6,000 dates. ``covariance="full"`` runs
exactly that recursion.

``covariance="kronecker"`` (the default) keeps P in matrix-normal form, P_{t|t} = Σ ⊗ V_t with a
(k, k) regressor covariance V_t shared by all equations. If the prior is of that form (the
training prior below is: the least-squares covariance of vec B̂ is Σ̂ ⊗ (Z'Z)^{-1}) and the
covariance in the gain is the Σ of that same factor, then X P X' + Σ = Σ (1 + z'Vz) and the gain
is K = I_n ⊗ g with g = V z / (1 + z'V z): independent of Σ, the same for every equation, and P
stays Kronecker:

    V_{t|t−1} = V_{t−1} / κ₁,   g_t = V_{t|t−1} z_t / (1 + z_t' V_{t|t−1} z_t)
    B_t = B_{t−1} + g_t e_t',   V_t = V_{t|t−1} − g_t z_t' V_{t|t−1},   ε_t = e_t / (1 + z_t'V_{t|t−1}z_t)

— recursive least squares with exponential forgetting in each equation, O(k² + k·n) per date
(n = 30 and 6,000 dates take a fraction of a second), and Σ_t follows the same κ₂ recursion.
`filter_kronecker` runs it a block of up to 64 dates at a time (one Cholesky factor per block
gives every date of it) and, with an intercept, about the training regressors' mean, so series
held as levels far from zero keep their digits (its docstring has both).
Equivalently B_t minimises Σ_s κ₁^{t−s} ‖y_s − B'z_s‖² + κ₁^{t−t₀} tr((B − B₀)' V₀^{-1} (B − B₀)).
What the choice implies: the coefficient path does not depend on κ₂ (Σ_t only feeds the
connectedness), and cross-equation GLS weighting by the time-varying Σ_{t|t−1} is dropped. The
two recursions coincide exactly when κ₂ = 1 (fixed Σ) with the training prior, whatever κ₁
(tested), and differ otherwise (by up to 0.07 in a coefficient on the tests' simulated VAR(2)
with κ₁ = 0.97, κ₂ = 0.99); both are offered, the papers' one as ``covariance="full"``.

Prior (training sample)
-----------------------
B₀, V₀ = (Z'Z)^{-1} and Σ₀ = Σ̂_u come from `fit_var` on the first `training` rows (full
covariance: P₀ = Σ̂_u ⊗ (Z'Z)^{-1}, the least-squares covariance of vec B̂). Filtering starts at
row `training` (so no row is used twice; dates run from row `training` on), or at row p with
``reuse_training=True`` — every row after the first p gets a date, the training rows then inform
both the prior and the filter, as is common in applied work. Default ``training`` =
max(minimum_window(n, p), 4·k) rows (common practice: a few observations per coefficient). A
prior from the first rows' least squares is the usual choice in this literature (Primiceri 2005;
Koop & Korobilis 2013 — recalled from memory). Defaults κ₁ = κ₂ = 0.99 are, as we recall them,
those of Antonakakis, Chatziantoniou & Gabauer (2020) (recalled from memory, not checked against
the paper here; the training length is ours, see above).

Continuing
----------
The result carries the filter state after its last row (`TVPState`: B, V or P, Σ, the last p
rows, the centre V is kept about, and the settings); ``tvp_var(new_rows, state=result.state)``
continues where the filter stopped — the same recursion, with block boundaries that may fall
elsewhere than in one run over all rows (equal to it to about 1e-13; tested to 1e-10).

Connectedness per date
----------------------
From (B_t, Σ_t): generalized Diebold–Yilmaz tables at `horizon`, Baruník–Křehlík band tables
(when `bands` is given; the same numbers as `_frequency.frequency_kernel` on its grid N) and
Lastrapes–Wiesen joint shares (`_joint.joint_kernel`, when ``joint=True``), computed in chunks of
dates so memory stays bounded. One MA recursion a_h = Φ_h Σ D_σ^{-1/2} (h < max(H, truncation))
serves both the generalized table (Σ_{h<H} a_h²) and the bands; the band sums are the grid-N
sums of `frequency_kernel` taken as low-rank quadratic forms of each entry's sequence
(`_frequency.band_projection`: the eigenpairs of each band's Toeplitz Gram matrix above 1e-14,
the widest band as the remainder), with no spectrum per date (tested against both kernels to
1e-12).

References
----------
Koop, G. and Korobilis, D. (2013). Large time-varying parameter VARs. Journal of Econometrics
    177, 185–198 (forgetting factors; EWMA covariance).
Koop, G. and Korobilis, D. (2014). A new index of financial conditions. European Economic Review
    71, 101–116.
Antonakakis, N., Chatziantoniou, I. and Gabauer, D. (2020). Refined measures of dynamic
    connectedness based on time-varying parameter vector autoregressions. Journal of Risk and
    Financial Management 13(4), 84.
Primiceri, G. E. (2005). Review of Economic Studies 72, 821–852 (training-sample prior).
Diebold, F. X. and Yilmaz, K. (2012). International Journal of Forecasting 28, 57–66.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.linalg import solve_triangular
from scipy.signal import lfilter

from . import _rolling_kernels as K
from ._decompose import spillover_measures
from ._estimate import TREND_TERMS, _least_squares, fit_var
from ._frequency import (
    DEFAULT_TRUNCATION,
    band_projection,
    band_sums,
    band_weights,
    check_bands,
    default_grid,
    frequency_measures,
    scaled_ma,
)
from ._joint import joint_band_sums, joint_kernel, joint_table
from ._labels import is_frame
from ._sizes import minimum_window
from ._validate import (
    InvalidInputError,
    UnstableProcessWarning,
    as_dated_data,
    as_names,
    check_int,
    check_option,
    readonly,
)

#: State-covariance structures (see the module docstring).
COVARIANCES = ("kronecker", "full")
#: Deterministic terms a TVP-VAR may carry (a trend has no meaning with drifting coefficients).
TVP_TRENDS = ("n", "c")
#: Defaults of Antonakakis, Chatziantoniou & Gabauer (2020) (recalled from memory).
DEFAULT_KAPPA1 = 0.99
DEFAULT_KAPPA2 = 0.99
#: Bound on b·max z'Vz of a block of the Kronecker filter (`filter_kronecker`): N's condition
#: number stays below about 100·(1 + LEVERAGE_BUDGET).
LEVERAGE_BUDGET = 256.0
#: Working-memory budget per chunk of dates for the connectedness kernels (bytes).
CHUNK_BYTES = 16 * 2**20


# ---------------------------------------------------------------------------------------------
# state and result
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class TVPState:
    """The filter after its last row: all `tvp_var(..., state=)` needs to go on. Read-only arrays.

    Attributes
    ----------
    params : (k, n) B_{t|t}, column i = equation i ("const" first when trend "c", then lag 1's n
        series, lag 2's, … — `VARFit.params` layout).
    cov : (k, k) V_t (``covariance="kronecker"``; P_t = Σ ⊗ V_t) or (n·k, n·k) P_{t|t} of
        vec B (``"full"``, equation blocks of k).
    sigma : (n, n) Σ_{t|t}.
    tail : (p, n) the last p rows of y, oldest first (the next row's regressors).
    row : number of rows of y consumed so far = the row index the next row will get.
    lags, trend, kappa1, kappa2, covariance, names : the filter's settings.
    centre : (k,) μ (μ₀ = 0) or None. With it, `cov` is the V of the regressors taken about μ,
        z − μ (the Kronecker filter with an intercept keeps its state so: μ is the lagged
        regressors' mean over the training rows; `filter_kronecker`); None: `cov` is for z
        itself (the full filter, no intercept, and states stored before there was a centre).
    """

    params: np.ndarray
    cov: np.ndarray
    sigma: np.ndarray
    tail: np.ndarray
    row: int
    lags: int
    trend: str
    kappa1: float
    kappa2: float
    covariance: str
    names: tuple[str, ...]
    centre: np.ndarray | None = None

    def __repr__(self) -> str:
        return (
            f"TVPState(row={self.row}, n={len(self.names)}, lags={self.lags}, "
            f"kappa1={self.kappa1}, kappa2={self.kappa2}, covariance={self.covariance!r})"
        )


@dataclass(frozen=True, eq=False, repr=False)
class TimeVaryingVAR:
    """Per-date TVP-VAR results. D dates, n series, p lags, d bands. All arrays read-only.

    Attributes
    ----------
    ends : (D,) int, the row of y whose update gives each date's numbers (rows counted from the
        first row of the first call, so they continue across `state=` calls).
    coefs : (D, p, n, n); ``coefs[t, l]`` is A_{l+1} at that date.
    intercept : (D, n), or None for trend "n".
    sigma_u : (D, n, n) Σ_{t|t}.
    prediction_error : (D, n) e_t = y_t − B_{t−1}' z_t, the one-step prediction error.
    spectral_radius : (D,) largest eigenvalue modulus of the date's companion matrix (>= 1 means
        the filtered VAR is not stable at that date; its measures are still computed), or
        None with ``stability=False``.
    total_connectedness : (D,) percent; to_others, from_others, net : (D, n) percent;
    pairwise : (D, n, n) percent, [t, i, j] = share of i's H-step forecast-error variance due to
        shocks in j (generalized, row-normalised; Diebold & Yilmaz 2012); rows sum to 100.
    bands : the bands (cycle lengths) or None. When given (else every band_* is None):
    band_pairwise : (D, d, n, n) percent band tables θ̃_d (Baruník & Křehlík 2018); summed over
        bands they give the DY table at horizon `truncation`.
    band_share : (D, d) Γ(d).   band_total : (D, d) frequency connectedness;
    band_to_others, band_from_others, band_net : (D, d, n);   band_within_total : (D, d).
    truncation, grid : MA terms and FFT size of the bands (None without bands).
    joint_from_others : (D, n) 100·J_i (Lastrapes & Wiesen 2021) or None;
    joint_total : (D,) or None;  joint_to_others, joint_net : (D, n) or None.
    joint_band_from_others, joint_band_variance : (D, d, n), joint_band_total : (D, d) — with
        bands and joint, each date's `joint_frequency_connectedness` (band d's part of 100·J_i at
        horizon `truncation`, Γ_i(d), and the mean over series), else None.
    state : `TVPState` after the last date.
    names, lags, trend, horizon, kappa1, kappa2, covariance : as used.
    training : rows of the training sample (None when continued from a state).
    dates : (D,) datetime64 date of each result row (the row of `y` whose update gave it), or
        None when `y` had no dates (a DataFrame's date column or DatetimeIndex).
    """

    ends: np.ndarray
    coefs: np.ndarray
    intercept: np.ndarray | None
    sigma_u: np.ndarray
    prediction_error: np.ndarray
    spectral_radius: np.ndarray | None
    total_connectedness: np.ndarray
    to_others: np.ndarray
    from_others: np.ndarray
    net: np.ndarray
    pairwise: np.ndarray
    bands: tuple[tuple[float, float], ...] | None
    band_pairwise: np.ndarray | None
    band_share: np.ndarray | None
    band_total: np.ndarray | None
    band_to_others: np.ndarray | None
    band_from_others: np.ndarray | None
    band_net: np.ndarray | None
    band_within_total: np.ndarray | None
    truncation: int | None
    grid: int | None
    joint_from_others: np.ndarray | None
    joint_total: np.ndarray | None
    joint_to_others: np.ndarray | None
    joint_net: np.ndarray | None
    state: TVPState
    names: tuple[str, ...]
    lags: int
    trend: str
    horizon: int
    kappa1: float
    kappa2: float
    covariance: str
    training: int | None
    dates: np.ndarray | None = None
    joint_band_from_others: np.ndarray | None = None
    joint_band_total: np.ndarray | None = None
    joint_band_variance: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.ends.shape[0])

    @property
    def n(self) -> int:
        """Number of series."""
        return len(self.names)

    def __repr__(self) -> str:
        span = f"rows {self.ends[0]}..{self.ends[-1]}" if len(self) else "no rows"
        return (
            f"TimeVaryingVAR({len(self)} dates ({span}), n={self.n}, lags={self.lags}, "
            f"kappa1={self.kappa1}, kappa2={self.kappa2}, covariance={self.covariance!r}, "
            f"horizon={self.horizon})"
        )


# ---------------------------------------------------------------------------------------------
# filter kernels (trust their inputs)
# ---------------------------------------------------------------------------------------------


def regressors(y: np.ndarray, tail: np.ndarray, d: int) -> np.ndarray:
    """(T, k) z_t = [1 (if d), y_{t−1}', …, y_{t−p}'] for the rows of y, given the p rows before."""
    p = tail.shape[0]
    full = np.concatenate([tail, y])
    T = y.shape[0]
    blocks = [np.ones((T, d))] + [full[p - i : p - i + T] for i in range(1, p + 1)]
    return np.concatenate(blocks, axis=1)


def filter_kronecker(
    Y: np.ndarray, Z: np.ndarray, B: np.ndarray, V: np.ndarray, S: np.ndarray, k1: float, k2: float,
    mu: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Forgetting-factor RLS with P = Σ ⊗ V (module docstring), a block of dates at a time.
    V (in and out) is the V of the regressors taken about mu (k,), mu₀ = 0 (zeros: of z itself);
    B (in and out) is in the original coordinates. Returns the per-date paths B (T, k, n),
    Σ (T, n, n), e (T, n) and the final B, V, Σ.

    Block form (Woodbury). From B, V at the end of date t, the next b dates' regressors
    Z (b, k) and errors against the block's starting coefficients Ê = Y − Z B:

        N = diag(κ₁¹, …, κ₁ᵇ) + Z V Z' = L L'   (Cholesky),   Q = L^{-1} Z V,   F = L^{-1} Ê
        B_{t+j} = B + Σ_{i≤j} q_i f_i',        V_{t+b} = (V − Q'Q) / κ₁ᵇ

    (q_i, f_i the rows of Q, F). Date t+j's precision is κ₁ʲ V^{-1} + Σ_{i≤j} κ₁^{j−i} z_i z_i';
    Woodbury turns its inverse times Z_j' into V Z_j' N_j^{-1} with N_j the leading j×j block of
    N, whose Cholesky factor is the leading block of L — so every date of the block reads off
    the one factorisation. Sequential RLS computes the same factorisation one row at a time;
    here it is a few BLAS-3 products per block instead of a Python step per date. The
    one-step errors are e_j = ê_j − Σ_{i<j} (z_j·q_i) f_i and the filtered residuals
    ε_j = ê_j − Σ_{i≤j} (z_j·q_i) f_i (= e_j / (1 + z_j'V_{t+j|t+j−1}z_j)). The block length
    keeps κ₁ᵇ ≥ 0.01 (at most 64 dates), so N's smallest eigenvalue stays ≥ 0.01, and its
    largest, at most 1 + b·max_j z_j'Vz_j, within `LEVERAGE_BUDGET`: a block is shortened (down
    to one date: then it is exactly the sequential RLS step) while the prior is weak against
    single rows — a diffuse V = 1e8·I at the start, where one block over 64 rows would factor a
    matrix with condition ~1e10 and lose 1e-6 in the coefficients.

    Centring. With an intercept the filter runs in the coordinates of z̃ = T z, T = I − μ e₀'
    (the lagged regressors less μ, the constant untouched): B̃ = T^{-T} B = B + e₀ μ'B, and
    back B = T' B̃; V is kept in these coordinates throughout, in the state too (`TVPState`'s
    `centre`). The same model, but Z V Z' and the updates no longer cancel digits against the
    series' levels: for levels near 1e5 moving by 0.01, the filter in z itself lost all
    accuracy in the coefficients (total connectedness off by 2.8 points; tested), and so would
    any conversion of V between the two coordinates — so V is never converted.

    Σ_t = κ₂Σ_{t−1} + (1 − κ₂)ε_tε_t' does not feed back into B or V; it runs after the blocks
    as one first-order recursion over all dates (`ewma`).
    """
    T, n = Y.shape
    k = Z.shape[1]
    Vc = 0.5 * (V + V.T)
    Bc = B.copy()
    Bc[0] += mu @ B  # B̃ = T^{-T} B = B + e₀ (μ'B)  (μ₀ = 0; a no-op for μ = 0)
    Zc = Z - mu
    B_out = np.empty((T, k, n))
    e_out = np.empty((T, n))
    eps = np.empty((T, n))
    size = 64 if k1 >= 1.0 else int(min(64, max(1, math.log(0.01) / math.log(k1))))
    decay = k1 ** np.arange(1, size + 1)
    lo = 0
    while lo < T:
        hi = min(lo + size, T)
        z = Zc[lo:hi]
        ZV = z @ Vc
        lev = np.einsum("ij,ij->i", ZV, z)  # z_j'Vz_j: N's diagonal less the decay
        top = float(lev.max())
        if top * (hi - lo) > LEVERAGE_BUDGET:  # a weak prior: shorter blocks (module docstring)
            hi = lo + max(1, int(LEVERAGE_BUDGET / top))
            z, ZV = z[: hi - lo], ZV[: hi - lo]
        N = ZV @ z.T
        N.flat[:: hi - lo + 1] += decay[: hi - lo]
        L = np.linalg.cholesky(N)
        E = Y[lo:hi] - z @ Bc
        QF = solve_triangular(L, np.concatenate([ZV, E], axis=1), lower=True, check_finite=False)
        Q, F = QF[:, :k], QF[:, k:]
        W = z @ Q.T  # W[j, i] = z_j·q_i
        eps[lo:hi] = E - np.tril(W) @ F
        e_out[lo:hi] = E - np.tril(W, -1) @ F
        path = np.cumsum(Q[:, :, None] * F[:, None, :], axis=0)
        path += Bc
        B_out[lo:hi] = path
        Bc = path[-1]
        Vc = (Vc - Q.T @ Q) / decay[hi - lo - 1]
        Vc = 0.5 * (Vc + Vc.T)
        lo = hi
    if np.any(mu):
        B_out[:, 0] -= np.einsum("k,tkn->tn", mu, B_out)  # B = T' B̃: row 0 − μ'B̃
    S_out = ewma(eps, S, k2)
    B_end = B_out[-1].copy() if T else B.copy()
    return B_out, S_out, e_out, B_end, Vc, (S_out[-1].copy() if T else S.copy())


def ewma(eps: np.ndarray, S0: np.ndarray, k2: float) -> np.ndarray:
    """(T, n, n) Σ_t = κ₂ Σ_{t−1} + (1 − κ₂) ε_t ε_t' from Σ_0 = S0, in blocks of dates."""
    T, n = eps.shape
    out = np.empty((T, n, n))
    prev = S0
    step = max(1, (4 * 2**20) // (8 * n * n))
    for lo in range(0, T, step):
        outer = eps[lo : lo + step, :, None] * eps[lo : lo + step, None, :]
        block, _ = lfilter([1.0 - k2], [1.0, -k2], outer, axis=0, zi=(k2 * prev)[None])
        out[lo : lo + step] = block
        prev = block[-1]
    return out


def filter_full(
    Y: np.ndarray, Z: np.ndarray, B: np.ndarray, P: np.ndarray, S: np.ndarray, k1: float, k2: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The papers' Kalman recursion with the full P of vec B (module docstring), X_t = I_n ⊗ z_t'.
    Returns the per-date paths B (T, k, n), Σ (T, n, n), e (T, n) and the final B, P, Σ."""
    T, n = Y.shape
    k = Z.shape[1]
    m = n * k
    B_out = np.empty((T, k, n))
    S_out = np.empty((T, n, n))
    e_out = np.empty((T, n))
    beta = B.T.reshape(m).copy()  # vec B, equation blocks of k
    P = P.copy()
    S = S.copy()
    for t in range(T):
        z = Z[t]
        Pp = P / k1  # P_{t|t−1} = P_{t−1|t−1} / κ₁
        PX = (Pp.reshape(m, n, k) @ z).copy()  # P_{t|t−1} X_t'  (m, n)
        XPX = (PX.reshape(n, k, n) * z[None, :, None]).sum(axis=1)  # X_t P X_t'  (n, n)
        e = Y[t] - beta.reshape(n, k) @ z  # e_t = y_t − X_t β_{t−1}
        Sp = k2 * S + (1.0 - k2) * np.outer(e, e)  # Σ_{t|t−1}
        F = XPX + Sp
        K = np.linalg.solve(F, PX.T).T  # K_t = P X' F^{-1}   (F symmetric)
        beta = beta + K @ e
        P = Pp - K @ PX.T  # (I − K X) P_{t|t−1}
        P = 0.5 * (P + P.T)
        eps = Y[t] - beta.reshape(n, k) @ z  # ε_t = y_t − X_t β_{t|t}
        S = k2 * S + (1.0 - k2) * np.outer(eps, eps)
        B_out[t] = beta.reshape(n, k).T
        S_out[t] = S
        e_out[t] = e
    return B_out, S_out, e_out, beta.reshape(n, k).T.copy(), P, S


# ---------------------------------------------------------------------------------------------
# connectedness per date, in chunks
# ---------------------------------------------------------------------------------------------


def _chunk(n: int, p: int, terms: int) -> int:
    """Dates per chunk: MA terms a_h, their folds and projections (about 3·terms n×n matrices
    per date), the band and generalized tables and the companion eigenproblem, in CHUNK_BYTES."""
    per = 8 * n * n * (3 * terms + p + 8) + 8 * (n * p) ** 2 * 3
    return max(1, CHUNK_BYTES // per)


def _measures(
    coefs: np.ndarray,
    sigma: np.ndarray,
    horizon: int,
    bands: tuple[tuple[float, float], ...] | None,
    truncation: int | None,
    grid: int | None,
    joint: bool,
    stability: bool = True,
) -> dict[str, np.ndarray]:
    """Per-date generalized table (percent), band tables (percent), joint shares, radius."""
    D, p, n, _ = coefs.shape
    out: dict[str, np.ndarray] = {"pairwise": np.empty((D, n, n))}
    if stability:
        out["radius"] = np.empty(D)
    terms, proj, weights = horizon, None, None
    if bands is not None and truncation is not None and grid is not None:
        weights = band_weights(bands, grid)
        proj = band_projection(weights, grid, truncation)
        terms = max(horizon, truncation)
        out["band_pairwise"] = np.empty((D, len(bands), n, n))
        if joint:
            out["joint_band"] = np.empty((D, len(bands), n))
            out["joint_variance"] = np.empty((D, len(bands), n))
    if joint:
        out["joint"] = np.empty((D, n))
    size = _chunk(n, p, terms)
    for lo in range(0, D, size):
        sl = slice(lo, min(lo + size, D))
        c, s = coefs[sl], sigma[sl]
        a = scaled_ma(c, s, terms).reshape(-1, terms, n * n)
        # generalized: θ̃_ik ∝ Σ_{h<H} a_h[i, k]², rows normalised (= fevd_kernel's last step)
        g = np.einsum("thm,thm->tm", a[:, :horizon], a[:, :horizon]).reshape(-1, n, n)
        out["pairwise"][sl] = 100.0 * g / g.sum(axis=-1, keepdims=True)
        if proj is not None:
            if joint:  # J_i(d), Γ_i(d) from the same MA terms (`_joint.joint_band_sums`)
                a4 = a[:, : proj.terms].reshape(-1, proj.terms, n, n)
                band4, out["joint_band"][sl], out["joint_variance"][sl] = joint_band_sums(a4, s, proj)
                band = band4.reshape(-1, len(proj.others) + 1, n, n)
            else:
                band = band_sums(a[:, : proj.terms], proj).reshape(-1, len(proj.others) + 1, n, n)
            out["band_pairwise"][sl] = 100.0 * band / band.sum(axis=(-3, -1), keepdims=True)
        if joint:
            out["joint"][sl] = joint_kernel(c, s, horizon)
        if stability:  # the rolling engine's certified batch (LAPACK where it cannot certify)
            acat = np.swapaxes(c, 1, 2).reshape(-1, n, p * n)  # [A_1 … A_p]
            out["radius"][sl] = K.spectral_radius_batch(K.balanced(acat, s, p), n, p)[0]
    return out


# ---------------------------------------------------------------------------------------------
# validation
# ---------------------------------------------------------------------------------------------


def _check_kappa(value: Any, arg: str, default: float) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError):
        out = math.nan
    if not 0.0 < out <= 1.0:
        what = "coefficient" if arg == "kappa1" else "error-covariance"
        msg = (
            f"`{arg}` must be a {what} forgetting factor in (0, 1] (1 = no forgetting; "
            f"memory ≈ 1/(1 − {arg}) dates), got {value!r}; use e.g. {arg}={default}"
        )
        raise InvalidInputError(msg)
    return out


def _same(arg: str, given: Any, stored: Any) -> None:
    if given is not None and given != stored:
        msg = (
            f"`{arg}`={given!r} differs from the state's {stored!r}; a continued filter keeps its "
            f"settings — drop `{arg}` or start a new filter without `state`"
        )
        raise InvalidInputError(msg)


def _check_state(state: TVPState) -> None:
    """Shapes and finiteness of a (possibly reloaded) state, so a bad one fails before filtering."""
    n, p = len(state.names), state.lags
    if state.trend not in TVP_TRENDS or state.covariance not in COVARIANCES:
        msg = f"`state` has trend={state.trend!r}, covariance={state.covariance!r}; not a TVP state"
        raise InvalidInputError(msg)
    k = len(TREND_TERMS[state.trend]) + n * p
    m = k if state.covariance == "kronecker" else n * k
    want = {"params": (k, n), "cov": (m, m), "sigma": (n, n), "tail": (p, n)}
    for field, shape in want.items():
        arr = np.asarray(getattr(state, field))
        if arr.shape != shape or not np.isfinite(arr).all():
            msg = (
                f"`state`.{field} has shape {arr.shape} (finite: {bool(np.isfinite(arr).all())}) "
                f"but {n} series, lags={p}, trend={state.trend!r}, covariance="
                f"{state.covariance!r} need a finite {shape}; pass the state a TimeVaryingVAR "
                "returned unchanged"
            )
            raise InvalidInputError(msg)
    if state.centre is not None:
        mu = np.asarray(state.centre)
        if state.covariance != "kronecker" or mu.shape != (k,) or not np.isfinite(mu).all() or (
            state.trend == "c" and mu[0] != 0.0
        ):
            msg = (
                f"`state`.centre must be None or a finite ({k},) vector with a 0 for the "
                f"constant, and only with covariance='kronecker' (got shape {mu.shape}, "
                f"covariance={state.covariance!r}); pass the state a TimeVaryingVAR returned unchanged"
            )
            raise InvalidInputError(msg)
    _check_kappa(state.kappa1, "kappa1", DEFAULT_KAPPA1)
    _check_kappa(state.kappa2, "kappa2", DEFAULT_KAPPA2)


# ---------------------------------------------------------------------------------------------
# public entry
# ---------------------------------------------------------------------------------------------


def tvp_var(
    y: Any,
    lags: int | None = None,
    horizon: int = 10,
    *,
    kappa1: float | None = None,
    kappa2: float | None = None,
    training: int | None = None,
    reuse_training: bool = False,
    trend: str | None = None,
    covariance: str | None = None,
    bands: Sequence[tuple[float, float]] | None = None,
    truncation: int = DEFAULT_TRUNCATION,
    grid: int | None = None,
    joint: bool = False,
    stability: bool = True,
    names: Sequence[str] | None = None,
    state: TVPState | None = None,
) -> TimeVaryingVAR:
    """Filter a TVP-VAR with forgetting factors and compute connectedness at every date.

    See the module docstring for the recursion, the state-covariance choice and the prior.

    Parameters
    ----------
    y : (T, n) rows oldest first (no NaN: the filter needs every row). With `state`: only the
        new rows that follow the state's last row.
    lags : p >= 1 (required without `state`; with it, taken from the state).
    horizon : H >= 1 for the generalized (and joint) decomposition, responses 0..H−1.
    kappa1 : coefficient forgetting factor κ₁ in (0, 1] (default 0.99; memory 1/(1 − κ₁)).
    kappa2 : error-covariance decay κ₂ in (0, 1] (default 0.99; 1 keeps Σ at its prior).
    training : rows of the training sample that give the prior (default max(minimum_window(n,
        p), 4·k)); at least minimum_window(n, p) = p + k + n.
    reuse_training : also filter the training rows (dates from row p instead of row `training`).
    trend : "c" (intercept, default) or "n".
    covariance : "kronecker" (default; P = Σ ⊗ V, O(k²) per date) or "full" (the papers' P).
    bands : cycle-length bands for Baruník–Křehlík connectedness per date (see
        `frequency_connectedness`), or None.   truncation, grid : their MA terms and FFT size.
    joint : also compute Lastrapes–Wiesen joint connectedness per date.
    stability : compute each date's companion spectral radius (an eigenvalue problem of size
        n·p per date: about two thirds of the generalized-only run's time for n = 12, more for
        larger n); False leaves `spectral_radius` None.
    names : n series names (default y0, y1, …; with `state`, the state's).
    state : a `TVPState` (``result.state``) to continue from; settings then come from it.

    Returns
    -------
    TimeVaryingVAR (see its docstring for every array's shape), with ``.state`` to continue from.

    Raises
    ------
    InvalidInputError : bad shapes or options, NaN/inf, κ outside (0, 1], too few rows for the
        training sample, settings that contradict `state`.
    """
    H = check_int(horizon, "horizon", minimum=1)
    band_parts = None if bands is None else check_bands(bands)
    H_f = N_f = None
    if band_parts is not None:
        H_f = check_int(truncation, "truncation", minimum=1)
        N_f = default_grid(H_f) if grid is None else check_int(
            grid, "grid", minimum=H_f, hint="the FFT grid needs N >= `truncation`"
        )  # fmt: skip
    if state is not None:
        if not isinstance(state, TVPState):
            msg = f"`state` must be a TVPState (a TimeVaryingVAR's .state), got {type(state).__name__}"
            raise InvalidInputError(msg)
        for arg, given, stored in (
            ("lags", lags, state.lags), ("trend", trend, state.trend),
            ("covariance", covariance, state.covariance),
            ("kappa1", kappa1, state.kappa1), ("kappa2", kappa2, state.kappa2),
        ):  # fmt: skip
            _same(arg, given, stored)
        if training is not None or reuse_training:
            msg = (
                "`training`/`reuse_training` set the prior of a new filter; drop them with `state`"
            )
            raise InvalidInputError(msg)
        labels = state.names if names is None else as_names(names, len(state.names))
        _same("names", labels, state.names)
        data, columns, row_dates = as_dated_data(y)
        if is_frame(y) and columns != labels:
            msg = (
                f"`y` has series {list(columns)!r} but the state was filtered on {list(labels)!r}; "
                "pass the new rows of the same series, in the same order"
            )
            raise InvalidInputError(msg)
        if data.shape[1] != len(labels):
            msg = (
                f"`y` has {data.shape[1]} series but the state has {len(labels)} "
                f"({list(labels)!r}); pass the new rows of the same series"
            )
            raise InvalidInputError(msg)
        _check_state(state)
        p, trend_, cov_kind = state.lags, state.trend, state.covariance
        k1, k2 = state.kappa1, state.kappa2
        B0, C0, S0, tail = state.params, state.cov, state.sigma, state.tail
        centre = state.centre
        first_row, Y = state.row, data
        train = None
    else:
        data, labels, row_dates = as_dated_data(y, names)
        T, n = data.shape
        if lags is None:
            msg = "`lags` is required for a new filter (e.g. lags=2); only `state=` supplies it"
            raise InvalidInputError(msg)
        p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
        trend_ = check_option("c" if trend is None else trend, "trend", TVP_TRENDS)
        cov_kind = check_option(
            "kronecker" if covariance is None else covariance, "covariance", COVARIANCES
        )
        k1 = _check_kappa(DEFAULT_KAPPA1 if kappa1 is None else kappa1, "kappa1", DEFAULT_KAPPA1)
        k2 = _check_kappa(DEFAULT_KAPPA2 if kappa2 is None else kappa2, "kappa2", DEFAULT_KAPPA2)
        d = len(TREND_TERMS[trend_])
        k = d + n * p
        need = minimum_window(n, p, trend_)
        if training is None:
            train = max(need, 4 * k)
        else:
            train = check_int(
                training, "training", minimum=need,
                hint=f"the prior's least-squares fit of {k} coefficients per equation and an "
                f"{n}×{n} covariance needs p + k + n = {need} rows",
            )  # fmt: skip
        first = p if reuse_training else train
        if T <= first:
            msg = (
                f"`y` has {T} rows, but the training sample takes training={train} rows "
                f"(prior from rows 0..{train - 1}) and leaves none to filter; pass more than "
                f"{first} rows or a smaller `training` (>= {need})"
            )
            raise InvalidInputError(msg)
        with warnings.catch_warnings():
            # an explosive training fit is a usable prior; the filter's own radius is reported
            warnings.simplefilter("ignore", UnstableProcessWarning)
            try:
                prior = fit_var(data[:train], p, trend=trend_, names=labels)
            except InvalidInputError as exc:
                msg = (
                    f"the training sample (rows 0..{train - 1}, `training`={train}) cannot be "
                    f"fitted: {exc}; use a longer `training`"
                )
                raise InvalidInputError(msg) from exc
        B0, S0 = np.asarray(prior.params), np.asarray(prior.sigma_u)
        V0 = np.asarray(prior.gram_inv)
        centre = None
        if cov_kind == "kronecker" and d:  # V0 about the training regressors' mean (filter_kronecker)
            Z0 = regressors(data[p:train], data[:p], d)
            centre = np.zeros(k)
            centre[d:] = Z0[:, d:].mean(axis=0)
            V0 = _least_squares(Z0 - centre, data[p:train], prior.regressor_names, "y")[1]
        C0 = V0 if cov_kind == "kronecker" else np.kron(S0, V0)  # Cov(vec B̂) = Σ̂ ⊗ (Z'Z)^{-1}
        tail = data[first - p : first]
        first_row, Y = first, data[first:]
    n = len(labels)
    d = len(TREND_TERMS[trend_])
    Z = regressors(Y, tail, d)
    if cov_kind == "kronecker":
        mu = np.zeros(Z.shape[1]) if centre is None else np.asarray(centre, dtype=np.float64)
        paths = filter_kronecker(Y, Z, B0, C0, S0, k1, k2, mu)
    else:
        paths = filter_full(Y, Z, B0, C0, S0, k1, k2)
    B_path, S_path, e_path, B_end, C_end, S_end = paths
    D = Y.shape[0]
    coefs = B_path[:, d:, :].reshape(D, p, n, n).transpose(0, 1, 3, 2).copy()
    intercept = B_path[:, 0, :].copy() if d else None
    m = _measures(coefs, S_path, H, band_parts, H_f, N_f, bool(joint), bool(stability))
    g = spillover_measures(m["pairwise"])
    radius = m.get("radius")
    new_tail = np.concatenate([tail, Y])[-p:].copy()
    new_state = TVPState(
        params=B_end, cov=C_end, sigma=S_end, tail=new_tail, row=first_row + D, lags=p,
        trend=trend_, kappa1=k1, kappa2=k2, covariance=cov_kind, names=labels,
        centre=None if centre is None else np.array(centre, dtype=np.float64),
    )  # fmt: skip
    readonly(B_end, C_end, S_end, new_tail, new_state.centre)
    bandm: dict[str, np.ndarray | None] = dict.fromkeys(
        ("band_share", "total", "to_others", "from_others", "net", "within_total")
    )
    if band_parts is not None:
        fm = frequency_measures(m["band_pairwise"])
        bandm = {key: fm[key] for key in bandm}
    jm: dict[str, np.ndarray | None] = dict.fromkeys(("from", "total", "to", "net"))
    if joint:
        table = joint_table(m["pairwise"] / 100.0, m["joint"])
        js = spillover_measures(table)
        jfrom = 100.0 * m["joint"]
        jm = {"from": jfrom, "total": jfrom.mean(axis=-1), "to": js["to_others"],
              "net": js["net"]}  # fmt: skip
    jb: dict[str, np.ndarray | None] = dict.fromkeys(("from", "total", "variance"))
    if "joint_band" in m:
        jbfrom = 100.0 * m["joint_band"]
        jb = {"from": jbfrom, "total": jbfrom.mean(axis=-1), "variance": m["joint_variance"]}
    ends = np.arange(first_row, first_row + D)
    readonly(
        ends, coefs, intercept, S_path, e_path, radius, m["pairwise"], g["total"],
        g["to_others"], g["from_others"], g["net"], m.get("band_pairwise"), *bandm.values(),
        *jm.values(), *jb.values(),
    )  # fmt: skip
    return TimeVaryingVAR(
        ends=ends, coefs=coefs, intercept=intercept, sigma_u=S_path, prediction_error=e_path,
        spectral_radius=radius, total_connectedness=g["total"], to_others=g["to_others"],
        from_others=g["from_others"], net=g["net"], pairwise=m["pairwise"], bands=band_parts,
        band_pairwise=m.get("band_pairwise"), band_share=bandm["band_share"],
        band_total=bandm["total"], band_to_others=bandm["to_others"],
        band_from_others=bandm["from_others"], band_net=bandm["net"],
        band_within_total=bandm["within_total"], truncation=H_f, grid=N_f,
        joint_from_others=jm["from"], joint_total=jm["total"], joint_to_others=jm["to"],
        joint_net=jm["net"], state=new_state, names=labels, lags=p, trend=trend_, horizon=H,
        kappa1=k1, kappa2=k2, covariance=cov_kind, training=train,
        dates=None if row_dates is None else row_dates[row_dates.shape[0] - D :],
        joint_band_from_others=jb["from"], joint_band_total=jb["total"], joint_band_variance=jb["variance"],
    )  # fmt: skip
