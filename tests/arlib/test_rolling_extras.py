"""Rolling frequency-band and joint connectedness equal the single-fit functions window by window.

Checks: each window of `rolling_var(..., frequency_bands=, joint=True)` against
`frequency_connectedness` and `joint_connectedness` of `fit_var` on the same rows (1e-8, the
engine's documented agreement); the bands add up to the stored Diebold–Yilmaz index when the
horizon equals the truncation (Baruník & Křehlík 2018, discrete Parseval); joint connectedness by
band equals `joint_frequency_connectedness` window by window and its bands add up to the
Lastrapes–Wiesen joint shares at the truncation horizon (Lastrapes & Wiesen 2021 with the
Parseval split of Baruník & Křehlík 2018 eqs. 10–12).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import arlib
from arlib import InvalidInputError

BANDS = ((1, 5), (5, 20), (20, math.inf))


def _data(T: int = 400, n: int = 3, seed: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = np.array([[0.4, 0.2, 0.0], [0.1, 0.3, 0.2], [0.0, 0.25, -0.3]])[:n, :n]
    y = np.zeros((T, n))
    e = rng.normal(size=(T, n)) @ np.linalg.cholesky(np.eye(n) + 0.4)[: n, : n].T
    for t in range(1, T):
        y[t] = a @ y[t - 1] + e[t]
    return 100.0 + y  # levels far from zero, as a price in points


def test_every_window_equals_the_single_fit_functions() -> None:
    y = _data()
    r = arlib.rolling_var(y, 120, 2, 10, step=37, frequency_bands=BANDS, band_truncation=60, joint=True)
    assert r.band_periods == tuple((float(a), float(b)) for a, b in BANDS) and r.band_truncation == 60
    for w in range(len(r)):
        s, e = int(r.starts[w]), int(r.ends[w])
        fit = arlib.fit_var(y[s : e + 1], 2)
        fc = arlib.frequency_connectedness(fit, bands=BANDS, truncation=60)
        jc = arlib.joint_connectedness(fit, 10)
        np.testing.assert_allclose(r.band_tables[w], fc.tables, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.band_total[w], fc.total, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.band_within[w], fc.within_total, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.band_to_others[w], fc.to_others, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.band_from_others[w], fc.from_others, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.joint_from_others[w], jc.from_others, rtol=1e-8, atol=1e-8)
        assert math.isclose(r.joint_total[w], jc.total, rel_tol=1e-8)
        jb = arlib.joint_frequency_connectedness(fit, bands=BANDS, truncation=60)
        np.testing.assert_allclose(r.joint_band_from_others[w], jb.from_others, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.joint_band_total[w], jb.total, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(r.joint_band_variance[w], jb.variance_share, rtol=1e-8, atol=1e-8)


def test_joint_bands_add_up_to_the_joint_shares_at_the_truncation_horizon() -> None:
    y = _data(seed=4)
    r = arlib.rolling_var(y, 150, 1, 30, step=40, frequency_bands=BANDS, band_truncation=30, joint=True)
    np.testing.assert_allclose(r.joint_band_from_others.sum(axis=1), r.joint_from_others, atol=1e-9)
    np.testing.assert_allclose(r.joint_band_total.sum(axis=1), r.joint_total, atol=1e-9)
    np.testing.assert_allclose(r.joint_band_variance.sum(axis=1), 1.0, atol=1e-12)
    whole = arlib.rolling_var(y, 150, 1, 30, step=40, frequency_bands=BANDS, band_truncation=30, joint=True)
    late = arlib.rolling_var(y, 150, 1, 30, step=40, frequency_bands=BANDS, band_truncation=30, joint=True,
                             ends=whole.ends[2:])
    assert np.array_equal(late.joint_band_from_others, whole.joint_band_from_others[2:])  # bit-identical
    long = r.to_frame("joint_band_from_others")
    assert list(long.columns[-3:]) == ["band", "series", "value"] and len(long) == r.joint_band_from_others.size


def test_bands_add_up_to_the_stored_index_at_the_truncation_horizon() -> None:
    y = _data(seed=9)
    r = arlib.rolling_var(y, 150, 1, 40, step=50, frequency_bands=BANDS, band_truncation=40)
    np.testing.assert_allclose(r.band_total.sum(axis=1), r.total_connectedness, atol=1e-9)
    np.testing.assert_allclose(r.band_tables.sum(axis=1), r.pairwise, atol=1e-9)


def test_skipped_windows_have_nan_extras() -> None:
    y = _data(T=300)
    y[100:200, 2] = y[100:200, 1] * 2.0 + 1.0  # an exact duplicate: those windows are skipped
    r = arlib.rolling_var(y, 80, 1, 5, step=20, frequency_bands=BANDS, joint=True)
    assert (~r.ok).any() and r.ok.any()
    assert np.isnan(r.band_total[~r.ok]).all() and np.isnan(r.joint_total[~r.ok]).all()
    assert np.isfinite(r.band_total[r.ok]).all() and np.isfinite(r.joint_total[r.ok]).all()


def test_without_the_options_nothing_extra_is_computed() -> None:
    r = arlib.rolling_var(_data(T=200), 100, 1, 5, step=50)
    assert r.band_tables is None and r.joint_total is None and r.joint_band_total is None
    only_bands = arlib.rolling_var(_data(T=200), 100, 1, 5, step=50, frequency_bands=BANDS)
    assert only_bands.band_total is not None and only_bands.joint_band_total is None


def test_bad_bands_are_refused_before_fitting() -> None:
    with pytest.raises(InvalidInputError, match="frequency_bands"):
        arlib.rolling_var(_data(T=200), 100, 1, 5, frequency_bands=[(3, 10)])


def test_band_and_joint_numbers_do_not_depend_on_grouping(monkeypatch: pytest.MonkeyPatch) -> None:
    """Bands and joint shares of a window are the same bits in one run, in `ends=` blocks of odd
    sizes joined by `concat`, and with the band kernel cut into chunks of one window: each
    window's arithmetic depends on its own coefficients and Σ̂_u only."""
    y = _data(T=420, seed=11)
    kw = {"frequency_bands": BANDS, "band_truncation": 45, "joint": True}
    full = arlib.rolling_var(y, 90, 2, 7, **kw)
    assert full.ok.all() and len(full) > 300
    fields = ("band_tables", "band_total", "band_share", "joint_from_others", "joint_total")
    parts = np.split(full.ends, [1, 4, 11, 40, 107, 250])
    joined = arlib.RollingVAR.concat([arlib.rolling_var(y, 90, 2, 7, ends=e, **kw) for e in parts])
    for field in fields:
        np.testing.assert_array_equal(getattr(joined, field), getattr(full, field), err_msg=field)
    monkeypatch.setattr(arlib._frequency, "BAND_CHUNK_BYTES", 1)  # one window per chunk
    small = arlib.rolling_var(y, 90, 2, 7, **kw)
    for field in fields:
        np.testing.assert_array_equal(getattr(small, field), getattr(full, field), err_msg=field)
