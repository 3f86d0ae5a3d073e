"""Property tests on every parser and on locate -> attach -> export: nothing escapes but bad-input errors.

Each property runs a few hundred examples in the default run (derandomised, so CI is
reproducible) and 10,000 in the slow run (``python -m pytest -m slow
tests/badinput/test_properties.py``; the ``slow`` marker is deselected by default,
see pyproject.toml). The properties are the project's rules (docs/locate.md,
docs/extract.md): a parser returns a value in range or raises envlink's
:class:`~envlink.errors.InputError` (a :class:`~envlink.errors.FieldError` for a
cell); a stage keeps every input row, in order, its columns unchanged, and writes a
table that reads back.
"""

from __future__ import annotations

import importlib
import math
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, assume, settings
from hypothesis import strategies as st

from envlink.errors import EnvlinkWarning, InputError, ModelError

CI_EXAMPLES = 300
PIPELINE_CI_EXAMPLES = 100
SLOW_EXAMPLES = 10_000


def _tiers(ci: int = CI_EXAMPLES) -> list:
    return [pytest.param(ci, id="ci"), pytest.param(SLOW_EXAMPLES, id="slow", marks=pytest.mark.slow)]


def _run(prop, n: int) -> None:
    """Run a ``@given`` property with ``n`` examples (derandomised in the default run)."""
    settings(max_examples=n, deadline=None, derandomize=n < SLOW_EXAMPLES, database=None,
             suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much,
                                    HealthCheck.data_too_large])(prop)()


# Text that looks like what people type into cells: digits, signs, separators, letters,
# degree marks, look-alike minus signs, invisible characters, and anything else.
_PIECES = st.sampled_from(["-", "+", "\u2212", ".", ",", ";", "/", " ", "°", "'", '"', "\u2032", "N", "S",
                           "E", "W", "e", "E5", "deg", "\u200b", "\xa0", "--", "(", ")", "1e308", "inf",
                           "nan", "NA", "n.d.", "summer", "Mar", "2011", "13", "29", "02", "T", "Z"])
CELL = st.one_of(
    st.text(max_size=24),
    st.lists(st.one_of(_PIECES, st.integers(-400, 3000).map(str), st.floats(allow_nan=True).map(str)),
             max_size=8).map("".join),
)


@pytest.mark.parametrize("n", _tiers())
def test_coordinates_parse_or_say_why(n: int) -> None:
    from hypothesis import given

    from envlink.locate.coords import parse_coordinates, parse_lat_lon

    @given(CELL, CELL)
    def prop(a: str, b: str) -> None:
        for call in (lambda: parse_lat_lon(a, b), lambda: parse_coordinates(a)):
            try:
                c = call()
            except InputError:
                continue
            assert -90.0 <= c.lat <= 90.0 and -180.0 <= c.lon < 180.0, (a, b, c)

    _run(prop, n)


@pytest.mark.parametrize("n", _tiers())
def test_periods_parse_or_say_why(n: int) -> None:
    from hypothesis import given

    from envlink.locate.periods import parse_period

    @given(CELL, st.sampled_from([None, "dayfirst", "monthfirst"]), st.sampled_from([None, "north", "south"]))
    def prop(text: str, order: str | None, hemisphere: str | None) -> None:
        try:
            p = parse_period(text, order=order, hemisphere=hemisphere)  # type: ignore[arg-type]
        except InputError:
            return
        if p is not None and p.start is not None and p.end is not None:
            assert p.start <= p.end, (text, p)

    _run(prop, n)


@pytest.mark.parametrize("n", _tiers())
def test_numbers_in_text_keep_the_length(n: int) -> None:
    from hypothesis import given

    from envlink.tables import cell_text, number_columns, parse_numbers

    @given(st.lists(st.one_of(CELL, st.none(), st.floats(), st.integers()), min_size=1, max_size=12))
    def prop(cells: list) -> None:
        s = pd.Series(cells, dtype=object)
        values, bad = parse_numbers(s)
        assert values.shape == bad.shape == (len(cells),) and values.dtype == np.float64
        assert all(isinstance(cell_text(c), str) for c in cells)
        try:
            out = number_columns(pd.DataFrame({"c": s}), ["c"], numbers=["c"])
        except InputError:
            return
        assert out["c"].shape == (len(cells),)

    _run(prop, n)


_COLUMNS = ["x", "z", "zone", "`my x`", "`depth.m`", "nope", "np", "C", "es"]
_TOKENS = st.sampled_from(["+", "-", "*", ":", "**", "/", "(", ")", ",", "~", "|", " ", "0", "1", "2", "0.5",
                           "I(", "C(", "np.log(", "bs(", "center(", "Treatment(", "'reef'", "df=3", "`",
                           ".", "__class__", "[", "]", "x", "zone"])
FORMULA = st.one_of(st.text(max_size=30),
                    st.lists(st.one_of(st.sampled_from(_COLUMNS), _TOKENS), max_size=10).map(" ".join))


def _fit_table() -> pd.DataFrame:
    rng = np.random.default_rng(0)
    k = 12
    x = rng.uniform(0, 5, k)
    return pd.DataFrame({"es": 0.1 + 0.05 * x + rng.normal(0, 0.05, k), "es_var": rng.uniform(0.01, 0.05, k),
                         "x": x, "z": rng.normal(0, 1, k), "zone": rng.choice(["reef", "flat"], k),
                         "my x": [f"{v:.2f}".replace(".", ",") for v in x], "depth.m": x, "C": x})


@pytest.mark.parametrize("n", _tiers())
def test_formulas_fit_or_say_why(n: int) -> None:
    from hypothesis import given

    from envlink.metareg.formula import formula_variables
    from envlink.metareg.frame import model_frame, read_model_columns
    from envlink.metareg.model import MetaRegression

    table = _fit_table()

    @given(FORMULA)
    def prop(formula: str) -> None:
        try:
            variables = formula_variables(formula)
        except InputError:
            return
        assert all(isinstance(v, str) for v in variables)
        assume("__" not in formula and "import" not in formula)  # formulaic evaluates Python
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", EnvlinkWarning)
            try:
                data = read_model_columns(table, effect="es", variance="es_var", moderators=formula)
                frame = model_frame(data, effect="es", variance="es_var", moderators=formula)
                MetaRegression(moderators=formula).fit(frame)
            except (InputError, ModelError):
                return

    _run(prop, n)


def _registries() -> list[tuple[str, object]]:
    from test_doc_tables import REGISTRIES

    out = []
    for key, spec in sorted(REGISTRIES.items()):
        module, attribute = spec.split(":")
        out.append((key, getattr(importlib.import_module(module), attribute)))
    return out


@pytest.mark.parametrize("n", _tiers())
def test_registry_names_parse_or_say_why(n: int) -> None:
    from hypothesis import given

    registries = _registries()

    @given(st.sampled_from(registries), CELL, st.booleans(), st.data())
    def prop(item: tuple[str, object], text: str, real: bool, data: st.DataObject) -> None:
        _, registry = item
        if real:  # a real name in another spelling: any case, '-' or '_', spaces around
            entry = data.draw(st.sampled_from(list(registry)))  # type: ignore[call-overload]
            flips = data.draw(st.lists(st.booleans(), min_size=len(entry.name), max_size=len(entry.name)))
            spelt = "".join(("_" if f else "-") if ch in "-_" else (ch.upper() if f else ch.lower())
                            for ch, f in zip(entry.name, flips, strict=True))
            if entry.arg is not None and not entry.arg.optional:
                with pytest.raises(InputError, match=entry.name):
                    registry.parse(f" {spelt} ")  # type: ignore[attr-defined]
                return
            assert registry.parse(f" {spelt} ").entry.name == entry.name  # type: ignore[attr-defined]
            return
        try:
            choice = registry.parse(text)  # type: ignore[attr-defined]
        except InputError:
            return
        assert choice.entry.name in registry.names()  # type: ignore[attr-defined]

    _run(prop, n)


# -- locate -> attach -> export ----------------------------------------------------------

_LAT = st.one_of(st.floats(-95, 95).map(lambda v: f"{v:.3f}"), CELL, st.just(""))
_LON = st.one_of(st.floats(-200, 370).map(lambda v: f"{v:.3f}"), CELL, st.just(""))
_WHEN = st.one_of(st.sampled_from(["2000-03", "March 2000", "2000", "2000-02-30", "05/06/2000", "n.d.",
                                   "summer 2000", "1990", "2000-01-01/2000-06-30", ""]), CELL)
ROWS = st.lists(st.tuples(_LAT, _LON, _WHEN, st.text(max_size=8)), min_size=1, max_size=6)


@pytest.mark.parametrize("n", _tiers(PIPELINE_CI_EXAMPLES))
def test_locate_attach_export_keep_every_row(n: int) -> None:
    from hypothesis import given

    import envlink
    from envlink.testing import make_grid

    grid = make_grid(lat=[-1.5, -0.5, 0.5, 1.5], lon=[-1.5, -0.5, 0.5, 1.5], periods=24, seed=2)
    folder = Path(tempfile.mkdtemp(prefix="envlink-properties-"))

    @given(ROWS)
    def prop(rows: list[tuple[str, str, str, str]]) -> None:
        table = pd.DataFrame(rows, columns=["lat", "lon", "when", "note"])
        before = table.copy()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", EnvlinkWarning)
            located = envlink.locate(table, lat="lat", lon="lon", period="when")
            result = envlink.attach(located, grid, name="sst", cache_dir=None)
            paths = envlink.export_table(result, folder, formats=["csv"], force=True)
        pd.testing.assert_frame_equal(table, before)  # the input is not modified
        assert len(result) == len(table)
        for col in table.columns:
            assert result[col].tolist() == table[col].tolist(), col
        status = set(result["locate_status"])
        assert status <= {"ok", "flagged", "rejected"}, status
        values = result["sst"].to_numpy(dtype=np.float64)
        assert all(math.isnan(v) or 15.0 < v < 25.0 for v in values)  # make_grid's field: 20 + N(0, 1)
        back = pd.read_csv(paths["csv"], dtype=str, keep_default_na=False)
        assert len(back) == len(table) and list(back.columns[:4]) == list(table.columns)
        for col in table.columns:  # text survives the CSV round trip (blank stays blank)
            assert back[col].tolist() == table[col].tolist(), col

    _run(prop, n)
