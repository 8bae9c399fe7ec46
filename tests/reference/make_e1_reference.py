"""Print arlib beside the book values and statsmodels for the Lütkepohl (2005) E1 checks.

The book values (test_lutkepohl_e1.py names the source of each: recalled from memory, or quoted
with page and equation) are literals in the test; statsmodels is run live there. This script only
shows the agreement, for a person re-checking the file. Run:

    .venv/bin/python -m tests.reference.make_e1_reference
"""

from __future__ import annotations

import numpy as np


def main() -> None:
    from statsmodels.tsa.api import VAR

    import arlib
    from tests.reference import test_lutkepohl_e1 as book
    from tests.reference._data import e1_growth_1960_1978

    y = e1_growth_1960_1978()
    ours = arlib.fit_var(y, 2)
    ref = VAR(y).fit(2)
    np.set_printoptions(precision=5, suppress=True)
    ours_coefs = np.concatenate([ours.intercept[:, None], ours.coefs[0], ours.coefs[1]], axis=1)
    book_coefs = np.concatenate([book.BOOK_NU[:, None], book.BOOK_A1, book.BOOK_A2], axis=1)
    print("book coefficients (recalled), max |arlib − book|:",
          f"{np.abs(ours_coefs - book_coefs).max():.2e} (half unit 5e-4)")  # fmt: skip
    mse = arlib.forecast(ours, steps=2, estimation_uncertainty=True).mse[1] * 1e4
    print("book eq. 3.5.18 Σ̂_ŷ(2)·1e4 (quoted); arlib:\n", mse)
    print("  |arlib − book| / half unit:\n", np.abs(mse - book.BOOK_MSE2_E4)
          / book.BOOK_MSE2_HALF_UNIT_E4)  # fmt: skip
    print("statsmodels: max |Δ coefs|", f"{np.abs(ours.coefs - ref.coefs).max():.2e}",
          "max |Δ Σ̂_u|", f"{np.abs(ours.sigma_u - ref.sigma_u).max():.2e}")  # fmt: skip
    g = arlib.granger_test(ours, 0, [1, 2])
    t = ref.test_causality(0, [1, 2], kind="f")
    print(f"Granger income,cons -> invest: arlib F {g.f_stat:.6f} p {g.p_value:.6f} df {g.df}; "
          f"statsmodels F {t.test_statistic:.6f} p {t.pvalue:.6f} df {t.df}")  # fmt: skip
    print(
        "lag choice (max 4): arlib",
        arlib.select_lags(y, 4).best,
        "statsmodels",
        {k: int(v) for k, v in VAR(y).select_order(4).selected_orders.items()},
    )


if __name__ == "__main__":
    main()
