"""The generalized decomposition and the connectedness table, recomputed directly from the papers.

An independent implementation written in this file — plain loops, MA coefficients by their own
recursion, no arlib kernel — compared with `arlib.variance_decomposition(method="generalized")`
and `arlib.connectedness` on random stable VAR(2) processes with UNEQUAL innovation variances
(σ_jj spread over four orders of magnitude) and CORRELATED innovations, the case where the
σ_jj^{-1} weight and the Σ inside the numerator matter (with Σ = I both reduce to Cholesky's).

Formulas:
- MA coefficients: Φ_0 = I, Φ_h = Σ_{j=1}^{min(h,p)} A_j Φ_{h−j} (Lütkepohl 2005, eq. 2.1.22; the
  recursion with A_j on the left — arlib multiplies on the right, the two are equal).
- Pesaran & Shin (1998), Economics Letters 58, 17–29, the generalized FEVD (their eq. 11):
      θ^g_ij(H) = σ_jj^{-1} Σ_{h=0}^{H−1} (e_i' Φ_h Σ e_j)² / Σ_{h=0}^{H−1} e_i' Φ_h Σ Φ_h' e_i.
- Diebold & Yilmaz (2012), IJF 28, 57–66, Sec. 2: θ̃^g_ij = θ^g_ij / Σ_j θ^g_ij (rows sum to 1);
  total S^g = 100 · Σ_{i≠j} θ̃^g_ij / N; directional "from all others to i" S^g_i· = 100 ·
  Σ_{j≠i} θ̃^g_ij / N, "from j to all others" S^g_·j = 100 · Σ_{i≠j} θ̃^g_ij / N; net S^g_i =
  S^g_·i − S^g_i·; pairwise net S^g_ij = 100 · (θ̃^g_ji − θ̃^g_ij) / N.
  arlib's directional and pairwise measures follow the spillover-table convention documented in
  `arlib.connectedness` (sums of table entries, not divided by N), so they equal N × the above;
  the test states that factor explicitly.

Tolerance: both sides evaluate the same sums in double precision in a different order; shares
are at most 1, so 1e-12 absolute on shares (1e-10 on percent) is rounding with room to spare,
while a wrong weight (σ_jj instead of sqrt(σ_jj) in the impact, say) moves shares by 1e-2 or more.
"""

from __future__ import annotations

import numpy as np
import pytest

import arlib

SEEDS = range(30)
HORIZONS = (1, 2, 5, 12)


def random_general_var2(seed: int) -> tuple[np.ndarray, np.ndarray]:
    """A stable VAR(2) (spectral radius 0.6–0.95) with n = 2..5, innovation s.d.s spread over
    10^-2..10^2 (in random order) and a random correlation matrix (|ρ| up to about 0.9)."""
    rng = np.random.default_rng(1000 + seed)
    n = 2 + seed % 4
    coefs = rng.normal(size=(2, n, n))
    radius = float(np.abs(np.linalg.eigvals(arlib.companion_matrix(coefs))).max())
    c = rng.uniform(0.6, 0.95) / radius  # A_j → c^j A_j scales every root by c
    coefs = coefs * np.array([c, c * c])[:, None, None]
    L = rng.normal(size=(n, n))
    cov = L @ L.T + 0.05 * np.eye(n)
    corr = cov / np.sqrt(np.outer(np.diag(cov), np.diag(cov)))
    sd = 10.0 ** rng.permutation(np.linspace(-2, 2, n))  # spread 10^-2..10^2, shuffled
    # unequal scales also in the coefficients: the process of D y with D = diag(sd)
    coefs = coefs * sd[None, :, None] / sd[None, None, :]
    return coefs, corr * np.outer(sd, sd)


def ma_direct(coefs: np.ndarray, H: int) -> list[np.ndarray]:
    """Φ_0..Φ_{H−1} by the recursion with A_j on the left, element by element."""
    p, n, _ = coefs.shape
    phi = [np.eye(n)]
    for h in range(1, H):
        new = np.zeros((n, n))
        for j in range(1, min(h, p) + 1):
            A, prev = coefs[j - 1], phi[h - j]
            for r in range(n):
                for s in range(n):
                    new[r, s] += sum(A[r, m] * prev[m, s] for m in range(n))
        phi.append(new)
    return phi


def pesaran_shin(coefs: np.ndarray, sigma: np.ndarray, H: int) -> tuple[np.ndarray, np.ndarray]:
    """Numerator N_ij = σ_jj^{-1} Σ_h (e_i' Φ_h Σ e_j)² and denominator D_i = Σ_h e_i' Φ_h Σ Φ_h' e_i,
    h = 0..H−1 (Pesaran & Shin 1998, eq. 11), by explicit loops."""
    n = sigma.shape[0]
    phi = ma_direct(coefs, H)
    num = np.zeros((n, n))
    den = np.zeros(n)
    for i in range(n):
        for h in range(H):
            row = phi[h][i]  # e_i' Φ_h
            row_sigma = [sum(row[m] * sigma[m, j] for m in range(n)) for j in range(n)]
            den[i] += sum(row_sigma[j] * row[j] for j in range(n))  # e_i' Φ_h Σ Φ_h' e_i
            for j in range(n):
                num[i, j] += row_sigma[j] ** 2 / sigma[j, j]
    return num, den


def diebold_yilmaz(theta_g: np.ndarray) -> dict[str, np.ndarray | float]:
    """Row normalisation and the DY (2012) Sec. 2 measures, in percent, divided by N as printed."""
    n = theta_g.shape[0]
    tilde = np.array([[theta_g[i, j] / sum(theta_g[i]) for j in range(n)] for i in range(n)])
    off = [(i, j) for i in range(n) for j in range(n) if i != j]
    received = np.array([100 * sum(tilde[i, j] for j in range(n) if j != i) / n for i in range(n)])
    sent = np.array([100 * sum(tilde[i, j] for i in range(n) if i != j) / n for j in range(n)])
    pairwise = np.array(
        [[100 * (tilde[j, i] - tilde[i, j]) / n for j in range(n)] for i in range(n)]
    )
    return {
        "tilde": tilde,
        "total": 100 * sum(tilde[i, j] for i, j in off) / n,
        "received": received,
        "sent": sent,
        "net": sent - received,
        "pairwise": pairwise,
    }


@pytest.mark.parametrize("seed", SEEDS)
def test_generalized_decomposition_and_connectedness_match_direct_formulas(seed: int) -> None:
    coefs, sigma = random_general_var2(seed)
    n = sigma.shape[0]
    assert np.ptp(np.log10(np.diag(sigma))) > 3.9  # variances differ by four orders
    proc = arlib.var_process(coefs, sigma)
    H_max = max(HORIZONS)
    ours = arlib.variance_decomposition(proc, H_max, method="generalized")
    psi = arlib.impulse_responses(proc, H_max - 1, shocks="generalized")
    mse = arlib.forecast(proc, np.zeros((2, n)), steps=H_max).mse
    for H in HORIZONS:
        num, den = pesaran_shin(coefs, sigma, H)
        # the two halves of eq. 11 separately, against arlib's public responses and forecast MSE:
        # σ_jj^{-1}(e_i'Φ_hΣe_j)² is the squared generalized response ψ_ij(h)²; D_i = MSE_i(H)
        np.testing.assert_allclose((psi[:H] ** 2).sum(axis=0), num, rtol=1e-11)
        np.testing.assert_allclose(np.diag(mse[H - 1]), den, rtol=1e-11)
        theta_g = num / den[:, None]
        dy = diebold_yilmaz(theta_g)
        np.testing.assert_allclose(ours[H - 1], dy["tilde"], rtol=0, atol=1e-12)
        c = arlib.connectedness(proc, H)
        np.testing.assert_allclose(c.table, 100 * dy["tilde"], rtol=0, atol=1e-10)
        assert c.total == pytest.approx(dy["total"], abs=1e-10)
        # spillover-table convention: directional and pairwise measures are N × DY's
        np.testing.assert_allclose(c.from_others, n * dy["received"], rtol=0, atol=1e-9)
        np.testing.assert_allclose(c.to_others, n * dy["sent"], rtol=0, atol=1e-9)
        np.testing.assert_allclose(c.net, n * dy["net"], rtol=0, atol=1e-9)
        np.testing.assert_allclose(c.pairwise_net, n * dy["pairwise"], rtol=0, atol=1e-9)


def test_unnormalised_rows_do_not_sum_to_one_for_correlated_errors() -> None:
    """Why the row normalisation exists (Pesaran & Shin 1998, below eq. 11; DY 2012 Sec. 2): with
    correlated innovations Σ_j θ^g_ij ≠ 1, so the direct θ^g differs from arlib's table before
    normalising and equals it after. Guards against the direct code being normalised by accident."""
    coefs, sigma = random_general_var2(3)
    num, den = pesaran_shin(coefs, sigma, 8)
    theta_g = num / den[:, None]
    assert np.abs(theta_g.sum(axis=1) - 1).max() > 0.05
    ours = arlib.variance_decomposition(arlib.var_process(coefs, sigma), 8, method="generalized")
    assert np.abs(ours[-1] - theta_g).max() > 1e-3
    np.testing.assert_allclose(ours[-1], diebold_yilmaz(theta_g)["tilde"], rtol=0, atol=1e-12)
