"""The HTML report: escaping, sections, atomic writes, and rendering in headless Chromium."""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile

import numpy as np
import pandas as pd
import pytest

import envlink
from envlink.report import render_report, write_report
from envlink.testing import make_grid

HOSTILE = "<script>alert('x')</script>"


def _table(n: int = 30) -> pd.DataFrame:
    rng = np.random.default_rng(7)  # invented data for a render test only
    x = rng.uniform(-1.0, 1.0, n)
    v = rng.uniform(0.02, 0.2, n)
    y = 0.3 + 0.5 * x + rng.normal(0.0, np.sqrt(v + 0.05))
    status = ["ok"] * (n - 4) + ["flagged"] * 2 + ["rejected"] * 2
    return pd.DataFrame(
        {
            "study": [f"{HOSTILE}{i}" for i in range(n)],
            "effect": y,
            "variance": v,
            "sst_anom": x,
            "site_lat": rng.uniform(-10.0, -5.0, n),
            "site_lon": rng.uniform(120.0, 125.0, n),
            "locate_status": status,
            "locate_flags": [""] * (n - 4) + ["swapped_lat_lon"] * 2 + ["lat_out_of_range"] * 2,
            "locate_notes": [""] * (n - 2) + [f"lat: {HOSTILE} is not a coordinate"] * 2,
            "sst_anom_flags": ["nearest_valid_12km"] * 4 + [""] * (n - 4),
            "sst_anom_distance_km": rng.uniform(0.0, 20.0, n),
            "sst_anom_coverage": np.ones(n),
        }
    )


def _fit(table: pd.DataFrame):
    return envlink.MetaRegression(moderators="sst_anom").fit(
        table, effect="effect", variance="variance"
    )


def _grid():
    return make_grid(lat=np.arange(-10.875, -4.9, 0.25), lon=np.arange(119.125, 125.1, 0.25),
                     periods=2, seed=0)


def test_user_strings_are_escaped() -> None:
    t = _table()
    page = render_report(table=t, fit=_fit(t), covariates=["sst_anom"], moderator="sst_anom",
                         label="study", provenance={"note": HOSTILE}, title=HOSTILE)
    assert HOSTILE not in page
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in page
    # our own inline self-check is the only script element
    assert len(re.findall(r"<script>", page)) == 1


def test_sections_and_figures_present() -> None:
    t = _table()
    t.loc[1, "sst_anom_flags"] = "nearest_valid_3km"
    page = render_report(table=t, fit=_fit(t), covariates=["sst_anom"], moderator="sst_anom",
                         field=_grid(), egger={"intercept": 0.4, "slope": 0.2, "p": 0.3},
                         windows_tried=3)
    for heading in ("How far to trust this", "Locating sites and periods",
                    "Covariates and extraction QA", "Meta-regression", "Model figures"):
        assert heading in page
    # map, flag bars, histogram, bubble, forest, funnel, residuals
    assert page.count("data:image/png;base64,") == 7
    assert "3 covariate window(s)" in page
    assert "observational" in page
    assert "Standardised residuals against fitted values" in page
    # flags differing only by a distance are counted together
    assert "nearest_valid_Nkm" in page


def test_write_is_atomic_on_failure(tmp_path) -> None:
    out = tmp_path / "report.html"
    out.write_text("previous report", encoding="utf-8")

    class Broken:
        def to_dict(self):
            raise RuntimeError("model exploded")

    with pytest.raises(RuntimeError, match="model exploded"):
        write_report(out, table=_table(), fit=Broken())
    assert out.read_text(encoding="utf-8") == "previous report"
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]


@pytest.mark.requires_chromium
def test_report_renders_in_headless_chromium(tmp_path) -> None:
    t = _table()
    out = write_report(tmp_path / "report.html", table=t, fit=_fit(t), covariates=["sst_anom"],
                       moderator="sst_anom", field=_grid(), label="study",
                       egger={"intercept": 0.4, "slope": 0.2, "p": 0.3})
    profile = tempfile.mkdtemp()
    try:
        proc = subprocess.run(
            [shutil.which("chromium") or "chromium", "--headless", "--no-sandbox", "--disable-gpu",
             "--disable-quic", "--no-first-run", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
             "--enable-logging=stderr", "--v=0", "--virtual-time-budget=5000", "--dump-dom",
             out.resolve().as_uri()],
            capture_output=True, text=True, timeout=120, check=False,
        )
    finally:
        shutil.rmtree(profile, ignore_errors=True)
    assert proc.returncode == 0, proc.stderr[-2000:]
    body = re.search(r"<body[^>]*>", proc.stdout)
    assert body, proc.stdout[:500]
    figures = re.search(r'data-figures="(\d+)"', body.group(0))
    rendered = re.search(r'data-figures-rendered="(\d+)"', body.group(0))
    assert figures and rendered and int(figures.group(1)) == 7
    assert rendered.group(1) == figures.group(1)
    assert "data-js-errors" not in body.group(0)
    console_errors = [ln for ln in proc.stderr.splitlines() if "CONSOLE" in ln and "ERROR" in ln]
    assert not console_errors, console_errors


def test_dollar_signs_in_user_text_are_literal() -> None:
    # matplotlib reads "$...$" as mathtext; a study label such as "Reef $\\alpha$ survey"
    # or an unknown command like "\\foo" between dollars must not break the report
    t = _table().assign(study=lambda d: [f"Reef ${i}\\foo$ survey" for i in range(len(d))])
    page = render_report(table=t, fit=_fit(t), covariates=["sst_anom"], moderator="sst_anom",
                         label="study", title="Costs $5-$10 \\foo")
    assert "Costs $5-$10 \\foo" in page


def test_importing_the_report_leaves_the_backend_alone() -> None:
    # the report draws with matplotlib's object API; it must not switch a user's backend
    code = ("import matplotlib; matplotlib.use('svg'); import envlink.report.plots, envlink.report; "
            "print(matplotlib.get_backend())")
    import sys

    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "svg"


def test_forest_plot_subset_is_the_most_precise_effects() -> None:
    from envlink.report import plots

    y = np.arange(100, dtype=float)
    v = np.linspace(1.0, 0.01, 100)  # the last effects are the most precise
    fig = plots.forest_plot([f"s{i}" for i in range(100)], y, v, max_rows=10)
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_yticklabels()] == [f"s{i}" for i in range(90, 100)]
    assert "the 10 most precise of 100 shown" in ax.get_title()
