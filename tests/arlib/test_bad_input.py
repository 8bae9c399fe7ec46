"""Bad input: every refusal is an InvalidInputError (a ValueError) naming argument, numbers, fix."""

from __future__ import annotations

import re

import numpy as np
import pytest

import arlib


@pytest.fixture(scope="module")
def data() -> np.ndarray:
    return np.random.default_rng(11).standard_normal((120, 3))


@pytest.fixture(scope="module")
def fit(data: np.ndarray) -> arlib.VARFit:
    return arlib.fit_var(data, 2, names=["rates", "equity", "fx"])


def test_nan_and_inf_name_row_and_series(data: np.ndarray) -> None:
    y = data.copy()
    y[17, 1] = np.nan
    with pytest.raises(arlib.InvalidInputError, match=r"NaN at row 17 of series 'equity'"):
        arlib.fit_var(y, 1, names=["rates", "equity", "fx"])
    y[5, 2] = np.inf
    with pytest.raises(ValueError, match=r"2 non-finite value\(s\); the first is inf at row 5"):
        arlib.select_lags(y, 2)


def test_too_few_rows_states_counts_and_minimum() -> None:
    y = np.random.default_rng(0).standard_normal((40, 8))
    msg = (
        r"`y` has 40 rows; with lags=4 that leaves 36 observations for 33 coefficients per "
        r"equation \(8 series × 4 lags \+ 1 deterministic\), fewer than the 41 needed for a "
        r"nonsingular 8×8 residual covariance; use at least 45 rows"
    )
    with pytest.raises(arlib.InvalidInputError, match=msg):
        arlib.fit_var(y, 4)
    arlib.fit_var(np.random.default_rng(0).standard_normal((45, 8)), 4)  # the minimum works
    with pytest.raises(arlib.InvalidInputError, match=r"max_lags=6 .* use at least"):
        arlib.select_lags(y, 6)


def test_constant_series_is_named(data: np.ndarray) -> None:
    y = data.copy()
    y[:, 2] = 1.5
    with pytest.raises(
        arlib.InvalidInputError, match=r"series 'fx' is constant \(every row equals 1.5\)"
    ):
        arlib.fit_var(y, 1, names=["rates", "equity", "fx"])


def test_collinear_series_names_regressors(data: np.ndarray) -> None:
    y = data.copy()
    y[:, 2] = 2.0 * y[:, 0] - y[:, 1]
    with pytest.raises(
        arlib.InvalidInputError, match=r"collinear regressors \['a.L1', 'b.L1', 'c.L1'\]"
    ):
        arlib.fit_var(y, 1, names=["a", "b", "c"])
    # a series equal to a lag of another is fitted exactly: named, whatever its units
    z = data[:, :2].copy()
    z[1:, 1] = z[:-1, 0]
    exact = (
        r"series 'b' fitted exactly \(residual variance [-+.e\d]+ times its own variance\), so "
        r"the residual covariance is singular: it is an exact function of the lagged series"
    )
    for scale in (1.0, 1e7, 1e-7):
        with pytest.raises(arlib.InvalidInputError, match=exact):
            arlib.fit_var(z * [1.0, scale], 1, names=["a", "b"])
    # residuals exactly linearly dependent (c_t = a_t + b_t − 0.5 a_{t−1}, c's residual is
    # a's plus b's): the series involved are named, in any units
    w = data.copy()
    w[1:, 2] = w[1:, 0] + w[1:, 1] - 0.5 * w[:-1, 0]
    dependent = (
        r"residuals of \['a', 'b', 'c'\] that are exactly linearly dependent .* one of these "
        r"series is an exact linear combination of the others' current values"
    )
    for scale in (1.0, 1e7):
        with pytest.raises(arlib.InvalidInputError, match=dependent):
            arlib.fit_var(w * [scale, 1.0, 1.0], 1, names=["a", "b", "c"])


@pytest.mark.parametrize("lags", [0, -1, 1.5, True, "2"])
def test_bad_lags(data: np.ndarray, lags: object) -> None:
    with pytest.raises(arlib.InvalidInputError, match="`lags` must"):
        arlib.fit_var(data, lags)  # type: ignore[arg-type]  # bad lags, refused on purpose


def test_bad_horizon(fit: arlib.VARFit) -> None:
    for func in (
        arlib.impulse_responses,
        arlib.variance_decomposition,
        arlib.connectedness,
        arlib.ma_coefficients,
    ):
        with pytest.raises(arlib.InvalidInputError, match=r"`horizon` must be >= 1, got 0"):
            func(fit, 0)


def test_wrong_shapes() -> None:
    with pytest.raises(arlib.InvalidInputError, match=r"got shape \(4, 5, 6\)"):
        arlib.fit_var(np.zeros((4, 5, 6)), 1)
    with pytest.raises(arlib.InvalidInputError, match="`names` has 2 entries for 3 series"):
        arlib.fit_var(np.random.default_rng(1).standard_normal((50, 3)), 1, names=["a", "b"])
    with pytest.raises(arlib.InvalidInputError, match=r"`sigma_u` must have shape \(2, 2\)"):
        arlib.var_process(np.zeros((1, 2, 2)), np.eye(3))
    with pytest.raises(arlib.InvalidInputError, match=r"`coefs` must have shape \(p, n, n\)"):
        arlib.var_process(np.zeros((1, 2, 3)), np.eye(2))
    with pytest.raises(arlib.InvalidInputError, match="positive definite"):
        arlib.var_process(np.zeros((2, 2)), np.array([[1.0, 2.0], [2.0, 1.0]]))
    with pytest.raises(arlib.InvalidInputError, match="must be a VAR fit"):
        arlib.impulse_responses(np.eye(2), 4)  # type: ignore[arg-type]  # refused on purpose


def test_unknown_options(data: np.ndarray, fit: arlib.VARFit) -> None:
    with pytest.raises(
        arlib.InvalidInputError, match=r"`trend` must be one of \['n', 'c', 'ct'\], got 'linear'"
    ):
        arlib.fit_var(data, 1, trend="linear")
    with pytest.raises(arlib.InvalidInputError, match="`shocks` must be one of"):
        arlib.impulse_responses(fit, 4, shocks="sign")
    with pytest.raises(arlib.InvalidInputError, match="`method` must be one of"):
        arlib.variance_decomposition(fit, 4, method="unit")
    with pytest.raises(arlib.InvalidInputError, match="`order` must list all 3 series"):
        arlib.impulse_responses(fit, 4, order=[0, 1])
    with pytest.raises(arlib.InvalidInputError, match="`order` only applies"):
        arlib.impulse_responses(fit, 4, shocks="generalized", order=[2, 1, 0])
    with pytest.raises(arlib.InvalidInputError, match="names series 'bonds'"):
        arlib.impulse_responses(fit, 4, order=["bonds", "equity", "fx"])


def _unit_root() -> arlib.VARProcess:
    with pytest.warns(arlib.UnstableProcessWarning):
        return arlib.var_process(np.eye(2), np.eye(2), [1.0, 1.0])


# (call, the argument the message must name, a word of the suggested fix); each call used to
# raise a raw TypeError/ValueError/LinAlgError, warn and truncate, or blame another argument
BAD_ARGUMENTS = {
    "granger caused float": (lambda f: arlib.granger_test(f, 0.0, 1), "caused", "series name"),
    "granger caused None": (lambda f: arlib.granger_test(f, None, 1), "caused", "series name"),
    "granger causing float": (lambda f: arlib.granger_test(f, 0, 2.5), "causing", "column index"),
    "irf order float": (lambda f: arlib.impulse_responses(f, 3, order=2.0), "order", "series name"),
    "fevd order float": (
        lambda f: arlib.variance_decomposition(f, 3, order=1.5),
        "order",
        "series name",
    ),
    "bands order float": (lambda f: arlib.irf_bands(f, 3, order=2.0), "order", "series name"),
    "peak series float": (lambda f: arlib.spectral_peak(f, series=1.0), "series", "series name"),
    "companion text": (lambda f: arlib.companion_matrix("x"), "coefs", "numeric"),
    "companion 2-D": (
        lambda f: arlib.companion_matrix(np.zeros((2, 3))),
        "coefs",
        r"coefs\[None\]",
    ),
    "companion NaN": (
        lambda f: arlib.companion_matrix(np.full((1, 2, 2), np.nan)),
        "coefs",
        "finite",
    ),
    "mean of a unit root": (lambda f: _unit_root().mean, "coefs", "stable"),
    "fit complex y": (lambda f: arlib.fit_var(f.y + 1j, 1), "y", "real part"),
    "rolling complex y": (lambda f: arlib.rolling_var(f.y * 1j, 60, 1, 5), "y", "real part"),
    "select_lags complex y": (lambda f: arlib.select_lags(f.y * 1j, 2), "y", "real part"),
    "process complex coefs": (
        lambda f: arlib.var_process(0.5j * np.eye(2), np.eye(2)),
        "coefs",
        "real part",
    ),
    "process complex sigma": (
        lambda f: arlib.var_process(0.5 * np.eye(2), (1 + 0j) * np.eye(2)),
        "sigma_u",
        "real part",
    ),
    "spectrum complex freqs": (
        lambda f: arlib.spectral_density(f, [0.1 + 1j]),
        "freqs",
        "real part",
    ),
    "spectrum freqs None": (lambda f: arlib.spectral_density(f, None), "freqs", "got None"),
    "fit y None": (lambda f: arlib.fit_var(None, 1), "y", "got None"),
    "forecast columns": (lambda f: arlib.forecast(f, f.y[:, :2], 3), "y", "n=3 columns"),
    "simulate initial columns": (
        lambda f: arlib.simulate_var(f, 5, np.random.default_rng(0), initial=np.zeros((2, 2))),
        "initial",
        r"\(2, 3\)",
    ),
    "names not a sequence": (lambda f: arlib.fit_var(f.y, 1, names=5), "names", "one per series"),
    "rolling names": (lambda f: arlib.rolling_var(f.y, 60, 1, 5, names=3), "names", "one per"),
    "concat non-results": (lambda f: arlib.RollingVAR.concat([1, 2]), "parts", "rolling_var"),
    "concat None": (lambda f: arlib.RollingVAR.concat(None), "parts", "list of RollingVAR"),
}


@pytest.mark.parametrize("case", list(BAD_ARGUMENTS))
def test_bad_arguments_get_one_clear_error(case: str, fit: arlib.VARFit) -> None:
    """Every bad argument is an InvalidInputError (no raw TypeError, LinAlgError or silent
    truncation of complex numbers — warnings are errors in this suite) that names the argument
    and says how to fix it."""
    call, arg, fix = BAD_ARGUMENTS[case]
    with pytest.raises(arlib.InvalidInputError, match=f"`{arg}`") as info:
        call(fit)
    assert re.search(fix, str(info.value)), str(info.value)
