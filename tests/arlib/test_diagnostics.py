"""Residual checks behave as their null distributions say on data that satisfy the null."""

from __future__ import annotations

import numpy as np
import pytest

import arlib


def test_portmanteau_on_correct_model_and_on_misspecified(var2_data: np.ndarray) -> None:
    good = arlib.portmanteau_test(arlib.fit_var(var2_data, 2), 12)
    assert good.df == 9 * 10 and good.max_lag == 12
    assert good.adjusted_statistic > good.statistic  # T²/(T−i) > T
    assert good.p_value > 0.01
    # a VAR(1) fitted to data with a strong second lag leaves autocorrelated residuals
    rng = np.random.default_rng(1)
    e = rng.standard_normal((500, 2))
    z = np.zeros((500, 2))
    for t in range(2, 500):
        z[t] = 0.1 * z[t - 1] + 0.7 * z[t - 2] + e[t]
    bad = arlib.portmanteau_test(arlib.fit_var(z, 1), 10)
    assert bad.p_value < 1e-6
    with pytest.raises(arlib.InvalidInputError, match=r"`max_lag` must be >= 2"):
        arlib.portmanteau_test(arlib.fit_var(z, 1), 1)


def test_normality_flags_heavy_tails() -> None:
    rng = np.random.default_rng(2)
    gauss = rng.standard_normal((2000, 2))
    heavy = rng.standard_t(3, size=(2000, 2))
    ok = arlib.normality_test(arlib.fit_var(gauss, 1))
    assert ok.df == 4 and ok.p_value > 0.001
    assert ok.statistic == pytest.approx(ok.skewness_stat + ok.kurtosis_stat)
    bad = arlib.normality_test(arlib.fit_var(heavy, 1))
    assert bad.p_value < 1e-10 and bad.kurtosis_stat > bad.skewness_stat
