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
    assert "the 10 most precise of 100 shown" in ax.get_title(loc="left")


def _categorical_table(n: int = 30) -> pd.DataFrame:
    # a text column placed before the numeric moderator in table order
    t = _table(n)
    method = np.array(["transect", "quadrat", "photo"])[np.arange(n) % 3]
    return pd.concat([pd.DataFrame({"method": method}), t], axis=1)


def test_categorical_moderator_keeps_every_figure() -> None:
    t = _categorical_table()
    fit = envlink.MetaRegression(moderators="method + sst_anom").fit(t)
    page = render_report(table=t, fit=fit, covariates=["sst_anom"], label="study")
    # map, flag bars, histogram, bubble, forest, funnel, residuals
    assert page.count("data:image/png;base64,") == 7
    assert "against sst_anom, the first numeric term of the model" in page
    assert "categories at their most common level" in page


def test_categories_only_model_has_no_bubble_but_the_other_figures() -> None:
    t = _categorical_table()
    fit = envlink.MetaRegression(moderators="C(method)").fit(t)
    page = render_report(table=t, fit=fit, covariates=["sst_anom"])
    assert page.count("data:image/png;base64,") == 6  # no bubble plot
    assert "No bubble plot: the model has no numeric moderator" in page
    page = render_report(table=t, fit=fit, moderator="method")
    assert "No bubble plot: &#x27;method&#x27; is not a numeric column" in page


def test_model_figures_name_their_level_and_order() -> None:
    from envlink.report import model_figures

    t = _table().assign(site=lambda d: [f"reef {i:02d}" for i in range(len(d))])
    fit = envlink.MetaRegression(moderators="sst_anom", level=0.9).fit(t)
    figs = {f.name: f for f in model_figures(t, fit, label="site", forest_order="label")}
    assert list(figs) == ["bubble", "forest", "funnel", "residuals"]
    for name in ("bubble", "forest", "funnel"):
        assert "90%" in figs[name].caption and "95%" not in figs[name].caption, name
    assert "labelled by site" in figs["forest"].caption
    ax = figs["forest"].figure.axes[0]
    names = [tick.get_text() for tick in ax.get_yticklabels()]
    assert names[:-1] == sorted(names[:-1]) and names[-1] == "model at typical moderator values"
    assert "90%" in ax.get_xlabel()


def test_forest_plot_values_and_summary_row() -> None:
    from scipy.stats import norm

    from envlink.report import model_figures

    t = _table()
    fit = envlink.MetaRegression().fit(t)  # the pooled effect
    forest = next(f for f in model_figures(t, fit, forest_order="effect") if f.name == "forest")
    ax = forest.figure.axes[0]
    side = next(a for a in forest.figure.axes[0].child_axes)
    values = [tick.get_text() for tick in side.get_yticklabels()]
    assert [tick.get_text() for tick in ax.get_yticklabels()][-1] == "pooled effect"
    # largest effect first; each value is y [y - z se, y + z se] (normal quantile, common practice)
    top = int(np.argmax(t["effect"]))
    y, se = t["effect"][top], np.sqrt(t["variance"][top])
    z = norm.ppf(0.975)
    assert values[0] == f"{y:.2f} [{y - z * se:.2f}, {y + z * se:.2f}]"
    pooled = fit.coefficients_.iloc[0]
    assert values[-1] == f"{pooled['estimate']:.2f} [{pooled['ci_low']:.2f}, {pooled['ci_high']:.2f}]"


def test_bad_forest_order_is_refused_with_a_suggestion() -> None:
    from envlink.errors import InputError
    from envlink.report import model_figures

    t = _table()
    with pytest.raises(InputError, match="Did you mean 'precision'"):
        model_figures(t, _fit(t), forest_order="precisoin")


def test_write_figures_writes_pngs(tmp_path) -> None:
    from envlink.report import write_figures

    t = _table()
    paths = [item.path for item in write_figures(tmp_path / "figs", t, _fit(t))]
    assert [p.name for p in paths] == ["bubble.png", "forest.png", "funnel.png", "residuals.png"]
    assert all(p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for p in paths)  # PNG signature


def test_bubble_and_funnel_use_envlinks_palette() -> None:
    from matplotlib.colors import to_hex

    from envlink.report import model_figures, plots

    t = _table()
    figs = {f.name: f.figure for f in model_figures(t, _fit(t), egger={"intercept": 0.4, "slope": 0.2})}
    bubble_lines = {to_hex(line.get_color()) for line in figs["bubble"].axes[0].get_lines()}
    assert bubble_lines == {plots._CORAL, plots._SAND}  # fitted mean, dashed prediction edges
    funnel_lines = {to_hex(line.get_color()) for line in figs["funnel"].axes[0].get_lines()}
    assert plots._CORAL in funnel_lines and plots._SEA in funnel_lines
