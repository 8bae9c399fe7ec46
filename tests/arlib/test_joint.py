"""Joint connectedness (Lastrapes & Wiesen 2021, Economic Modelling 94, 681–691) against identities.

Checks: (1) the joint share of all others equals 1 − the Cholesky own share with i ordered last
(the projection identity at the core of the paper); (2) it equals the paper's defining formula
with the selector M_i, written out here directly; (3) with diagonal Σ it equals the generalized
"from others" share (Pesaran–Shin 1998 / Diebold–Yilmaz 2012).
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


def test_with_diagonal_errors_joint_equals_generalized_from_others():
    rng = np.random.default_rng(7)
    proc = random_process(rng, n=4, p=1, radius=0.7)
    diag = arlib.var_process(np.asarray(proc.coefs), np.diag(np.diag(proc.sigma_u)))
    jc = joint_connectedness(diag, 8)
    np.testing.assert_allclose(jc.from_others, jc.generalized_from_others, atol=1e-10)
    np.testing.assert_allclose(jc.from_others, arlib.connectedness(diag, 8).from_others, atol=1e-10)
    assert abs(jc.total - jc.generalized_total) < 1e-10
