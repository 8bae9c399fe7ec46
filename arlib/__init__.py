"""arlib: vector autoregressions, their responses, decompositions, causality tests and connectedness.

Pure computation over numpy arrays; no I/O. Data may also be a pandas or polars DataFrame
(numeric columns are the series, a date column or DatetimeIndex dates the rows); results then
carry the names and dates, and offer ``to_frame()`` / ``to_polars()`` in a long layout.
Conventions: data `y` is (T, n), rows oldest first;
coefficients (p, n, n) with ``coefs[i]`` = A_{i+1}; responses (H+1, n, n) [horizon, response,
shock]; decompositions (H, n, n) [step, variable, shock].
"""

from __future__ import annotations

from ._bands import Bands, ConnectednessBands, connectedness_bands, fevd_bands, irf_bands
from ._causality import GrangerResult, granger_test
from ._decompose import Connectedness, connectedness, variance_decomposition
from ._diagnostics import NormalityResult, PortmanteauResult, normality_test, portmanteau_test
from ._estimate import (
    LagSelection,
    VARFit,
    VARProcess,
    companion_matrix,
    fit_var,
    select_lags,
    var_process,
)
from ._forecast import Forecast, forecast
from ._frequency import FrequencyConnectedness, frequency_connectedness
from ._joint import (
    JointConnectedness,
    JointFrequencyConnectedness,
    joint_connectedness,
    joint_frequency_connectedness,
)
from ._labels import LabelledArray
from ._moments import (
    SpectralPeak,
    autocovariance,
    simulate_var,
    spectral_density,
    spectral_peak,
    stationary_covariance,
)
from ._quantile import QuantileRegression, QuantileVARFit, quantile_regression, quantile_var
from ._quantile_rolling import RollingQuantileVAR, rolling_quantile_var
from ._responses import impulse_responses, ma_coefficients
from ._rolling import RollingVAR, rolling_var
from ._shrink import ShrinkageFit, shrinkage_bands, shrinkage_draws, shrinkage_var
from ._shrink_rolling import RollingShrinkage, rolling_shrinkage
from ._sizes import minimum_window
from ._tvp import TimeVaryingVAR, TVPState, tvp_var
from ._validate import ArlibError, InvalidInputError, UnstableProcessWarning, VARLike

__all__ = [
    "ArlibError",
    "Bands",
    "Connectedness",
    "ConnectednessBands",
    "Forecast",
    "FrequencyConnectedness",
    "GrangerResult",
    "InvalidInputError",
    "JointConnectedness",
    "JointFrequencyConnectedness",
    "LabelledArray",
    "LagSelection",
    "NormalityResult",
    "PortmanteauResult",
    "QuantileRegression",
    "QuantileVARFit",
    "RollingQuantileVAR",
    "RollingShrinkage",
    "RollingVAR",
    "ShrinkageFit",
    "SpectralPeak",
    "TVPState",
    "TimeVaryingVAR",
    "UnstableProcessWarning",
    "VARFit",
    "VARLike",
    "VARProcess",
    "autocovariance",
    "companion_matrix",
    "connectedness",
    "connectedness_bands",
    "fevd_bands",
    "fit_var",
    "forecast",
    "frequency_connectedness",
    "granger_test",
    "impulse_responses",
    "irf_bands",
    "joint_connectedness",
    "joint_frequency_connectedness",
    "ma_coefficients",
    "minimum_window",
    "normality_test",
    "portmanteau_test",
    "quantile_regression",
    "quantile_var",
    "rolling_quantile_var",
    "rolling_shrinkage",
    "rolling_var",
    "select_lags",
    "shrinkage_bands",
    "shrinkage_draws",
    "shrinkage_var",
    "simulate_var",
    "spectral_density",
    "spectral_peak",
    "stationary_covariance",
    "tvp_var",
    "var_process",
    "variance_decomposition",
]
