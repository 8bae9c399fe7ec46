"""Moving-average coefficients and impulse responses.

Conventions: responses are arrays (H+1, n, n) indexed [horizon, response, shock]; horizon 0 is
the impact. The kernels accept leading batch axes (e.g. one model per rolling window).

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
    Sec. 2.3.2 (eq. 2.3.9, MA recursion Φ_i = Σ_j Φ_{i−j} A_j), eq. 2.3.33 (orthogonal Θ_i = Φ_i P).
Pesaran, M. H. and Shin, Y. (1998). Generalized impulse response analysis in linear multivariate
    models. Economics Letters 58, 17–29, eq. (10): ψ_j(h) = σ_jj^{-1/2} Φ_h Σ e_j.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from ._frames import model_date
from ._labels import LabelledArray
from ._validate import (
    InvalidInputError,
    VARLike,
    check_int,
    check_model,
    check_option,
    series_indices,
)

# ---------------------------------------------------------------------------------------------
# kernels
# ---------------------------------------------------------------------------------------------


def ma_kernel(coefs: np.ndarray, horizon: int) -> np.ndarray:
    """Φ_0..Φ_H (..., H+1, n, n) from coefficients (..., p, n, n).

    Φ_0 = I_n,  Φ_h = Σ_{j=1}^{min(h, p)} Φ_{h−j} A_j   (Lütkepohl 2005, eq. 2.3.9).
    """
    *batch, p, n, _ = coefs.shape
    phi = np.zeros((*batch, horizon + 1, n, n))
    phi[..., 0, :, :] = np.eye(n)
    for h in range(1, horizon + 1):
        acc = phi[..., h, :, :]
        for j in range(1, min(h, p) + 1):
            acc += phi[..., h - j, :, :] @ coefs[..., j - 1, :, :]
    return phi


def cholesky_impact(sigma: np.ndarray, order: Sequence[int] | None = None) -> np.ndarray:
    """(..., n, n) impact matrix P with P P' = Σ, lower triangular in the given recursive order.

    With `order` = π (a permutation of 0..n−1, first = most exogenous), P is the Cholesky factor
    of Σ[π, π] placed back in the original row/column positions, so responses keep the original
    series indices while the recursive ordering is π.
    """
    if order is None:
        return np.linalg.cholesky(sigma)
    perm = np.asarray(order)
    lower = np.linalg.cholesky(sigma[..., perm[:, None], perm[None, :]])
    out = np.empty_like(lower)
    out[..., perm[:, None], perm[None, :]] = lower
    return out


def generalized_impact(sigma: np.ndarray) -> np.ndarray:
    """(..., n, n) with column j = Σ e_j / sqrt(σ_jj): a one-s.d. shock to j (Pesaran–Shin eq. 10)."""
    sd = np.sqrt(np.diagonal(sigma, axis1=-2, axis2=-1))
    return sigma / sd[..., None, :]


def unit_impact(sigma: np.ndarray) -> np.ndarray:
    """(..., n, n) identity: a unit shock to each innovation, Φ_h itself."""
    return np.broadcast_to(np.eye(sigma.shape[-1]), sigma.shape).copy()


#: Shock identification per option name: the one place to add a scheme.
SHOCKS: dict[str, Callable[..., np.ndarray]] = {
    "cholesky": cholesky_impact,
    "generalized": lambda sigma, order=None: generalized_impact(sigma),
    "unit": lambda sigma, order=None: unit_impact(sigma),
}


def response_kernel(
    coefs: np.ndarray, sigma: np.ndarray, horizon: int, shocks: str, order: Sequence[int] | None
) -> np.ndarray:
    """(..., H+1, n, n) responses Φ_h M with M the impact matrix of `shocks`."""
    impact = SHOCKS[shocks](sigma, order)
    return ma_kernel(coefs, horizon) @ impact[..., None, :, :]


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


def resolve_order(order: Any, names: tuple[str, ...]) -> tuple[int, ...] | None:
    """Validate a Cholesky ordering: a permutation of all series, as indices or names."""
    if order is None:
        return None
    idx = series_indices(order, names, "order")
    if len(idx) != len(names):
        msg = (
            f"`order` must list all {len(names)} series once (a permutation), got {len(idx)}: "
            f"{order!r}"
        )
        raise InvalidInputError(msg)
    return idx


def ma_coefficients(fit: VARLike, horizon: int) -> LabelledArray:
    """Moving-average coefficients Φ_0..Φ_H, shape (H+1, n, n) [horizon, response, innovation].

    Returned as a read-only `LabelledArray` (a numpy array carrying the series names and the
    fit's last date; ``to_frame()`` columns: ``date``, ``horizon``, ``response``,
    ``innovation``, ``value``).

    Φ_0 = I_n, Φ_h = Σ_{j=1}^{min(h,p)} Φ_{h−j} A_j (Lütkepohl 2005, eq. 2.3.9).

    Parameters
    ----------
    fit : a `VARFit` or `VARProcess`.   horizon : H >= 1.
    """
    model = check_model(fit)
    H = check_int(horizon, "horizon", minimum=1)
    out = ma_kernel(np.asarray(model.coefs), H)
    return LabelledArray.wrap(
        out, _axes(("horizon", "response", "innovation"), H + 1, model.names),
        names=model.names, date=model_date(model), kind="unit",
    )  # fmt: skip


def _axes(
    axes: tuple[str, str, str], first: int | Sequence[int], names: tuple[str, ...]
) -> list[tuple[str, Sequence[Any]]]:
    """Labels of a (first, n, n) array: 0..first−1 (or the given values), then names twice."""
    lead = range(first) if isinstance(first, int) else first
    return [(axes[0], list(lead)), (axes[1], names), (axes[2], names)]


def impulse_responses(
    fit: VARLike,
    horizon: int,
    *,
    shocks: str = "cholesky",
    cumulative: bool = False,
    order: Sequence[int | str] | None = None,
) -> LabelledArray:
    """Impulse responses, shape (H+1, n, n) indexed [horizon, response, shock].

    Returned as a read-only `LabelledArray`: a numpy array that also carries the series
    names, the fit's last date (``.date``, None without dates) and the identification
    (``.kind``); ``to_frame()`` / ``to_polars()`` columns: ``date`` (when known),
    ``horizon`` (0..H), ``response``, ``shock``, ``value``.

    ``shocks``:

    - "cholesky": Θ_h = Φ_h P with P the lower Cholesky factor of Σ_u, a one-s.d. orthogonal
      shock (Lütkepohl 2005, eq. 2.3.33). The recursive order is the column order; choose another
      with ``order=`` (a permutation of indices or names, most exogenous first) — results keep
      the original series positions — or by permuting the columns of `y` before fitting.
    - "generalized": ψ_j(h) = Φ_h Σ_u e_j / sqrt(σ_jj), a one-s.d. shock to j with the others
      moving as their correlation with j implies; independent of the order (Pesaran & Shin 1998,
      eq. 10).
    - "unit": Φ_h, a unit shock to one innovation.

    Parameters
    ----------
    fit : a `VARFit` or `VARProcess`.
    horizon : H >= 1, the last horizon returned.
    cumulative : return running sums Σ_{s<=h} over horizons (responses of levels when the model
        is in differences).
    order : Cholesky ordering (only with ``shocks="cholesky"``).
    """
    model = check_model(fit)
    H = check_int(horizon, "horizon", minimum=1)
    check_option(shocks, "shocks", SHOCKS)
    perm = resolve_order(order, model.names)
    if perm is not None and shocks != "cholesky":
        msg = f"`order` only applies to shocks='cholesky', not shocks={shocks!r}; drop `order`"
        raise InvalidInputError(msg)
    out = response_kernel(np.asarray(model.coefs), np.asarray(model.sigma_u), H, shocks, perm)
    if cumulative:
        out = np.cumsum(out, axis=0)
    return LabelledArray.wrap(
        out, _axes(("horizon", "response", "shock"), H + 1, model.names), names=model.names,
        date=model_date(model), kind=shocks + (" cumulative" if cumulative else ""),
    )  # fmt: skip
