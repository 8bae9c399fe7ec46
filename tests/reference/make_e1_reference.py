"""Print the numbers the Lütkepohl (2005) E1 checks compare against, computed with statsmodels.

The book's printed values (Sec. 3.2.3 estimates, Sec. 3.6.2 Granger test, Sec. 4.3 lag choices) were
recalled from memory; this script confirms them with statsmodels (a reference library, used only in
tests) and prints them rounded as the book prints them. Run:

    .venv/bin/python -m tests.reference.make_e1_reference
"""

from __future__ import annotations

import numpy as np


def main() -> None:
    from statsmodels.tsa.api import VAR

    from tests.reference._data import e1_growth_1960_1978

    y = e1_growth_1960_1978()
    res = VAR(y).fit(2)
    np.set_printoptions(precision=3, suppress=True)
    print("nobs", res.nobs)
    print("intercept", np.round(res.intercept, 3))
    print("A1", np.round(res.coefs[0], 3))
    print("A2", np.round(res.coefs[1], 3))
    print("1e4 * sigma_u", np.round(res.sigma_u * 1e4, 3))
    test = res.test_causality(0, [1, 2], kind="f")
    print("Granger income,cons -> invest: F", round(test.test_statistic, 2), "df", test.df)
    print("lag choice (max 4):", dict(VAR(y).select_order(4).selected_orders))


if __name__ == "__main__":
    main()
