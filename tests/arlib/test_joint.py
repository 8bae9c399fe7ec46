"""Joint connectedness (Lastrapes & Wiesen 2021, Economic Modelling 94, 681–691) against identities.

Checks: (1) the joint share of all others equals 1 − the Cholesky own share with i ordered last
(the projection identity at the core of the paper); (2) it equals the paper's defining formula
with the selector M_i, written out here directly; (3) with diagonal Σ it equals the generalized
"from others" share (Pesaran–Shin 1998 / Diebold–Yilmaz 2012). By frequency band (Baruník &
Křehlík 2018's Parseval split applied to the joint decomposition): (4) the band parts add up to the
joint share at the truncation horizon; (5) with diagonal Σ they equal the generalized band "from
others"; (6) they equal the selector formula integrated exactly over each band.
"""

from __future__ import annotations

import numpy as np
import pytest

import arlib
from arlib._joint import joint_connectedness
from tests.arlib.test_frequency import random_process


@pytest.mark.parametrize("seed", range(6))
def test_joint_share_is_one_minus_cholesky_own_share_with_i_last(seed):
    rng = np.random.default_rng(100 + seed)
    n = 3 + seed % 3
    proc = random_process(rng, n=n, p=2, radius=0.9)
    H = 10
    jc = joint_connectedness(proc, H)
    for i in range(n):
        order = [k for k in range(n) if k != i] + [i]
        own = arlib.variance_decomposition(proc, H, method="cholesky", order=order)[-1, i, i]
        assert abs(jc.from_others[i] - 100 * (1 - own)) < 1e-10
    assert 0 <= jc.total <= 100
    np.testing.assert_allclose(jc.table.sum(axis=1), 100.0, atol=1e-10)
    np.testing.assert_allclose(jc.table.sum(axis=1) - np.diag(jc.table), jc.from_others, atol=1e-10)


@pytest.mark.parametrize("seed", range(3))
def test_joint_share_equals_the_defining_formula_with_the_selector(seed):
    # J_i = Σ_h e_i'Φ_h Σ M (M'ΣM)^{-1} M'Σ Φ_h' e_i / Σ_h e_i'Φ_h Σ Φ_h' e_i, loops, no arlib kernels
    rng = np.random.default_rng(200 + seed)
    n, H = 4, 12
    proc = random_process(rng, n=n, p=2, radius=0.85)
    coefs, sigma = np.asarray(proc.coefs), np.asarray(proc.sigma_u)
    phi = [np.eye(n)]
    for h in range(1, H):
        phi.append(sum(phi[h - j] @ coefs[j - 1] for j in range(1, min(h, 2) + 1)))
    jc = joint_connectedness(proc, H)
    for i in range(n):
        M = np.delete(np.eye(n), i, axis=1)
        K = sigma @ M @ np.linalg.inv(M.T @ sigma @ M) @ M.T @ sigma
        num = sum((phi[h] @ K @ phi[h].T)[i, i] for h in range(H))
        den = sum((phi[h] @ sigma @ phi[h].T)[i, i] for h in range(H))
        assert abs(jc.from_others[i] - 100 * num / den) < 1e-10


def _joint_by_inverse(coefs, sigma, H):
    """J_i(H) = 1 − Σ_h (Φ_h)_ii² / ((Σ^{-1})_ii Σ_h (Φ_h Σ Φ_h')_ii) with a plain inverse, per model."""
    n = sigma.shape[-1]
    out = []
    for c, s in zip(coefs, sigma, strict=True):
        phi = [np.eye(n)]
        for h in range(1, H):
            phi.append(sum(c[j - 1] @ phi[h - j] for j in range(1, min(h, c.shape[0]) + 1)))
        mse = sum(np.diag(f @ s @ f.T) for f in phi)
        own = sum(np.diag(f) ** 2 for f in phi)
        out.append(1 - own / (np.diag(np.linalg.inv(s)) * mse))
    return np.array(out)


def test_joint_kernel_batches_chunks_and_a_sigma_without_cholesky_factor(monkeypatch):
    # joint_kernel works in chunks through the Cholesky factor (MSE = Σ_h ‖e_i'Φ_h L‖², Σ^{-1}
    # from L^{-1}); a model's bits do not depend on the batch or the chunking, and a Σ that has
    # no Cholesky factor (indefinite) still gets the formula, through Σ^{-1}, for itself alone.
    from arlib._joint import joint_kernel

    rng = np.random.default_rng(31)
    procs = [random_process(rng, n=5, p=2, radius=0.9) for _ in range(9)]
    coefs = np.stack([np.asarray(q.coefs) for q in procs])
    sigma = np.stack([np.asarray(q.sigma_u) for q in procs])
    sigma[4] -= 2 * np.linalg.eigvalsh(sigma[4])[0] * np.eye(5)  # indefinite, invertible
    whole = joint_kernel(coefs, sigma, 8)
    np.testing.assert_allclose(whole, _joint_by_inverse(coefs, sigma, 8), rtol=0, atol=1e-12)
    alone = np.stack([joint_kernel(coefs[i], sigma[i], 8) for i in range(9)])
    np.testing.assert_array_equal(alone, whole)
    monkeypatch.setattr(arlib._joint, "JOINT_CHUNK", 2)
    np.testing.assert_array_equal(joint_kernel(coefs, sigma, 8), whole)
    np.testing.assert_array_equal(joint_kernel(coefs[None], sigma[None], 8)[0], whole)


def test_with_diagonal_errors_joint_equals_generalized_from_others():
    rng = np.random.default_rng(7)
    proc = random_process(rng, n=4, p=1, radius=0.7)
    diag = arlib.var_process(np.asarray(proc.coefs), np.diag(np.diag(proc.sigma_u)))
    jc = joint_connectedness(diag, 8)
    np.testing.assert_allclose(jc.from_others, jc.generalized_from_others, atol=1e-10)
    np.testing.assert_allclose(jc.from_others, arlib.connectedness(diag, 8).from_others, atol=1e-10)
    assert abs(jc.total - jc.generalized_total) < 1e-10


# ---------------------------------------------------------------------------------------------
# joint connectedness by frequency band
# ---------------------------------------------------------------------------------------------
# J_i is a decomposition with a fixed impact matrix (all other shocks jointly, B_i = Σ M_i
# (M_i'ΣM_i)^{-1/2}), so Parseval splits its numerator by frequency exactly as Baruník–Křehlík
# split the generalized one: J_i(d) = (1/2π)∫_d ‖e_i'Ψ(e^{−iω}) B_i‖² dω / MSE_i(H).

BANDS = ((1, 5), (5, 20), (20, float("inf")))


@pytest.mark.parametrize("seed", range(5))
def test_joint_band_parts_add_up_to_the_joint_share_at_the_truncation_horizon(seed):
    # Discrete Parseval (N >= H): Σ_d J_i(d) = J_i(H) to rounding (Lastrapes & Wiesen 2021 in the
    # time domain, arlib.joint_connectedness). Tolerance 1e-10 percentage points.
    from arlib import joint_frequency_connectedness

    rng = np.random.default_rng(300 + seed)
    n = 3 + seed % 3
    proc = random_process(rng, n=n, p=2, radius=0.9)
    for H in (10, 100):
        jf = joint_frequency_connectedness(proc, bands=BANDS, truncation=H)
        jc = joint_connectedness(proc, H)
        assert jf.from_others.shape == (len(BANDS), n)
        np.testing.assert_allclose(jf.from_others.sum(axis=0), jc.from_others, rtol=0, atol=1e-10)
        assert abs(jf.total.sum() - jc.total) < 1e-10
        assert (jf.from_others > -1e-12).all()
        np.testing.assert_allclose(jf.variance_share.sum(axis=0), 1.0, atol=1e-13)
        # the generalized counterpart by band is frequency_connectedness's "from others"
        fc = arlib.frequency_connectedness(proc, bands=BANDS, truncation=H)
        np.testing.assert_allclose(jf.generalized_from_others, fc.from_others, atol=1e-12)
        # within a band: the share of i's band-d variance that all others cause, in [0, 100]
        np.testing.assert_allclose(jf.within_from_others * jf.variance_share, jf.from_others, atol=1e-12)
        assert (jf.within_from_others <= 100 + 1e-9).all()


@pytest.mark.parametrize("seed", range(3))
def test_with_diagonal_errors_joint_bands_equal_generalized_band_from_others(seed):
    # Σ diagonal: B_i is the other columns of Σ^{1/2}, so the joint band numerator is
    # Σ_{k≠i} σ_kk |Ψ_ik|² integrated over d — the generalized band "from others" (BK 2018 eq. 12,
    # whose rows need no normalisation when Σ is diagonal). Measured agreement 3e-14 pp.
    from arlib import joint_frequency_connectedness

    rng = np.random.default_rng(400 + seed)
    proc = random_process(rng, n=4, p=2, radius=0.9)
    diag = arlib.var_process(np.asarray(proc.coefs), np.diag(np.diag(proc.sigma_u)))
    jf = joint_frequency_connectedness(diag, bands=BANDS, truncation=50)
    fc = arlib.frequency_connectedness(diag, bands=BANDS, truncation=50)
    np.testing.assert_allclose(jf.from_others, fc.from_others, rtol=0, atol=1e-10)
    np.testing.assert_allclose(jf.total, fc.total, rtol=0, atol=1e-10)


def test_joint_bands_equal_the_selector_formula_integrated_exactly_over_each_band():
    # The defining formula with the selector M_i, integrated over each band exactly (no grid):
    # ∫_{d ∪ −d} ‖Σ_h a_h e^{−iωh}‖² dω = Σ_{h,l} a_h·a_l W(h − l) with a_h = e_i'Φ_h B_i and
    # W(m) = 2 ∫_{ω_lo}^{ω_hi} cos(ωm) dω. The grid's only error is at band edges (< 0.01 pp, as
    # for frequency_connectedness; measured 9.1e-5); the exact parts add up to J_i(H) to 1e-10.
    from arlib import joint_frequency_connectedness

    rng = np.random.default_rng(11)
    n, H = 4, 60
    proc = random_process(rng, n=n, p=2, radius=0.85)
    coefs, sigma = np.asarray(proc.coefs), np.asarray(proc.sigma_u)
    phi = [np.eye(n)]
    for h in range(1, H):
        phi.append(sum(phi[h - j] @ coefs[j - 1] for j in range(1, 3) if h - j >= 0))
    m = np.subtract.outer(np.arange(H), np.arange(H)).astype(float)
    exact = np.zeros((len(BANDS), n))
    for i in range(n):
        M = np.delete(np.eye(n), i, axis=1)
        w, V = np.linalg.eigh(M.T @ sigma @ M)
        B = sigma @ M @ (V / np.sqrt(w)) @ V.T  # Σ M (M'ΣM)^{-1/2}
        a = np.array([(f @ B)[i] for f in phi])  # (H, n−1)
        mse = sum((f @ sigma @ f.T)[i, i] for f in phi)
        for b, (lo, hi) in enumerate(BANDS):
            w_lo, w_hi = 2 * np.pi / hi, min(2 * np.pi / lo, np.pi)
            with np.errstate(invalid="ignore", divide="ignore"):
                W = np.where(m == 0, 2 * (w_hi - w_lo), 2 * (np.sin(w_hi * m) - np.sin(w_lo * m)) / m)
            exact[b, i] = 100 * np.einsum("hk,hl,lk->", a, W, a) / (2 * np.pi) / mse
    np.testing.assert_allclose(exact.sum(axis=0), joint_connectedness(proc, H).from_others, atol=1e-10)
    jf = joint_frequency_connectedness(proc, bands=BANDS, truncation=H)
    assert np.abs(jf.from_others - exact).max() < 1e-2  # measured 9.1e-5 pp
