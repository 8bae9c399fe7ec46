"""Forecast-error variance decompositions and Diebold–Yilmaz connectedness.

Decompositions are arrays (H, n, n) indexed [step, variable, shock]: entry [s−1, i, j] is the
share of variable i's s-step forecast-error variance due to shock j. The s-step decomposition uses
responses at horizons 0..s−1. Rows sum to one.

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
    Sec. 2.3.3, eq. 2.3.37: ω_ij(h) = Σ_{s=0}^{h−1} θ_ij,s² / MSE_i(h).
Pesaran, M. H. and Shin, Y. (1998). Economics Letters 58, 17–29, eq. (11) (generalized FEVD).
Diebold, F. X. and Yilmaz, K. (2012). Better to give than to receive: predictive directional
    measurement of volatility spillovers. International Journal of Forecasting 28, 57–66:
    eq. (2) (θ^g_ij), row normalisation θ̃^g_ij = θ^g_ij / Σ_j θ^g_ij, eq. (3) total spillover.
Diebold, F. X. and Yilmaz, K. (2009). Economic Journal 119, 158–171 (the spillover table).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._frames import Columns, FrameMixin, date_lead, long_columns, model_date
from ._labels import LabelledArray
from ._responses import ma_kernel, resolve_order, response_kernel
from ._validate import (
    InvalidInputError,
    VARLike,
    check_int,
    check_model,
    check_option,
    readonly,
)

#: Decomposition method -> the shock identification (key of `SHOCKS`) whose responses feed it.
METHODS: dict[str, str] = {"cholesky": "cholesky", "generalized": "generalized"}

# ---------------------------------------------------------------------------------------------
# kernels (leading batch axes allowed)
# ---------------------------------------------------------------------------------------------


def fevd_kernel(
    coefs: np.ndarray, sigma: np.ndarray, horizon: int, method: str, order: Sequence[int] | None
) -> np.ndarray:
    """(..., H, n, n) row-normalised decomposition for steps 1..H.

    Cholesky:    ω_ij(s) = Σ_{h<s} θ_ij,h² / Σ_j Σ_{h<s} θ_ij,h²   (Lütkepohl eq. 2.3.37)
    generalized: θ^g_ij(s) = σ_jj^{-1} Σ_{h<s} (e_i' Φ_h Σ e_j)² / Σ_{h<s} e_i' Φ_h Σ Φ_h' e_i
                 (Pesaran–Shin eq. 11; Diebold–Yilmaz 2012 eq. 2), then rows divided by their
                 sums. Since σ_jj^{-1}(e_i'Φ_hΣe_j)² = ψ_ij(h)² (generalized response squared), the
                 normalised share is Σ_{h<s} ψ_ij,h² / Σ_j Σ_{h<s} ψ_ij,h².
    """
    theta = response_kernel(coefs, sigma, horizon - 1, METHODS[method], order)
    acc = np.cumsum(theta * theta, axis=-3)  # Σ_{h<s} θ_ij,h²  for s = 1..H
    return acc / acc.sum(axis=-1, keepdims=True)


def mse_kernel(coefs: np.ndarray, sigma: np.ndarray, horizon: int) -> np.ndarray:
    """(..., H, n) forecast-error variances MSE_i(s) = Σ_{h<s} (Φ_h Σ Φ_h')_ii (eq. 2.3.36)."""
    phi = ma_kernel(coefs, horizon - 1)
    terms = np.einsum("...hij,...jk,...hik->...hi", phi, sigma, phi)
    return np.cumsum(terms, axis=-2)


def spillover_measures(table: np.ndarray) -> dict[str, np.ndarray]:
    """Directional, net and total measures from a percent table (..., n, n) with rows summing to 100.

    from_others_i = Σ_{j≠i} table_ij,   to_others_j = Σ_{i≠j} table_ij,   net = to − from,
    pairwise_net[i, j] = table_ji − table_ij,   total = Σ_{i≠j} table_ij / n = mean(from_others).
    """
    n = table.shape[-1]
    diag = np.diagonal(table, axis1=-2, axis2=-1)
    from_others = table.sum(axis=-1) - diag
    to_others = table.sum(axis=-2) - diag
    return {
        "from_others": from_others,
        "to_others": to_others,
        "net": to_others - from_others,
        "pairwise_net": np.swapaxes(table, -1, -2) - table,
        "total": from_others.sum(axis=-1) / n,
    }


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


def variance_decomposition(
    fit: VARLike,
    horizon: int,
    *,
    method: str = "cholesky",
    order: Sequence[int | str] | None = None,
) -> LabelledArray:
    """Forecast-error variance decomposition, shape (H, n, n) indexed [step, variable, shock].

    Returned as a read-only `LabelledArray` (series names, the fit's last date, the method);
    ``to_frame()`` columns: ``date`` (when known), ``step`` (1..H), ``variable``, ``shock``,
    ``value``.

    Entry [s−1, i, j] is the share of series i's s-step forecast-error variance due to shock j,
    using responses 0..s−1; each row sums to one.

    - "cholesky": orthogonal shocks in column order (or ``order=``), Lütkepohl (2005) eq. 2.3.37.
    - "generalized": Pesaran–Shin (1998) eq. 11 shares, each row divided by its sum as in
      Diebold & Yilmaz (2012) below eq. 2; independent of the ordering.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.   horizon : H >= 1 steps.   order : Cholesky ordering.
    """
    model = check_model(fit)
    H = check_int(horizon, "horizon", minimum=1)
    check_option(method, "method", METHODS)
    perm = resolve_order(order, model.names)
    if perm is not None and method != "cholesky":
        msg = f"`order` only applies to method='cholesky', not method={method!r}; drop `order`"
        raise InvalidInputError(msg)
    out = fevd_kernel(np.asarray(model.coefs), np.asarray(model.sigma_u), H, method, perm)
    names = model.names
    return LabelledArray.wrap(
        out, [("step", range(1, H + 1)), ("variable", names), ("shock", names)], names=names,
        date=model_date(model), kind=method,
    )  # fmt: skip


@dataclass(frozen=True, eq=False, repr=False)
class Connectedness(FrameMixin):
    """Diebold–Yilmaz connectedness at one horizon, in percent. Arrays are read-only.

    Attributes
    ----------
    table : (n, n); [i, j] = 100 × share of i's H-step forecast-error variance due to shocks in j
        (rows sum to 100).
    from_others : (n,) Σ_{j≠i} table[i, j], what i receives.
    to_others : (n,) Σ_{i≠j} table[i, j], what j transmits.
    net : (n,) to_others − from_others.
    pairwise_net : (n, n) [i, j] = table[j, i] − table[i, j], what i transmits to j net.
    total : Σ_{i≠j} table[i, j] / n = mean(from_others), in [0, 100].
    horizon, method, names : as passed.
    date : the last date of the fit (datetime64), or None when it had no dates.

    ``to_frame()`` / ``to_polars()``: the table in long form, one row per pair — ``date``
    (when known), ``variable`` (i, who receives), ``shock`` (j, who transmits), ``value``
    (table[i, j], percent). `from_others` is the sum of ``value`` over rows with
    variable = i and shock ≠ i; `to_others` over shock = j and variable ≠ j.
    """

    table: np.ndarray
    total: float
    to_others: np.ndarray
    from_others: np.ndarray
    net: np.ndarray
    pairwise_net: np.ndarray
    horizon: int
    method: str
    names: tuple[str, ...]
    date: np.datetime64 | None = None

    def _columns(self) -> Columns:
        names = np.array(self.names, dtype=object)
        return long_columns(
            self.table, [("variable", names), ("shock", names)], lead=date_lead(self.date)
        )

    def __repr__(self) -> str:
        return (
            f"Connectedness(total={self.total:.2f}%, horizon={self.horizon}, "
            f"method={self.method!r}, names={list(self.names)!r})"
        )


def connectedness(fit: VARLike, horizon: int, *, method: str = "generalized") -> Connectedness:
    """Diebold & Yilmaz (2012) connectedness from the H-step decomposition, in percent.

    table = 100 · θ̃(H), the row-normalised generalized decomposition at step H (responses
    0..H−1). Spillover-table convention (Diebold & Yilmaz 2009 table; 2012 Table 2): directional
    measures are sums of off-diagonal table entries, NOT divided by n —
    ``from_others[i] = Σ_{j≠i} table[i, j]``, ``to_others[j] = Σ_{i≠j} table[i, j]``,
    ``net = to_others − from_others`` — while the total index (DY 2012 eq. 3) is
    ``total = Σ_{i≠j} table[i, j] / n``, i.e. the mean of `from_others` (and of `to_others`).

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.   horizon : H >= 1.
    method : "generalized" (default, order-free) or "cholesky" (Diebold & Yilmaz 2009).
    """
    model = check_model(fit)
    H = check_int(horizon, "horizon", minimum=1)
    check_option(method, "method", METHODS)
    decomposition = fevd_kernel(np.asarray(model.coefs), np.asarray(model.sigma_u), H, method, None)
    return _connectedness_from_table(
        100.0 * decomposition[-1], H, method, model.names, date=model_date(model)
    )


def _connectedness_from_table(
    table: np.ndarray,
    horizon: int,
    method: str,
    names: tuple[str, ...],
    *,
    date: np.datetime64 | None = None,
) -> Connectedness:
    m = spillover_measures(table)
    readonly(table, m["to_others"], m["from_others"], m["net"], m["pairwise_net"])
    return Connectedness(
        table=table, total=float(m["total"]), to_others=m["to_others"],
        from_others=m["from_others"], net=m["net"], pairwise_net=m["pairwise_net"],
        horizon=horizon, method=method, names=names, date=date,
    )  # fmt: skip
