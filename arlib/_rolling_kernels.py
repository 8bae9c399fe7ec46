"""Batched kernels of the rolling-window VAR engine (see `_rolling.py` for the public entry).

Every kernel works on a batch of W windows at once, leading axis W, and trusts its inputs.
Dimensions: n series, p lags, d deterministic terms, k = d + n·p regressors per equation,
m = k + n columns of the augmented row z_t = [x_t', y_t']', N = n·p companion size.

The arithmetic follows the single-fit functions (`_estimate`, `_responses`, `_decompose`,
`_causality`) equation by equation; only the order of operations is arranged for batches:

- window sums of z_t z_t' by the van Herk / Gil-Werman block scheme (prefix and suffix sums
  inside blocks of the window length): every window sum is a sum of at most two partial sums of
  non-negative-definite terms, never a difference of two large running totals, so no precision is
  lost to cancellation, whatever the length of the history;
- one Cholesky factorisation of the augmented cross-product matrix gives the coefficients, the
  residual cross-products (without forming Y'Y − Y'X B, another cancellation avoided) and
  (X'X)^{-1};
- the spectral radius from repeated squaring of the companion matrix, a Rayleigh–Ritz step on the
  dominant invariant subspace it exposes, and a residual certificate (windows that fail it go to
  LAPACK's eigenvalue routine);
- moving-average recursions as batched matrix products.

References
----------
van Herk, M. (1992). A fast algorithm for local minimum and maximum filters on rectangular and
    octagonal kernels. Pattern Recognition Letters 13, 517–521 (the block prefix/suffix scheme).
Golub, G. H. and Van Loan, C. F. (2013). Matrix Computations, 4th ed. Johns Hopkins.
    Sec. 7.3.1 (power and orthogonal iteration), Sec. 7.3.2 (Rayleigh–Ritz), Sec. 4.2 (Cholesky).
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
    eq. 2.3.9 (MA recursion), Sec. 3.6.1 (Granger F test), Sec. 4.3 (information criteria).
"""

from __future__ import annotations

import numpy as np
from scipy import special

# ---------------------------------------------------------------------------------------------
# observations and window sums
# ---------------------------------------------------------------------------------------------


def usable_observations(finite_rows: np.ndarray, lags: int) -> np.ndarray:
    """(T,) bool: observation t is usable iff t >= p and rows t, t−1, ..., t−p are all finite."""
    T = finite_rows.shape[0]
    bad = np.concatenate([[0], np.cumsum(~finite_rows)])  # bad[t] = #non-finite rows < t
    ok = np.zeros(T, dtype=bool)
    if T > lags:
        t = np.arange(lags, T)
        ok[lags:] = bad[t + 1] - bad[t - lags] == 0
    return ok


def augmented_rows(
    ys: np.ndarray, rows: np.ndarray, lags: int, det: np.ndarray, use: np.ndarray
) -> np.ndarray:
    """(R, m) rows z_t = [det_t, y_{t−1}, ..., y_{t−p}, y_t] for t in `rows`; zero where not `use`.

    `ys` (T, n) is the (scaled) data with NaN allowed in unused rows; `det` (R, d).
    """
    R = rows.shape[0]
    n = ys.shape[1]
    d = det.shape[1]
    z = np.empty((R, d + n * (lags + 1)))
    z[:, :d] = det
    for lag in range(1, lags + 1):
        z[:, d + (lag - 1) * n : d + lag * n] = ys[rows - lag]
    z[:, d + lags * n :] = ys[rows]
    z[~use] = 0.0
    return z


def window_sums(terms: np.ndarray, starts: np.ndarray, length: int) -> np.ndarray:
    """Σ_{t=a}^{a+L−1} terms[t] for each a in `starts` (relative row indices), shape (W, ...).

    van Herk / Gil-Werman scheme: cut the rows into blocks of L starting at starts[0]; a window
    starting at position i of block b is suffix_b(i) + prefix_{b+1}(i−1). Each window sum adds at
    most two partial sums (no subtraction, so no cancellation). Cost: two cumulative sums over the
    rows plus one addition per window.
    """
    base = int(starts[0])
    rel = starts - base
    nblocks = int(rel[-1]) // length + 2
    tail = terms.shape[1:]
    blocks = np.zeros((nblocks * length, *tail))
    avail = min(terms.shape[0] - base, nblocks * length)
    blocks[:avail] = terms[base : base + avail]
    blocks = blocks.reshape(nblocks, length, *tail)
    prefix = np.cumsum(blocks, axis=1)  # prefix[b, i] = Σ blocks[b, 0..i]
    suffix = np.cumsum(blocks[:, ::-1], axis=1)[:, ::-1]  # suffix[b, i] = Σ blocks[b, i..L−1]
    b, i = np.divmod(rel, length)
    out = suffix[b, i]
    inner = i > 0
    out[inner] += prefix[b[inner] + 1, i[inner] - 1]
    return out


# ---------------------------------------------------------------------------------------------
# least squares from the augmented cross-product matrix
# ---------------------------------------------------------------------------------------------


def cholesky_batch(G: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower Cholesky factors of a batch (W, m, m) and a (W,) bool of success.

    LAPACK on the whole batch; if any matrix is not numerically positive definite the batch is
    retried one matrix at a time so the failures can be flagged (their factor is NaN).
    """
    try:
        return np.linalg.cholesky(G), np.ones(G.shape[0], dtype=bool)
    except np.linalg.LinAlgError:
        out = np.full_like(G, np.nan)
        ok = np.zeros(G.shape[0], dtype=bool)
        for w in range(G.shape[0]):
            try:
                out[w] = np.linalg.cholesky(G[w])
                ok[w] = True
            except np.linalg.LinAlgError:
                pass
        return out, ok


def triangular_inverse(L: np.ndarray) -> np.ndarray:
    """Inverse of a batch of lower-triangular matrices (W, k, k), blocked with matrix products.

    [[L11, 0], [L21, L22]]^{-1} = [[L11^{-1}, 0], [−L22^{-1} L21 L11^{-1}, L22^{-1}]],
    recursing on halves down to blocks of 8, which are inverted by column substitution.
    """
    k = L.shape[-1]
    if k <= 8:
        out = np.zeros_like(L)
        diag = np.diagonal(L, axis1=-2, axis2=-1)
        for j in range(k):  # column j of L^{-1}: forward substitution on e_j
            out[..., j, j] = 1.0 / diag[..., j]
            for i in range(j + 1, k):
                acc = np.einsum("...r,...r->...", L[..., i, j:i], out[..., j:i, j])
                out[..., i, j] = -acc / diag[..., i]
        return out
    h = k // 2
    inv11 = triangular_inverse(L[..., :h, :h])
    inv22 = triangular_inverse(L[..., h:, h:])
    out = np.zeros_like(L)
    out[..., :h, :h] = inv11
    out[..., h:, h:] = inv22
    out[..., h:, :h] = -(inv22 @ (L[..., h:, :h] @ inv11))
    return out


def solve_grams(G: np.ndarray, k: int) -> dict[str, np.ndarray]:
    """Least squares for a batch of augmented cross-product matrices G (W, m, m).

    With G = L L' (L lower, blocks 11: regressors k×k, 21: series n×k, 22: n×n)::

        B' = L21 L11^{-1}            (n, k)  coefficients, row i = equation i
        Û'Û = L22 L22'               (n, n)  residual cross-products
        (X'X)^{-1} = L11^{-T} L11^{-1}
        log det Û'Û = 2 Σ log diag L22

    Returns arrays "coef_t", "sse", "gram_inv", "logdet_sse", "cond" (1-norm condition number of
    the column-equilibrated X'X) and bool "ok" (Cholesky succeeded with positive pivots).
    """
    L, ok = cholesky_batch(G)
    L11 = L[:, :k, :k]
    L21 = L[:, k:, :k]
    L22 = L[:, k:, k:]
    inv = triangular_inverse(L11) if k else np.zeros((G.shape[0], 0, 0))
    coef_t = L21 @ inv
    sse = L22 @ np.swapaxes(L22, -1, -2)
    gram_inv = np.swapaxes(inv, -1, -2) @ inv
    d22 = np.diagonal(L22, axis1=-2, axis2=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        logdet = 2.0 * np.log(d22).sum(axis=-1)
        # κ_1(D X'X D), D = diag(X'X)^{-1/2}: the condition of the equilibrated cross-products
        dxx = np.sqrt(np.diagonal(G[:, :k, :k], axis1=-2, axis2=-1))
        gt = G[:, :k, :k] / (dxx[:, :, None] * dxx[:, None, :])
        gti = gram_inv * (dxx[:, :, None] * dxx[:, None, :])
        cond = np.abs(gt).sum(axis=-2).max(axis=-1) * np.abs(gti).sum(axis=-2).max(axis=-1)
        # residual covariance conditioning proxy: ratio of Cholesky pivots of Û'Û
        piv = (d22.min(axis=-1) / d22.max(axis=-1)) ** 2 if d22.shape[-1] else np.ones(len(G))
    ok &= np.isfinite(cond) & np.isfinite(logdet)
    return {
        "coef_t": coef_t,
        "sse": sse,
        "gram_inv": gram_inv,
        "logdet_sse": logdet,
        "cond": np.where(ok, cond, np.inf),
        "sse_pivot": piv,
        "ok": ok,
    }


def nested_sse(L_y: np.ndarray, L22: np.ndarray, k_of: list[int]) -> list[np.ndarray]:
    """Residual cross-products of the nested regressions on the first k_p regressors.

    With the Cholesky factor of the augmented cross-products ordered [x_1..x_K, y], the y rows
    are [l_1 .. l_K | L22]; regressing y on x_1..x_{k_p} leaves Σ_{c >= k_p} l_c l_c' + L22 L22'
    (a sum of non-negative terms). `L_y` (W, n, K); returns one (W, n, n) array per k_p.
    """
    out = []
    base = L22 @ np.swapaxes(L22, -1, -2)
    for kp in k_of:
        tail = L_y[:, :, kp:]
        out.append(base + tail @ np.swapaxes(tail, -1, -2))
    return out


# ---------------------------------------------------------------------------------------------
# spectral radius of the companion matrix
# ---------------------------------------------------------------------------------------------

_SKETCH_SEED = 20240611


def companion_batch(acat: np.ndarray, n: int, p: int) -> np.ndarray:
    """(W, n·p, n·p) companion matrices from acat (W, n, n·p) = [A_1 ... A_p]."""
    W = acat.shape[0]
    N = n * p
    C = np.zeros((W, N, N))
    C[:, :n, :] = acat
    if p > 1:
        C[:, n:, : N - n] = np.eye(N - n)
    return C


def spectral_radius_batch(
    acat: np.ndarray,
    n: int,
    p: int,
    *,
    squarings: int = 10,
    max_dim: int = 4,
    rank_tol: float = 1e-9,
    resid_tol: float = 1e-11,
) -> tuple[np.ndarray, np.ndarray]:
    """Largest eigenvalue modulus of each companion matrix, and a (W,) bool "certified".

    Method (Golub & Van Loan 2013, Secs. 7.3.1–7.3.2): Y = C^m / ||C^m|| for m = 2^squarings by
    repeated squaring (normalised each step), so Y's range is the dominant invariant subspace up
    to a contamination (|λ_{d+1}| / |λ_1|)^m. A sketch Y Ω (Ω fixed Gaussian, d_max + 1 columns)
    orthonormalised by Gram–Schmidt reveals its dimension d <= d_max (columns whose residual
    falls below `rank_tol` are dependent); the Ritz matrix B = Q' C Q (d×d) then carries the
    dominant eigenvalues, ρ = max |eig(B)| (closed form for d <= 2). Certificate: the residual
    ||C Q − Q B||_F <= resid_tol · ||C||_F (so eig(B) are eigenvalues of C to that accuracy) and
    the rank test passed. Windows failing either are computed by LAPACK (`np.linalg.eigvals` on
    the companion matrix, as `fit_var` does); the bool marks which path each window took.
    """
    W = acat.shape[0]
    N = n * p
    out = np.empty(W)
    cert = np.zeros(W, dtype=bool)
    if W == 0:
        return out, cert
    C = companion_batch(acat, n, p)
    if N <= max_dim + 1:
        return np.abs(np.linalg.eigvals(C)).max(axis=-1), cert
    cnorm = np.sqrt(np.einsum("wij,wij->w", C, C))
    Y = C / cnorm[:, None, None]
    good = np.ones(W, dtype=bool)
    for _ in range(squarings):
        Y = Y @ Y
        s = np.sqrt(np.einsum("wij,wij->w", Y, Y))
        fine = np.isfinite(s) & (s > 1e-280)
        good &= fine
        s[~fine] = 1.0
        Y /= s[:, None, None]
    dm = max_dim
    omega = np.random.default_rng(_SKETCH_SEED).standard_normal((N, dm + 1))
    omega /= np.linalg.norm(omega, axis=0)
    S = Y @ omega  # (W, N, dm+1)
    Q = np.zeros((W, N, dm))
    dim = np.zeros(W, dtype=np.int64)
    growing = good.copy()
    for j in range(dm + 1):
        v = S[:, :, j]
        if j:
            Qj = Q[:, :, :j]
            for _ in range(2):  # classical Gram–Schmidt, twice for orthogonality
                v = v - np.einsum("wnj,wj->wn", Qj, np.einsum("wnj,wn->wj", Qj, v))
        nv = np.sqrt(np.einsum("wn,wn->w", v, v))
        new = growing & (nv > rank_tol)
        if j == dm:
            good &= ~new  # d > d_max: not resolved by this sketch
            break
        Q[new, :, j] = v[new] / nv[new, None]
        dim += new
        growing &= new
    good &= dim > 0
    # Ritz matrix B = Q' C Q using the companion structure: C Q = [acat @ Q ; Q shifted by n]
    CQ = np.empty_like(Q)
    CQ[:, :n, :] = acat @ Q
    CQ[:, n:, :] = Q[:, : N - n, :]
    B = np.swapaxes(Q, -1, -2) @ CQ
    R = CQ - Q @ B
    res = np.sqrt(np.einsum("wij,wij->w", R, R))
    good &= res <= resid_tol * cnorm
    rho = np.full(W, np.nan)
    one = good & (dim == 1)
    rho[one] = np.abs(B[one, 0, 0])
    two = good & (dim == 2)
    if two.any():
        a, b, c, e = B[two, 0, 0], B[two, 0, 1], B[two, 1, 0], B[two, 1, 1]
        half = 0.5 * (a - e)
        disc = half * half + b * c
        det = a * e - b * c
        scale = half * half + np.abs(b * c)
        real = disc >= 0
        r2 = np.where(real, 0.5 * np.abs(a + e) + np.sqrt(np.abs(disc)), np.sqrt(np.abs(det)))
        # near-repeated eigenvalues (disc ≈ 0) or cancelling determinants: leave to LAPACK
        sharp = (np.abs(disc) > 1e-6 * scale) & (
            real | (np.abs(det) > 1e-6 * (np.abs(a * e) + np.abs(b * c)))
        )
        rho[two] = r2
        idx = np.flatnonzero(two)
        good[idx[~sharp]] = False
    many = good & (dim > 2)
    for dd in range(3, dm + 1):
        sel = many & (dim == dd)
        if sel.any():
            rho[sel] = np.abs(np.linalg.eigvals(B[sel, :dd, :dd])).max(axis=-1)
    cert = good
    out[good] = rho[good]
    if (~good).any():
        out[~good] = np.abs(np.linalg.eigvals(C[~good])).max(axis=-1)
    return out, cert


# ---------------------------------------------------------------------------------------------
# moving-average recursions, decompositions, Granger tests
# ---------------------------------------------------------------------------------------------


def propagate(acat: np.ndarray, x0: np.ndarray, steps: int) -> np.ndarray:
    """X_h = Σ_{l=1}^{min(h,p)} A_l X_{h−l}, X_0 = x0, for h = 0..steps: shape (W, steps+1, n, c).

    With x0 = I this is Φ_h (Lütkepohl 2005, eq. 2.3.9); with x0 = M it is Φ_h M (responses to
    the shocks whose impact matrix is M). acat (W, n, n·p) = [A_1 ... A_p].
    """
    W, n, N = acat.shape
    p = N // n
    c = x0.shape[-1]
    # newest first: buf[:, q] holds X_h with q = steps − h + (p − 1); X_{<0} = 0 sits after X_0
    buf = np.zeros((W, steps + p, n, c))
    buf[:, steps] = x0
    for h in range(1, steps + 1):
        q = steps - h
        hist = buf[:, q + 1 : q + 1 + p].reshape(W, N, c)  # [X_{h−1}; ...; X_{h−p}]
        np.matmul(acat, hist, out=buf[:, q])
    return buf[:, steps::-1] if steps else buf[:, :1]


def f_survival(f: np.ndarray, df1: np.ndarray | int, df2: np.ndarray | int) -> np.ndarray:
    """Upper-tail probability of F(df1, df2) at f (NaN where f is NaN).

    For even df1 = 2r the regularised incomplete beta has a finite sum:
    P(F > f) = x^{df2/2} Σ_{j<r} Γ(df2/2 + j) / (Γ(df2/2) j!) (1 − x)^j, x = df2 / (df2 + df1 f)
    (Abramowitz & Stegun 1964, 26.6.4); odd df1 use scipy's incomplete beta (`special.fdtrc`).
    """
    f = np.asarray(f, dtype=np.float64)
    d1 = np.broadcast_to(np.asarray(df1, dtype=np.float64), f.shape)
    d2 = np.broadcast_to(np.asarray(df2, dtype=np.float64), f.shape)
    out = np.full(f.shape, np.nan)
    valid = np.isfinite(f)
    even = valid & (d1 % 2 == 0)
    if even.any():
        fe, a, b = np.maximum(f[even], 0.0), d1[even], d2[even]
        x = b / (b + a * fe)
        half_b = 0.5 * b
        term = np.ones_like(fe)
        total = np.ones_like(fe)
        one_minus = a * fe / (b + a * fe)
        for j in range(1, int(a.max()) // 2):
            term = term * (half_b + j - 1) / j * one_minus
            total = total + np.where(j < a / 2, term, 0.0)
        out[even] = np.exp(half_b * np.log(x)) * total
    odd = valid & ~even
    if odd.any():
        out[odd] = special.fdtrc(d1[odd], d2[odd], np.maximum(f[odd], 0.0))
    return out


def granger_f(
    coef_t: np.ndarray, gram_inv: np.ndarray, sigma_diag: np.ndarray, n: int, p: int, d: int
) -> np.ndarray:
    """F statistics (W, n, n) for "series j does not Granger-cause series i" (diagonal NaN).

    For one caused and one causing series the restriction picks the p coefficients b_ij of
    equation i on lags of j, and C((X'X)^{-1} ⊗ Σ̂_u)C' = σ_ii V_j with V_j the p×p block of
    (X'X)^{-1} for those regressors, so (Lütkepohl 2005, eq. 3.6.5 divided by J = p)

        F_ij = b_ij' V_j^{-1} b_ij / (p σ_ii).

    V_j is factored once per window and series by a batched Cholesky over the p×p blocks.
    """
    W = coef_t.shape[0]
    lagblock = gram_inv[:, d:, d:].reshape(W, p, n, p, n)
    V = np.diagonal(lagblock, axis1=2, axis2=4)  # (W, p, p, n): V[w, l, m, j]
    V = np.moveaxis(V, -1, 1)  # (W, n_j, p, p)
    b = coef_t[:, :, d:].reshape(W, n, p, n)  # b[w, i, l, j]
    b = np.moveaxis(b, -1, 2)  # (W, n_i, n_j, p)
    # Cholesky of V (W, n_j, p, p), column by column (p is small)
    Lc = np.zeros_like(V)
    for j in range(p):
        s = V[..., j, j] - np.einsum("...r,...r->...", Lc[..., j, :j], Lc[..., j, :j])
        Lc[..., j, j] = np.sqrt(s)
        for i in range(j + 1, p):
            t = V[..., i, j] - np.einsum("...r,...r->...", Lc[..., i, :j], Lc[..., j, :j])
            Lc[..., i, j] = t / Lc[..., j, j]
    # forward substitution L z = b, broadcast over caused series i
    Lb = Lc[:, None]  # (W, 1, n_j, p, p)
    z = np.zeros_like(b)
    for i in range(p):
        acc = b[..., i] - np.einsum("...r,...r->...", Lb[..., i, :i], z[..., :i])
        z[..., i] = acc / Lb[..., i, i]
    quad = np.einsum("wijl,wijl->wij", z, z)
    F = quad / (p * sigma_diag[:, :, None])
    idx = np.arange(n)
    F[:, idx, idx] = np.nan
    return F


def information_criteria_batch(
    logdet_ml: np.ndarray, nobs: np.ndarray, n: int, k: int | np.ndarray
) -> dict[str, np.ndarray]:
    """AIC, BIC, HQ, FPE per window, the convention of `_estimate.information_criteria`.

    m = n·k free coefficients (intercepts and trend slopes included):
    AIC = log det Σ̃ + 2m/T, BIC = log det Σ̃ + m log T / T, HQ = log det Σ̃ + 2m log log T / T,
    FPE = ((T + k)/(T − k))^n det Σ̃ (Lütkepohl 2005, eqs. 4.3.1, 4.3.2, 4.3.8, 4.3.9).
    """
    T = nobs.astype(np.float64)
    m = n * np.asarray(k, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return {
            "aic": logdet_ml + 2.0 * m / T,
            "bic": logdet_ml + np.log(T) * m / T,
            "hq": logdet_ml + 2.0 * np.log(np.log(T)) * m / T,
            "fpe": ((T + k) / (T - k)) ** n * np.exp(logdet_ml),
        }
