"""The public surface of arlib is pinned: a change here must be deliberate."""

from __future__ import annotations

import arlib

PINNED = [
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


def test_all_is_pinned_and_sorted() -> None:
    assert arlib.__all__ == PINNED
    assert sorted(arlib.__all__) == arlib.__all__


def test_every_public_name_exists_and_is_documented() -> None:
    for name in arlib.__all__:
        obj = getattr(arlib, name)
        assert obj.__doc__, f"{name} has no docstring"


def test_error_hierarchy() -> None:
    assert issubclass(arlib.InvalidInputError, arlib.ArlibError)
    assert issubclass(arlib.InvalidInputError, ValueError)
    assert issubclass(arlib.UnstableProcessWarning, UserWarning)


def test_model_arguments_are_typed_with_the_protocol() -> None:
    """Every public function taking a model types it: `VARLike` where a fit or a given process
    will do, `VARFit` where the estimate's own numbers are needed — never `Any` (mypy checks
    callers against these)."""
    import inspect

    needs_fit = {"granger_test", "portmanteau_test", "normality_test", "irf_bands",
                 "fevd_bands", "connectedness_bands"}  # fmt: skip
    seen = 0
    for name in arlib.__all__:
        obj = getattr(arlib, name)
        if not inspect.isfunction(obj):
            continue
        params = inspect.signature(obj).parameters
        for arg in ("fit", "process"):
            if arg in params:
                seen += 1
                want = "VARFit" if name in needs_fit else "VARLike"
                if name in ("shrinkage_draws", "shrinkage_bands"):  # need the posterior: a ShrinkageFit
                    want = "ShrinkageFit"
                assert params[arg].annotation == want, (name, params[arg].annotation)
    assert seen == 21  # frequency_connectedness, joint_connectedness, joint_frequency_connectedness, shrinkage_draws/_bands included
