"""Rolling-window shrinkage VARs (`shrinkage_var` on every window), batched over windows.

Each window's posterior needs only the cross-products of its usable rows: with
z_t = [1, y_{t−1}', ..., y_{t−p}', y_t']' (each series less a shift μ),
Σ_t z_t z_t' holds the count N, the sums of the lags and of y, and their cross-products, from
which the centred X'X, X'Y, Y'Y of `_shrink.prepare` follow (C = S − s s'/N; for trend "n" the
raw sums). The flat-intercept posterior and marginal likelihood depend on the centred sums only
(`_shrink` module docstring), so the shift μ changes nothing but rounding; it is taken from the
rows every window of a group shares, as in the least-squares engine.

The window sums come from `_rolling_kernels.anchored_window_sums` (one anchor row per block of
L = window − p observation rows: every window starting in the block contains it; no running
total over the history is differenced). Then, per chunk of windows and all at once: the AR(1)
prior scales, one symmetric eigendecomposition per window, the tightness search (`_shrink`:
grid over log λ, then Newton on the slope — the same steps a single fit takes), the
posterior mean, and Diebold–Yilmaz connectedness from it (optionally responses and
decompositions, band and joint connectedness as in `rolling_var`).

Gaps: observation t is usable only if rows t − p .. t are finite (as in `rolling_var`); a
window with fewer than `MIN_OBS` usable observations, or with a series that does not vary after
its own lag (zero AR(1) residual variance), is skipped with its reason.

Granger tests are not defined for a shrinkage posterior (no sampling distribution of an F
statistic under the prior): `granger_f` is None; nor are the least-squares information criteria
(NaN).

References: see `_shrink`, `_rolling`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from itertools import pairwise
from typing import Any

import numpy as np

from . import _rolling_kernels as K
from ._decompose import fevd_kernel, spillover_measures
from ._responses import response_kernel
from ._rolling import DECOMPOSITION_KINDS, RESPONSE_KINDS, RollingVAR, _with_extras
from ._shrink import (
    SHRINK_TRENDS,
    Prepared,
    ar1_variances,
    check_decay,
    check_tightness,
    lag_coefs,
    posterior,
    prepare,
    prior_means,
    search_tightness,
)
from ._validate import InvalidInputError, as_names, check_int, check_option, readonly

#: Fewest usable observations for a window (the AR(1) scales need N − 2 >= 1 with an intercept).
MIN_OBS = 4
#: Windows per batch of the posterior step (bounds the (W, k', k') eigenvector arrays).
BATCH = 64


@dataclass(frozen=True, eq=False, repr=False)
class RollingShrinkage(RollingVAR):
    """`RollingVAR` of shrinkage fits: coefficients are posterior means, `sigma_u` E[Σ | Y].

    Extra attributes (W windows): tightness (W,) λ of each window (chosen or fixed);
    log_marginal_likelihood (W,) at that λ; prior_mean: n values δ; lag_decay; tightness_chosen.
    `granger_*` are None and the information criteria NaN (not defined for the posterior).
    """

    tightness: np.ndarray | None = None
    log_marginal_likelihood: np.ndarray | None = None
    prior_mean: tuple[float, ...] = ()
    lag_decay: float = 1.0
    tightness_chosen: bool = True

    def __repr__(self) -> str:
        how = "chosen" if self.tightness_chosen else "fixed"
        return (
            f"RollingShrinkage({len(self)} windows of {self.window} rows, n={self.n}, "
            f"lags={self.max_lags}, horizon={self.horizon}, tightness {how}, "
            f"skipped={int((~self.ok).sum())})"
        )


def _centred(G: np.ndarray, k: int, centred: bool) -> tuple[np.ndarray, ...]:
    """XX, XY, YY, N from window sums G (W, 1 + k' + n, 1 + k' + n) of [1, x, y]."""
    N = G[:, 0, 0].copy()
    S = G[:, 1:, 1:]
    if centred:
        s = G[:, 0, 1:]
        with np.errstate(divide="ignore", invalid="ignore"):
            S = S - s[:, :, None] * s[:, None, :] / N[:, None, None]
    return S[:, :k, :k], S[:, :k, k:], S[:, k:, k:], N


def _window_sums(data: np.ndarray, usable: np.ndarray, p: int, first: np.ndarray,
                 L: int, centred: bool) -> Any:  # fmt: skip
    """Yield (positions, G) per group of windows sharing an anchor block (see module docstring)."""
    n = data.shape[1]
    group = first // L
    edges = np.concatenate([[0], np.flatnonzero(np.diff(group)) + 1, [first.size]])
    for s, t in pairwise(edges):
        cut = int(group[s] + 1) * L
        rows = data[max(cut - 1 - p, 0) : cut]
        fin = np.isfinite(rows)
        mu = np.where(fin, rows, 0.0).sum(axis=0) / np.maximum(fin.sum(axis=0), 1)
        if not centred:
            mu = np.zeros(n)
        a = first[s:t]
        lo, hi = int(a[0]), int(a[-1]) + L
        R = hi - lo
        ys = np.full((R + p, n), np.nan)  # ys[i] = y_{lo − p + i} − μ
        base = max(lo - p, 0)
        ys[base - (lo - p) :] = data[base:hi] - mu
        z = np.empty((R, 1 + n * (p + 1)))
        z[:, 0] = 1.0
        for lag in range(1, p + 1):
            z[:, 1 + (lag - 1) * n : 1 + lag * n] = ys[p - lag : p - lag + R]
        z[:, 1 + p * n :] = ys[p:]
        z[~usable[lo:hi]] = 0.0
        yield np.arange(s, t), K.anchored_window_sums(z, a - lo, cut - lo, L)


def rolling_shrinkage(
    y: Any,
    window: int,
    lags: int,
    horizon: int,
    *,
    step: int = 1,
    ends: Any = None,
    after: int | None = None,
    tightness: float | str = "auto",
    prior_mean: str | Sequence[Any] = "white_noise",
    lag_decay: float = 1.0,
    trend: str = "c",
    responses: str | None = None,
    decomposition: str | None = None,
    names: Sequence[str] | None = None,
    frequency_bands: Sequence[tuple[float, float]] | None = None,
    band_truncation: int = 100,
    joint: bool = False,
) -> RollingShrinkage:
    """`shrinkage_var` on every rolling window, with connectedness (generalized, H = `horizon`).

    Parameters as in `rolling_var` (rolling windows only: `window` rows ending at rows
    window − 1, window − 1 + step, ... or `ends`, those after row `after`) and `shrinkage_var`
    (`tightness`, `prior_mean`, `lag_decay`, `trend` "c" | "n"). λ is chosen per window when
    ``tightness="auto"``. Every window agrees with `shrinkage_var` on the same rows to about
    1e-10 relative (tested to 1e-8), its λ search included.

    Returns
    -------
    RollingShrinkage (a `RollingVAR`: `coefs` (W, p, n, n), `sigma_u`, connectedness arrays ...,
    plus `tightness` (W,) and `log_marginal_likelihood` (W,)).
    """
    from ._rolling import _as_data_with_gaps, _window_ends

    data, labels, _dates = _as_data_with_gaps(y, names)
    T, n = data.shape
    p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
    H = check_int(horizon, "horizon", minimum=1)
    win = check_int(window, "window", minimum=p + MIN_OBS)
    st = check_int(step, "step", minimum=1)
    check_option(trend, "trend", SHRINK_TRENDS)
    lam = check_tightness(tightness)
    decay = check_decay(lag_decay)
    delta = prior_means(prior_mean, labels)
    if responses is not None:
        check_option(responses, "responses", RESPONSE_KINDS)
    if decomposition is not None:
        check_option(decomposition, "decomposition", DECOMPOSITION_KINDS)
    if win > T:
        msg = f"`window`={win} is longer than `y` ({T} rows); use window <= {T}"
        raise InvalidInputError(msg)
    e_rows = _window_ends(T, win, st, ends, after)
    W = e_rows.size
    centred = trend == "c"
    k = n * p
    nan = np.nan
    coefs = np.full((W, p, n, n), nan)
    intercept = np.full((W, n), nan) if centred else None
    sigma = np.full((W, n, n), nan)
    lam_out = np.full(W, nan)
    lml = np.full(W, nan)
    radius = np.full(W, nan)
    pairwise_ = np.full((W, n, n), nan)
    resp = np.full((W, H + 1, n, n), nan) if responses else None
    dec = np.full((W, H, n, n), nan) if decomposition else None
    nobs = np.zeros(W, dtype=np.int64)
    reason = np.full(W, "", dtype=object)
    finite = np.isfinite(data).all(axis=1)
    usable = K.usable_observations(finite, p)
    L = win - p
    first = e_rows - win + 1 + p
    for pos, G in _window_sums(data, usable, p, first, L, centred) if W else ():
        for lo in range(0, pos.size, BATCH):
            sel = pos[lo : lo + BATCH]
            g = G[lo : lo + BATCH]
            XX, XY, YY, N = _centred(g, k, centred)
            nobs[sel] = N.astype(np.int64)
            few = N < MIN_OBS
            reason[sel[few]] = (
                f"fewer than {MIN_OBS} usable observations (rows with all of the last {p + 1} "
                "rows finite)"
            )
            s2 = ar1_variances(XX, XY, YY, np.where(few, MIN_OBS, N), centred)
            flat = ~few & ~(s2 > 0).all(axis=1)
            for w in np.flatnonzero(flat):
                j = int(np.flatnonzero(~(s2[w] > 0))[0])
                reason[sel[w]] = (
                    f"series {labels[j]!r} does not vary after its own lag in this window "
                    "(AR(1) residual variance zero); no prior scale"
                )
            good = np.flatnonzero(~few & ~flat)
            if good.size == 0:
                continue
            ws = sel[good]
            prep: Prepared = prepare(
                XX[good], XY[good], YY[good], N[good], delta, p, decay, centred
            )
            x = search_tightness(prep) if lam is None else np.full(good.size, np.log(lam))
            post = posterior(prep, x)
            A = lag_coefs(post["B"], n, p)
            coefs[ws] = A
            sig = post["Sigma"]
            sigma[ws] = sig
            lam_out[ws] = np.exp(x)
            lml[ws] = post["log_ml"]
            if intercept is not None:
                # c̄ = ȳ − B̄' x̄ in original units: sums give x̄, ȳ less the shift; add it back
                sx = g[good, 0, 1 : 1 + k] / N[good, None]
                sy = g[good, 0, 1 + k :] / N[good, None]
                c = sy - np.einsum("wkn,wk->wn", post["B"], sx)
                mu_lag = _group_shift(data, ws, first, L, p)
                # shifted model: y − μ = c + Σ A_l (y_{t−l} − μ) ⇒ c_orig = c + (I − Σ A_l) μ
                c = c + mu_lag - np.einsum("wij,wj->wi", A.sum(axis=1), mu_lag)
                intercept[ws] = c
            acat = np.concatenate(list(np.moveaxis(A, 1, 0)), axis=-1)  # (W, n, n·p)
            rho, _ = K.spectral_radius_batch(acat, n, p)
            radius[ws] = rho
            pairwise_[ws] = 100.0 * fevd_kernel(A, sig, H, "generalized", None)[:, -1]  # step H
            if resp is not None and responses is not None:
                resp[ws] = response_kernel(A, sig, H, responses, None)
            if dec is not None and decomposition is not None:
                dec[ws] = fevd_kernel(A, sig, H, decomposition, None)
    m = spillover_measures(pairwise_)
    ok = reason == ""
    starts = e_rows - win + 1
    nanW = np.full(W, nan)
    arrays = dict(
        ends=e_rows, starts=starts, nobs=nobs, lags=np.full(W, p, dtype=np.int64), coefs=coefs,
        intercept=intercept, sigma_u=sigma, spectral_radius=radius, aic=nanW, bic=nanW.copy(),
        hq=nanW.copy(), fpe=nanW.copy(), condition_number=nanW.copy(),
        total_connectedness=m["total"], to_others=m["to_others"], from_others=m["from_others"],
        net=m["net"], pairwise=pairwise_, responses=resp, decomposition=dec, skip_reason=reason,
        ok=ok, tightness=lam_out, log_marginal_likelihood=lml,
    )  # fmt: skip
    readonly(*(v for v in arrays.values() if isinstance(v, np.ndarray)))
    result = RollingShrinkage(
        **arrays, trend_coef=None, granger_f=None, granger_p=None, granger_df=None,
        response_kind=responses, decomposition_kind=decomposition, portmanteau_p=None,
        portmanteau_lags=None, names=as_names(list(labels), n), window=win, step=st, trend=trend,
        horizon=H, expanding=False, criterion=None, lag_decay=decay,
        prior_mean=tuple(float(v) for v in delta),
        tightness_chosen=lam is None,
    )  # fmt: skip
    if frequency_bands is not None or joint:
        extra = _with_extras(result, frequency_bands, band_truncation, joint)
        assert isinstance(extra, RollingShrinkage)
        return extra
    return result


def _group_shift(data: np.ndarray, ws: np.ndarray, first: np.ndarray, L: int, p: int) -> np.ndarray:
    """(len(ws), n) the shift μ of each window's group (`_window_sums`)."""
    out = np.empty((ws.size, data.shape[1]))
    for i, w in enumerate(ws):
        cut = int(first[w] // L + 1) * L
        rows = data[max(cut - 1 - p, 0) : cut]
        fin = np.isfinite(rows)
        out[i] = np.where(fin, rows, 0.0).sum(axis=0) / np.maximum(fin.sum(axis=0), 1)
    return out
