"""Batched kernels of the rolling-window VAR engine (see `_rolling.py` for the public entry).

Every kernel works on a batch of W windows at once, leading axis W, and trusts its inputs.
Dimensions: n series, p lags, d deterministic terms, k = d + n·p regressors per equation,
m = k + n columns of the augmented row z_t = [x_t', y_t']', N = n·p companion size.

The arithmetic follows the single-fit functions (`_estimate`, `_responses`, `_decompose`,
`_causality`) equation by equation; only the order of operations is arranged for batches:

- window sums of z_t z_t' by the van Herk / Gil-Werman block scheme: a suffix sum and a prefix
  sum meeting at an anchor row of a fixed grid, each accumulated in a fixed order, so a window's
  sum is a sum of non-negative-definite terms (never a difference of two large running totals:
  no cancellation, whatever the length of the history) and the same bit for bit whichever other
  windows are computed with it;
- one Cholesky factorisation of the augmented cross-product matrix, blocked as regressor block
  and residual Schur complement (two small LAPACK factorisations joined by batched products),
  gives the coefficients, the residual cross-products (without forming Y'Y − Y'X B, another
  cancellation avoided) and (X'X)^{-1};
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

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

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


def packed_products(z: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Lower triangles of the outer products z_t z_t', packed row by row: (R, m(m+1)/2).

    Entry order is ``np.tril_indices(m)``: (0,0), (1,0), (1,1), (2,0), ...
    """
    R, m = z.shape
    if out is None:
        out = np.empty((R, m * (m + 1) // 2))
    off = 0
    for i in range(m):
        np.multiply(z[:, i : i + 1], z[:, : i + 1], out=out[:R, off : off + i + 1])
        off += i + 1
    return out


def outer_products(z: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """(R, m, m) outer products z_t z_t' (each entry one rounded product)."""
    return np.einsum("ti,tj->tij", z, z, out=out)


def accumulate_rows(x: np.ndarray, reverse: bool = False) -> None:
    """In place, x[i] ← x[i−1] + x[i] (x[i] ← x[i+1] + x[i] with `reverse`) along axis 0: a
    running sum in a fixed order, one contiguous row at a time (numpy's cumsum along a long
    leading axis walks memory column by column and is about twice as slow)."""
    R = x.shape[0]
    if reverse:
        for i in range(R - 2, -1, -1):
            np.add(x[i + 1], x[i], out=x[i])
    else:
        for i in range(1, R):
            np.add(x[i - 1], x[i], out=x[i])


def anchored_window_sums(
    z: np.ndarray, first: np.ndarray, cut: int, length: int, out: np.ndarray | None = None
) -> np.ndarray:
    """Σ_{t=a}^{a+L−1} z_t z_t' for each a in `first` (increasing row indices of z, all with
    cut − L <= a < cut): (W, m, m), both triangles filled; written into `out` if given.

    Every window of length L starting in rows cut − L .. cut − 1 contains row cut − 1, and its
    sum is split there: the suffix Σ_{t=a}^{cut−1}, accumulated from row cut − 1 backwards, plus
    the prefix Σ_{t=cut}^{a+L−1}, accumulated from row `cut` forwards. The additions a window's
    sum goes through are fixed by its own rows and the anchor alone, whichever other windows are
    computed with it, so every sum is reproducible bit for bit; and each adds up one window's
    worth of non-negative-definite terms, no running total over the history is differenced
    (the block scheme of van Herk 1992 / Gil & Werman 1993, one block per anchor).
    """
    W = first.shape[0]
    m = z.shape[1]
    lo = int(first[0])
    hi = int(first[-1]) + length
    G = np.empty((W, m, m)) if out is None else out
    ia = first - lo
    ib = first + length - 1 - cut  # −1 only for a = cut − L (the window ends at row cut − 1)
    steady = int(ia[-1]) == W - 1  # consecutive starts (step 1)
    # suffix sums Σ_{t=lo+i}^{cut−1}, in G itself when every position is a window's start
    S = G if steady and lo + W == cut else np.empty((cut - lo, m, m))
    outer_products(z[lo:cut], out=S)
    accumulate_rows(S, reverse=True)
    if S is not G:
        G[:] = S[:W] if steady else S[ia]
    if hi > cut:
        P = outer_products(z[cut:hi])
        accumulate_rows(P)  # prefix sums Σ_{t=cut}^{cut+j}
        s = 1 if ib[0] < 0 else 0
        if steady:
            j0 = int(ib[s])
            G[s:] += P[j0 : j0 + W - s]
        else:
            G[s:] += P[ib[s:]]
    return G


def running_block_sums(
    z: np.ndarray, row0: int, ends: np.ndarray, block: int, carry: np.ndarray
) -> tuple[np.ndarray, int, np.ndarray]:
    """Σ_{t<=e} z_t z_t' for each e in `ends` (increasing absolute rows), lower triangles
    (W, m, m). `z` holds rows row0 .. ends[-1] (row0 a multiple of `block`) and `carry` the packed
    sum of every row before row0.

    Rows are cut into blocks of `block` rows at fixed absolute multiples; within a block the
    products are accumulated forwards, and block totals are added to the carried sum one after
    another, so the sum for an end e is S_j + pre_j(e) computed the same way whichever ends are
    requested together (reproducible bit for bit). Only additions: no cancellation.

    Returns (G, row0 of the last end's block, carried sum at that row) to continue from.
    """
    m = z.shape[1]
    R = z.shape[0]
    nb = -(-R // block)
    buf = np.zeros((nb * block, m * (m + 1) // 2))
    packed_products(z, out=buf)
    pre = buf.reshape(nb, block, -1)
    np.cumsum(pre, axis=1, out=pre)
    S = np.empty((nb, pre.shape[-1]))
    S[0] = carry
    for j in range(1, nb):
        np.add(S[j - 1], pre[j - 1, block - 1], out=S[j])
    rel = ends - row0
    jb, ib = np.divmod(rel, block)
    G = np.zeros((ends.shape[0], m, m))
    off = 0
    for r in range(m):
        sl = slice(off, off + r + 1)
        np.add(S[jb, sl], pre[jb, ib, sl], out=G[:, r, : r + 1])
        off += r + 1
    last = int(jb[-1])
    return G, row0 + last * block, S[last].copy()


# ---------------------------------------------------------------------------------------------
# least squares from the augmented cross-product matrix
# ---------------------------------------------------------------------------------------------


def cholesky_batch(G: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower Cholesky factors of a batch (W, m, m) (LAPACK reads the lower triangle only) and a
    (W,) bool of success. If any matrix is not numerically positive definite the batch is
    retried one matrix at a time so the failures can be flagged (their factor is NaN)."""
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


def _tri_inv_small(L: np.ndarray) -> np.ndarray:
    """Inverses of small lower-triangular blocks (W, b, b), row by row:
    X_i = (e_i − L_{i,<i} X_{<i}) / L_ii."""
    b = L.shape[-1]
    X = np.zeros_like(L)
    for i in range(b):
        if i:
            X[:, i, :i] = -np.einsum("wr,wrc->wc", L[:, i, :i], X[:, :i, :i])
        X[:, i, i] += 1.0
        X[:, i, : i + 1] /= L[:, i, i, None]
    return X


def triangular_inverse(L: np.ndarray, size: int = 8) -> np.ndarray:
    """L^{-1} (W, k, k) for lower-triangular L by block forward substitution:
    X_I = L_II^{-1} (E_I − L_{I,<I} X_{<I}), diagonal blocks of width <= `size`."""
    k = L.shape[-1]
    X = np.zeros_like(L)
    for j0 in range(0, k, size):
        j1 = min(j0 + size, k)
        Ld_inv = _tri_inv_small(L[:, j0:j1, j0:j1])
        X[:, j0:j1, j0:j1] = Ld_inv
        if j0:
            X[:, j0:j1, :j0] = -(Ld_inv @ (L[:, j0:j1, :j0] @ X[:, :j0, :j0]))
    return X


def solve_grams(
    G: np.ndarray, k: int, m: int, centred: int, *, factor: bool = True
) -> dict[str, np.ndarray]:
    """Least squares for a batch of augmented cross-product matrices given as lower triangles
    (W, m, m), columns ordered [deterministic terms, lagged series | series].

    With G = L L' (L lower, blocks 11: regressors k×k, 21: series n×k, 22: n×n)::

        B' = L21 L11^{-1}            (n, k)  coefficients, row i = equation i
        Û'Û = L22 L22'               (n, n)  residual cross-products, no cancellation
        (X'X)^{-1} = L11^{-T} L11^{-1}
        log det Û'Û = 2 Σ log diag L22

    Condition measures (all bounds of the form trace(M) trace(M^{-1}) >= cond_2(M)):

    - "cond" κ = k' Σ_i VIF_i over the k' = k − `centred` regressors after the first `centred`
      (1 when column 0 is the constant: those regressors are then centred), VIF_i = C_ii (C^{-1})_ii
      for C = X̃'X̃ the cross-products of the centred regressors: trace(R) trace(R^{-1}) of their
      correlation matrix R, between cond_2(R) and k'² cond_2(R). It depends on the window's rows
      only — not on where the columns were shifted to before the products were formed: C is the
      Schur complement L̃ L̃' (L̃ = rows/columns >= `centred` of L11) and C^{-1} the trailing block
      of (X'X)^{-1} (Golub & Van Loan 2013, Sec. 4.2).
    - "cond_work" the same bound for X'X as factorised (working coordinates, constant included):
      what the rounding of this factorisation depends on.
    - "sse_cond" trace(R) trace(R^{-1}) >= cond_2(R) for the residual correlation matrix
      R = D^{-1/2} Û'Û D^{-1/2} (D = diag Û'Û): scale-free, like every other measure here.
    - "fit_cond" max_i (Y'Y)_ii / (Û'Û)_ii in working coordinates, 1/(1 − R_i²) of the worst
      equation (R² about the working shift): the residual cross-products come out of the
      Schur complement Y'Y − Y'X (X'X)^{-1} X'Y with a relative error of about this times 1e-16.

    Returns "coef_t" (W, n, k), "sse" (W, n, n), "inv" = L11^{-1} (W, k, k), "inv_diag" (W, k)
    the diagonal of (X'X)^{-1}, "logdet_sse", "cond", "cond_work", "sse_cond", "fit_cond" (inf
    where the factorisation failed), the blocks "L21" (W, n, k) and "L22" (W, n, n), bool "ok",
    and with `factor` (the default) the whole factor "L" (W, m, m).
    """
    gdiag = np.diagonal(G, axis1=1, axis2=2)[:, :k].copy()
    ydiag = np.diagonal(G, axis1=1, axis2=2)[:, k:].copy()
    n = m - k
    W = G.shape[0]
    # blocked factorisation (Golub & Van Loan 2013, Sec. 4.2.9): L11 = chol(G11),
    # L21 = G21 L11^{-T}, L22 = chol(G22 − L21 L21'); two small LAPACK factorisations and
    # batched products instead of one larger factorisation (LAPACK's small-matrix overhead
    # grows steeply with size); every step acts on each window alone
    L11, ok = cholesky_batch(G[:, :k, :k])
    inv = triangular_inverse(L11)
    L21 = G[:, k:, :k] @ np.swapaxes(inv, 1, 2)
    schur = G[:, k:, k:] - L21 @ np.swapaxes(L21, 1, 2)  # lower triangle read
    L22, ok22 = cholesky_batch(schur)
    ok &= ok22
    coef_t = L21 @ inv
    sse = L22 @ np.swapaxes(L22, 1, 2)
    d22 = np.diagonal(L22, axis1=1, axis2=2)
    c = centred
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        logdet = 2.0 * np.log(d22).sum(axis=-1)
        inv_diag = _sum_squares(inv, axis=1)  # ((X'X)^{-1})_ii = Σ_r (L^{-1})_ri²
        cond_work = k * (gdiag * inv_diag).sum(axis=-1)
        Lc = L11[:, c:, c:]
        cdiag = _sum_squares(Lc, axis=2)  # C_ii = Σ_{c'} L̃_ic'²
        cond = (k - c) * (cdiag * inv_diag[:, c:]).sum(axis=-1)
        # residual correlation matrix R = D^{-1/2} Û'Û D^{-1/2}: trace(R) trace(R^{-1}) =
        # n Σ_i (Û'Û)_ii ((Û'Û)^{-1})_ii, from the rows of L22 and the columns of L22^{-1}
        sse_diag = _sum_squares(L22, axis=2)
        sse_cond = n * (sse_diag * _sum_squares(triangular_inverse(L22), axis=1)).sum(axis=-1)
        # Σ_t y_ti² / Û'Û_ii (working coordinates): 1/(1 − R²) of each equation, the factor by
        # which the Schur complement L22 L22' = Y'Y − Y'X (X'X)^{-1} X'Y cancels digits
        fit_cond = (ydiag / sse_diag).max(axis=-1)
    ok &= np.isfinite(cond_work) & np.isfinite(logdet) & np.isfinite(coef_t).all(axis=(1, 2))
    ok &= np.isfinite(sse_cond) & np.isfinite(fit_cond)
    bad = ~ok
    for arr in (cond, cond_work, sse_cond, fit_cond):
        arr[bad] = np.inf
    out = {
        "coef_t": coef_t,
        "sse": sse,
        "inv": inv,
        "inv_diag": inv_diag,
        "logdet_sse": logdet,
        "cond": cond,
        "cond_work": cond_work,
        "sse_cond": sse_cond,
        "fit_cond": fit_cond,
        "ok": ok,
        "L21": L21,
        "L22": L22,
    }
    if factor:
        L = np.zeros((W, m, m))
        L[:, :k, :k] = L11
        L[:, k:, :k] = L21
        L[:, k:, k:] = L22
        out["L"] = L
    return out


def _sum_squares(x: np.ndarray, axis: int | tuple[int, ...]) -> np.ndarray:
    """Σ x² over `axis` of a (W, a, b) array, in one pass (einsum, no squared temporary)."""
    axes = {axis} if isinstance(axis, int) else set(axis)
    keep = "w" + "".join(c for i, c in ((1, "a"), (2, "b")) if i not in axes)
    return np.einsum(f"wab,wab->{keep}", x, x)


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


def balanced(acat: np.ndarray, sigma: np.ndarray, p: int) -> np.ndarray:
    """D^{-1} A_l D for every lag, D = diag of powers of two nearest each series' residual
    standard deviation: a similarity (same eigenvalues) computed without rounding, which keeps
    the companion matrix's entries on one scale for the spectral radius kernel."""
    var = np.diagonal(sigma, axis1=1, axis2=2)
    with np.errstate(divide="ignore", invalid="ignore"):
        e = np.rint(0.5 * np.log2(var))
    e = np.clip(np.nan_to_num(e), -400, 400).astype(np.int64)
    s = np.ldexp(1.0, e)  # (W, n)
    ratio = s[:, None, :] / s[:, :, None]  # [w, i, j] = s_j / s_i
    W, n = s.shape
    return (acat.reshape(W, n, p, n) * ratio[:, :, None, :]).reshape(W, n, n * p)


def _sketch(N: int, columns: int) -> np.ndarray:
    """The fixed Gaussian test matrix Ω (N, columns) with unit columns, made once per shape
    (a pure function of its shape and `_SKETCH_SEED`)."""
    omega = _SKETCHES.get((N, columns))
    if omega is None:
        omega = np.random.default_rng(_SKETCH_SEED).standard_normal((N, columns))
        omega /= np.linalg.norm(omega, axis=0)
        omega.flags.writeable = False
        _SKETCHES[(N, columns)] = omega
    return omega


_SKETCHES: dict[tuple[int, int], np.ndarray] = {}


def spectral_radius_batch(
    acat: np.ndarray,
    n: int,
    p: int,
    *,
    squarings: int = 12,
    max_dim: int | None = None,
    rank_tol: float = 1e-12,
    resid_tol: float = 1e-12,
    timer: Any = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Largest eigenvalue modulus of each companion matrix, and a (W,) bool "certified".

    `timer` (optional, e.g. the rolling engine's stage timer) receives the time of the three
    parts as "spectral radius: squarings", ": Ritz and certificate", ": LAPACK fallback".

    Method (Golub & Van Loan 2013, Secs. 7.3.1–7.3.2):

    1. Y = C^m / ||C^m||_F, m = 2^squarings, by repeated squaring (rescaled every third step).
       An eigenvalue λ_j appears in Y with weight about (|λ_j| / ρ)^m, so Y's range is the
       dominant invariant subspace plus directions of weight below `rank_tol`.
    2. A sketch Y Ω (Ω a fixed Gaussian N × (d_max + 1), d_max = max(8, N // 5) by default:
       larger companions crowd more eigenvalues near the top) orthonormalised by Gram–Schmidt
       (twice) gives Q (N × d): columns are kept while their residual exceeds `rank_tol`; a
       (d_max+1)-th significant column means the subspace is not resolved (→ fallback).
    3. Rayleigh–Ritz: B = Q' C Q (d × d); θ = the eigenvalue of B of largest modulus with
       eigenvector s (closed form for d <= 2). Weakly represented directions in Q may be
       inaccurate, but the dominant directions are resolved to rounding level, so θ is accurate.
    4. Certificate: the Ritz pair's residual ||C Q s − θ Q s|| / ||s|| <= resid_tol · ||C||_F
       makes θ an eigenvalue of a matrix within that distance of C; any eigenvalue larger than
       |θ| would carry more weight in Y than θ's own and so would be among the Ritz values.

    Windows failing a test (unresolved subspace, large residual, a near-double dominant pair
    whose 2×2 closed form loses digits) are computed by LAPACK (`np.linalg.eigvals`, as
    `fit_var` does).
    """
    W = acat.shape[0]
    N = n * p
    if W == 0:
        return np.empty(0), np.zeros(0, dtype=bool)
    if N <= 4:
        return np.abs(np.linalg.eigvals(companion_batch(acat, n, p))).max(axis=-1), np.zeros(
            W, dtype=bool
        )
    part = timer if timer is not None else _no_timer
    with part("spectral radius: squarings"):
        Y, good = _companion_power(acat, n, p, squarings)
    with part("spectral radius: Ritz and certificate"):
        rho, good = _ritz_step(Y, acat, n, p, good, max_dim, rank_tol, resid_tol)
    with part("spectral radius: LAPACK fallback"):
        if (~good).any():
            C = companion_batch(acat[~good], n, p)
            rho[~good] = np.abs(np.linalg.eigvals(C)).max(axis=-1)
    return rho, good


@contextmanager
def _no_timer(name: str) -> Iterator[None]:
    yield


def _companion_power(
    acat: np.ndarray, n: int, p: int, squarings: int
) -> tuple[np.ndarray, np.ndarray]:
    """Step 1 of `spectral_radius_batch`: (Y (W, N, N) ∝ C^(2^squarings) of unit Frobenius
    norm, (W,) bool good = no overflow or underflow on the way)."""
    W = acat.shape[0]
    N = n * p
    # C² without forming C: top rows A_1 [A_1..A_p] + [A_2..A_p, 0], then rows of C shifted down
    if p == 1:
        Y = acat @ acat
    else:
        Y = np.zeros((W, N, N))
        np.matmul(acat[:, :, :n], acat, out=Y[:, :n, :])
        Y[:, :n, : N - n] += acat[:, :, n:]
        Y[:, n : 2 * n, :] = acat
        if p > 2:
            Y[:, 2 * n :, : N - 2 * n] = np.eye(N - 2 * n)
    good = np.ones(W, dtype=bool)
    for i in range(1, squarings + 1):  # Y ∝ C^(2^i)
        if i > 1:
            Y = Y @ Y
        # rescale to ||Y||_F = 1 every third step: in between ||Y|| can only fall (to no less
        # than ρ(Y)^8 of a unit-norm Y), never overflow
        if i % 3 == 1 or i == squarings:
            s = np.sqrt(np.einsum("wij,wij->w", Y, Y))
            fine = np.isfinite(s) & (s > 1e-250)
            good &= fine
            s[~fine] = 1.0
            Y *= (1.0 / s)[:, None, None]
    return Y, good


def _ritz_step(
    Y: np.ndarray, acat: np.ndarray, n: int, p: int, good: np.ndarray, max_dim: int | None,
    rank_tol: float, resid_tol: float,
) -> tuple[np.ndarray, np.ndarray]:  # fmt: skip
    """Steps 2–4 of `spectral_radius_batch`: (|θ| (W,), certified (W,) bool)."""
    W = acat.shape[0]
    N = n * p
    good = good.copy()
    cnorm = np.sqrt(np.einsum("wij,wij->w", acat, acat) + (N - n))  # ||C||_F
    dm = min(max(8, N // 5) if max_dim is None else max_dim, N - 1)
    omega = _sketch(N, dm + 1)
    S = np.swapaxes(Y @ omega, 1, 2)  # (W, dm+1, N): sketch columns as rows
    del Y
    Qt = np.zeros((W, dm, N))  # orthonormal basis vectors as rows
    dim = np.zeros(W, dtype=np.int64)
    act = np.flatnonzero(good)  # windows still adding directions
    for j in range(dm + 1):
        if act.size == 0:
            break
        v = S[act, j, :]
        if j:
            Qj = Qt[act, :j, :]
            for _ in range(2):  # classical Gram–Schmidt, twice for orthogonality
                v = v - np.einsum("wjn,wj->wn", Qj, np.einsum("wjn,wn->wj", Qj, v))
        nv = np.sqrt(np.einsum("wn,wn->w", v, v))
        new = nv > rank_tol
        if j == dm:
            good[act[new]] = False  # more than d_max significant directions: not resolved
            break
        grow = act[new]
        Qt[grow, j, :] = v[new] / nv[new, None]
        dim[grow] += 1
        act = grow
    good &= dim > 0
    Q = np.swapaxes(Qt, 1, 2)  # (W, N, dm)
    # Ritz matrix B = Q' C Q using the companion structure: C Q = [acat @ Q ; Q shifted by n]
    CQ = np.empty((W, N, dm))
    np.matmul(acat, Q, out=CQ[:, :n, :])
    CQ[:, n:, :] = Q[:, : N - n, :]
    B = Qt @ CQ
    theta = np.full(W, np.nan, dtype=np.complex128)
    vec = np.zeros((W, dm), dtype=np.complex128)
    one = good & (dim == 1)
    theta[one] = B[one, 0, 0]
    vec[one, 0] = 1.0
    two = good & (dim == 2)
    if two.any():
        a, b, c, e = B[two, 0, 0], B[two, 0, 1], B[two, 1, 0], B[two, 1, 1]
        half = 0.5 * (a - e)
        disc = half * half + b * c
        root = np.sqrt(disc.astype(np.complex128))
        mid = 0.5 * (a + e)
        lam = np.where(np.abs(mid + root) >= np.abs(mid - root), mid + root, mid - root)
        # eigenvector of [[a, b], [c, e]] for lam: (b, lam − a) or (lam − e, c), the longer
        v1 = np.stack([b + 0j, lam - a], axis=-1)
        v2 = np.stack([lam - e, c + 0j], axis=-1)
        use1 = np.abs(v1).sum(axis=-1) >= np.abs(v2).sum(axis=-1)
        sharp = np.abs(disc) > 1e-6 * (half * half + np.abs(b * c))  # not a near-double pair
        theta[two] = lam
        vec[two, :2] = np.where(use1[:, None], v1, v2)
        good[np.flatnonzero(two)[~sharp]] = False
    for dd in range(3, dm + 1):
        sel = good & (dim == dd)
        if sel.any():
            val, vecs = np.linalg.eig(B[sel, :dd, :dd])
            top = np.argmax(np.abs(val), axis=-1)
            pick = np.arange(val.shape[0])
            theta[sel] = val[pick, top]
            vec[sel, :dd] = vecs[pick, :, top]
    # residual of the Ritz pair: C Q s − θ Q s, in real arithmetic (s = a + ib, θ = t + iu):
    # re = CQ a − t Q a + u Q b, im = CQ b − t Q b − u Q a
    ab = np.stack([vec.real, vec.imag], axis=-1)  # (W, dm, 2)
    cq, q = CQ @ ab, Q @ ab  # (W, N, 2)
    t, u = theta.real[:, None], theta.imag[:, None]
    re = cq[..., 0] - t * q[..., 0] + u * q[..., 1]
    im = cq[..., 1] - t * q[..., 1] - u * q[..., 0]
    resid = np.sqrt((re * re).sum(axis=-1) + (im * im).sum(axis=-1))
    snorm = np.sqrt((ab * ab).sum(axis=(1, 2)))
    with np.errstate(invalid="ignore"):
        good &= resid <= resid_tol * cnorm * snorm
    out = np.full(W, np.nan)
    out[good] = np.abs(theta[good])
    return out, good


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
    buf = np.empty((W, steps + p, n, c))
    buf[:, steps] = x0
    buf[:, steps + 1 :] = 0.0
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
    if np.ndim(df1) == 0 and int(df1) % 2 == 0 and int(df1) > 0:  # common case: one even df1
        a = float(df1)
        b = np.asarray(df2, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            # x = 1 / (1 + ratio), 1 − x = ratio / (1 + ratio)
            ratio = np.maximum(f, 0.0) * (a / b)
            out = np.log1p(ratio)
            out *= -0.5 * b
            np.exp(out, out=out)  # x^{df2/2}
            if a > 2:
                one_minus = ratio / (1.0 + ratio)
                term = np.ones_like(out)
                total = np.ones_like(out)
                for j in range(1, int(a) // 2):
                    term = term * (0.5 * b + j - 1) / j * one_minus
                    total += term
                out *= total
        return out
    d1 = np.broadcast_to(np.asarray(df1, dtype=np.float64), f.shape)
    d2 = np.broadcast_to(np.asarray(df2, dtype=np.float64), f.shape)
    out = np.full(f.shape, np.nan)
    valid = np.isfinite(f)
    even = valid & (d1 % 2 == 0)
    if even.any():
        fe, a, b = np.maximum(f[even], 0.0), d1[even], d2[even]
        x = b / (b + a * fe)
        half_b = 0.5 * b  # general path: df1 varies or is odd somewhere
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
    coef_t: np.ndarray, inv: np.ndarray, sigma_diag: np.ndarray, n: int, p: int, d: int
) -> np.ndarray:
    """F statistics (W, n, n) for "series j does not Granger-cause series i" (diagonal NaN).

    For one caused and one causing series the restriction picks the p coefficients b_ij of
    equation i on lags of j, and C((X'X)^{-1} ⊗ Σ̂_u)C' = σ_ii V_j with V_j the p×p block of
    (X'X)^{-1} = L^{-T} L^{-1} for those regressors, so (Lütkepohl 2005, eq. 3.6.5 over J = p)

        F_ij = b_ij' V_j^{-1} b_ij / (p σ_ii).

    `inv` is L^{-1} (W, k, k); only the p×p blocks V_j of (X'X)^{-1} = L^{-T} L^{-1} are
    formed, each entry a column product of L^{-1} (p(p+1)/2 products of n columns per window,
    not the whole lag block), and factored by a batched Cholesky over the p×p blocks (p is small).
    """
    W = inv.shape[0]
    # V[w, j, l, l'] = Σ_r L^{-1}[w, r, d + l·n + j] L^{-1}[w, r, d + l'·n + j]; L^{-1} is lower
    # triangular, so column d + l·n + j is zero above row d + l·n: the sum starts there
    V = np.empty((W, n, p, p))
    for la in range(p):
        for lb in range(la + 1):
            r0 = d + la * n  # la >= lb: the later of the two columns' first nonzero rows
            col_a = inv[:, r0:, d + la * n : d + (la + 1) * n]
            col_b = inv[:, r0:, d + lb * n : d + (lb + 1) * n]
            V[:, :, la, lb] = np.einsum("wrj,wrj->wj", col_a, col_b)
            V[:, :, lb, la] = V[:, :, la, lb]
    b = coef_t[:, :, d:].reshape(W, n, p, n)  # b[w, i, l, j]
    b = np.moveaxis(b, -1, 2)  # (W, n_i, n_j, p)
    if p == 1:
        quad = b[..., 0] ** 2 / V[:, None, :, 0, 0]
    elif p == 2:
        # closed form by the 2×2 Cholesky factor of V_j (per causing series j, broadcast over
        # the caused series i): b' V^{-1} b = b1² / v11 + (b2 − (v12 / v11) b1)² / (v22 − v12² / v11)
        v11, v12, v22 = V[:, :, 0, 0], V[:, :, 0, 1], V[:, :, 1, 1]
        ratio = v12 / v11
        r1 = (1.0 / v11)[:, None, :]
        r2 = (1.0 / (v22 - v12 * ratio))[:, None, :]
        b1, b2 = b[..., 0], b[..., 1]
        t = b1 * ratio[:, None, :]
        np.subtract(b2, t, out=t)
        t *= t
        t *= r2
        quad = b1 * b1
        quad *= r1
        quad += t
    else:
        Lc = np.zeros_like(V)  # Cholesky of V, column by column
        for j in range(p):
            s = V[..., j, j] - np.einsum("...r,...r->...", Lc[..., j, :j], Lc[..., j, :j])
            Lc[..., j, j] = np.sqrt(s)
            for i in range(j + 1, p):
                t = V[..., i, j] - np.einsum("...r,...r->...", Lc[..., i, :j], Lc[..., j, :j])
                Lc[..., i, j] = t / Lc[..., j, j]
        Lb = Lc[:, None]  # forward substitution L z = b, broadcast over caused series i
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
