"""The BCG vaccine trials table: 13 trials of BCG against tuberculosis.

Source: Colditz GA, Brewer TF, Berkey CS, et al. (1994). Efficacy of BCG vaccine in
the prevention of tuberculosis: meta-analysis of the published literature. JAMA
271(9):698-702; the standard worked example for meta-regression on absolute
latitude since Berkey CS, Hoaglin DC, Mosteller F, Colditz GA (1995). A random-effects
regression model for meta-analysis. Statistics in Medicine 14:395-411.

The counts below are written FROM MEMORY. They are cross-checked in
tests/metareg/test_bcg.py only by quantities recomputed from them (log risk ratios
against a direct computation, and DL / REML fits against statsmodels and an
independent scipy maximisation), never by recalled published outputs.

Columns: vacc_tb / vacc_ok = vaccinated with / without tuberculosis, ctrl_tb / ctrl_ok = the
same for the unvaccinated; latitude_abs = absolute latitude of the trial (degrees); year =
publication year; allocation = treatment allocation (random, alternate, systematic).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: (trial, vacc_tb, vacc_ok, ctrl_tb, ctrl_ok, latitude_abs, year, allocation) -- from memory
ROWS = [
    (1, 4, 119, 11, 128, 44, 1948, "random"),
    (2, 6, 300, 29, 274, 55, 1949, "random"),
    (3, 3, 228, 11, 209, 42, 1960, "random"),
    (4, 62, 13536, 248, 12619, 52, 1977, "random"),
    (5, 33, 5036, 47, 5761, 13, 1973, "alternate"),
    (6, 180, 1361, 372, 1079, 44, 1953, "alternate"),
    (7, 8, 2537, 10, 619, 19, 1973, "random"),
    (8, 505, 87886, 499, 87892, 13, 1980, "random"),
    (9, 29, 7470, 45, 7232, 27, 1968, "random"),
    (10, 17, 1699, 65, 1600, 42, 1961, "systematic"),
    (11, 186, 50448, 141, 27197, 18, 1974, "systematic"),
    (12, 5, 2493, 3, 2338, 33, 1969, "systematic"),
    (13, 27, 16886, 29, 17825, 33, 1976, "systematic"),
]


def table() -> pd.DataFrame:
    """The BCG table with the log risk ratio ``es`` and its variance ``es_var``.

    ``es = log[(vacc_tb / n_t) / (ctrl_tb / n_c)]`` and
    ``es_var = 1/vacc_tb - 1/n_t + 1/ctrl_tb - 1/n_c`` (Borenstein et al. 2009, ch. 5).
    """
    df = pd.DataFrame(ROWS, columns=["trial", "vacc_tb", "vacc_ok", "ctrl_tb", "ctrl_ok", "latitude_abs", "year",
                                     "allocation"])
    nt = df["vacc_tb"] + df["vacc_ok"]
    nc = df["ctrl_tb"] + df["ctrl_ok"]
    df["es"] = np.log(df["vacc_tb"] / nt) - np.log(df["ctrl_tb"] / nc)
    df["es_var"] = 1 / df["vacc_tb"] - 1 / nt + 1 / df["ctrl_tb"] - 1 / nc
    return df
