"""Joint connectedness: the share of a series' variance due to all other shocks together.

The generalized decomposition (Pesaran–Shin) shocks one series at a time and lets correlated
innovations come along; its rows do not sum to one and must be normalised, which distorts the
"from others" measure when shocks are correlated. Lastrapes & Wiesen (2021) instead shock all
other series *jointly*: the expected innovation given a shock δ to u_{−i} (all but i) is
Σ M_i (M_i' Σ M_i)^{-1} δ, with M_i the n × (n−1) selector of the other columns. The share of
series i's H-step forecast-error variance due to all other shocks jointly is

    J_i(H) = Σ_{h<H} e_i' Φ_h Σ M_i (M_i' Σ M_i)^{-1} M_i' Σ Φ_h' e_i / MSE_i(H),
    MSE_i(H) = Σ_{h<H} (Φ_h Σ Φ_h')_ii                             (Lastrapes & Wiesen 2021)

and it needs no normalisation. By the projection identity Σ = Σ M (M'ΣM)^{-1} M'Σ + (e_i e_i')
/ (Σ^{-1})_ii, the remainder is the variance of u_i orthogonal to all other innovations — the own
Cholesky shock of i ordered last — so

    J_i(H) = 1 − Σ_{h<H} (Φ_h)_ii² / ((Σ^{-1})_ii · MSE_i(H))

which is what the kernel computes (O(n²H) per model instead of n solves). With diagonal Σ,
J_i equals the generalized "from others" share. The joint total index is the mean,
J(H) = 100 · Σ_i J_i(H) / n ∈ [0, 100].

Pairwise and "to others": Lastrapes & Wiesen keep the generalized table's pattern across
transmitters and rescale each row so that its off-diagonal entries add up to J_i (our reading of
the paper, recalled from memory; the identities above are what the tests pin):

    table[i, j] = 100 · θ̃^g_ij · J_i / Σ_{k≠i} θ̃^g_ik  (j ≠ i),   table[i, i] = 100 (1 − J_i).

References
----------
Lastrapes, W. D. and Wiesen, T. F. P. (2021). The joint spillover index. Economic Modelling 94,
    681–691.
Pesaran, M. H. and Shin, Y. (1998). Economics Letters 58, 17–29.
Diebold, F. X. and Yilmaz, K. (2012). International Journal of Forecasting 28, 57–66.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._decompose import fevd_kernel, spillover_measures
from ._responses import ma_kernel
from ._validate import VARLike, check_int, check_model, readonly

# ---------------------------------------------------------------------------------------------
# kernels (leading batch axes allowed)
# ---------------------------------------------------------------------------------------------


def joint_kernel(coefs: np.ndarray, sigma: np.ndarray, horizon: int) -> np.ndarray:
    """(..., n) joint shares J_i(H) = 1 − Σ_{h<H} (Φ_h)_ii² / ((Σ^{-1})_ii · MSE_i(H))."""
    phi = ma_kernel(coefs, horizon - 1)  # (..., H, n, n)
    mse = np.einsum("...hij,...hij->...i", phi @ sigma[..., None, :, :], phi)  # Σ_h (Φ_h Σ Φ_h')_ii
    own = np.einsum("...hii,...hii->...i", phi, phi)
    precision = np.diagonal(np.linalg.inv(sigma), axis1=-2, axis2=-1)
    return 1.0 - own / (precision * mse)


def joint_table(generalized: np.ndarray, joint: np.ndarray) -> np.ndarray:
    """(..., n, n) percent table: generalized rows (fractions) rescaled so off-diagonals sum to J_i."""
    n = generalized.shape[-1]
    eye = np.eye(n, dtype=bool)
    off = np.where(eye, 0.0, generalized)
    off_sum = off.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        scaled = np.where(off_sum > 0, off * (joint[..., None] / off_sum), 0.0)
    return 100.0 * np.where(eye, (1.0 - joint)[..., None], scaled)


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class JointConnectedness:
    """Lastrapes–Wiesen joint connectedness at one horizon, in percent. Arrays are read-only.

    Attributes
    ----------
    from_others : (n,) 100·J_i, the share of i's H-step forecast-error variance due to all
        other shocks jointly.
    total : mean(from_others), the joint total index in [0, 100].
    generalized_from_others, generalized_total : the Diebold–Yilmaz (row-normalised
        generalized) counterparts at the same horizon, for comparison.
    table : (n, n) generalized rows rescaled so row i's off-diagonal entries sum to 100·J_i.
    to_others, net : (n,) from `table` (spillover-table convention).
    horizon : H.   names : series names.
    """

    from_others: np.ndarray
    total: float
    generalized_from_others: np.ndarray
    generalized_total: float
    table: np.ndarray
    to_others: np.ndarray
    net: np.ndarray
    horizon: int
    names: tuple[str, ...]

    def __repr__(self) -> str:
        return (
            f"JointConnectedness(total={self.total:.2f}%, generalized_total="
            f"{self.generalized_total:.2f}%, horizon={self.horizon}, names={list(self.names)!r})"
        )


def joint_connectedness(fit: VARLike, horizon: int) -> JointConnectedness:
    """Joint connectedness of Lastrapes & Wiesen (2021) at horizon H, in percent.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.   horizon : H >= 1 (responses 0..H−1, as `connectedness`).
    """
    model = check_model(fit)
    H = check_int(horizon, "horizon", minimum=1)
    coefs, sigma = np.asarray(model.coefs), np.asarray(model.sigma_u)
    joint = joint_kernel(coefs, sigma, H)
    generalized = fevd_kernel(coefs, sigma, H, "generalized", None)[-1]
    table = joint_table(generalized, joint)
    m = spillover_measures(table)
    g = spillover_measures(100.0 * generalized)
    from_others = 100.0 * joint
    readonly(from_others, table, m["to_others"], m["net"], g["from_others"])
    return JointConnectedness(
        from_others=from_others, total=float(from_others.mean()),
        generalized_from_others=g["from_others"], generalized_total=float(g["total"]),
        table=table, to_others=m["to_others"], net=m["net"], horizon=H, names=model.names,
    )  # fmt: skip
