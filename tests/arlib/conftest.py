"""Shared fixtures for arlib tests: simulated data from known processes (seeded)."""

from __future__ import annotations

import numpy as np
import pytest


def simulate(
    coefs: np.ndarray, sigma: np.ndarray, T: int, seed: int, c: np.ndarray | None = None
) -> np.ndarray:
    """T rows of a VAR(p) driven by Gaussian noise, after a 200-row burn-in (plain loop, no arlib)."""
    rng = np.random.default_rng(seed)
    p, n, _ = coefs.shape
    chol = np.linalg.cholesky(sigma)
    total = T + 200
    y = np.zeros((total, n))
    c = np.zeros(n) if c is None else c
    for t in range(p, total):
        y[t] = c + sum(coefs[i] @ y[t - 1 - i] for i in range(p)) + chol @ rng.standard_normal(n)
    return y[200:]


A1 = np.array([[0.5, 0.1, 0.0], [0.2, 0.3, -0.1], [0.0, 0.25, 0.4]])
A2 = np.array([[-0.2, 0.0, 0.05], [0.1, 0.1, 0.0], [0.0, -0.1, 0.15]])
SIGMA = np.array([[1.0, 0.3, 0.2], [0.3, 2.0, -0.4], [0.2, -0.4, 0.5]])


@pytest.fixture(scope="session")
def var2_data() -> np.ndarray:
    """(400, 3) rows from a stable VAR(2) with intercept (parameters A1, A2, SIGMA above)."""
    return simulate(np.stack([A1, A2]), SIGMA, 400, seed=20240611, c=np.array([0.1, -0.2, 0.3]))
