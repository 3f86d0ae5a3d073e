"""A report whose every user string holds one hostile text: title, columns, levels, flags, notes, grid.

The studies are invented (seeded draws); only the page's escaping and its figures are
checked (:func:`badinput.runner.run_report`), no number.
"""

from __future__ import annotations

import matplotlib
import numpy as np
import pandas as pd


def hostile_report(text: str, *, usetex: bool = False) -> str:
    """The HTML report of a small fit in which ``text`` is part of every user string."""
    from envlink.metareg.model import MetaRegression
    from envlink.report.html import render_report
    from envlink.testing import make_grid

    rng = np.random.default_rng(3)
    k = 12
    cov = f"sst {text}"
    effect = f"effect {text}"
    lat = rng.uniform(0.5, 2.5, k)
    table = pd.DataFrame({
        "study": [f"{text} {i}" for i in range(k)],
        "site_lat": lat, "site_lon": rng.uniform(10.5, 11.5, k),
        "locate_status": ["ok"] * 9 + ["flagged", "flagged", "rejected"],
        "locate_flags": [""] * 9 + [text, "plain_flag", text],
        "locate_notes": [""] * 9 + [text, text, text],
        cov: rng.normal(28.0, 1.0, k),
        f"{cov}_flags": [text] * 3 + [""] * (k - 3),
        f"{cov}_distance_km": rng.uniform(0, 20, k),
        f"{cov}_coverage": np.ones(k),
        "x": rng.normal(0.0, 1.0, k),
        "zone": [text if i % 2 else "plain" for i in range(k)],
        effect: rng.normal(0.3, 0.2, k),
        "variance": rng.uniform(0.01, 0.05, k),
    })
    included = np.ones(k, dtype=bool)
    included[-1] = False
    table["fit_included"] = included
    fit = MetaRegression(moderators="x + C(zone)").fit(table[included].reset_index(drop=True),
                                                       effect=effect, variance="variance")
    grid = make_grid(lat=[0.5, 1.5, 2.5], lon=[10.5, 11.5], periods=3, seed=1, name=f"grid {text}",
                     units=text)
    grid.attrs["long_name"] = text
    with matplotlib.rc_context({"text.usetex": usetex}):
        return render_report(table=table, fit=fit, covariates=[cov], moderator="x", effect=effect,
                             variance="variance", field=grid, provenance={"note": text, text: [text]},
                             title=f"Report {text}", label="study", units={cov: text},
                             locate_summary={text: text})
