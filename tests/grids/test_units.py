"""Unit conversion to canonical units, checked against pint and the SI definitions."""

from __future__ import annotations

import json

import numpy as np
import pint
import pytest
from numpy.testing import assert_allclose
from reference.cf_conventions import (
    FAHRENHEIT_OFFSET,
    FAHRENHEIT_PER_CELSIUS,
    KELVIN_AT_ZERO_CELSIUS,
    SECONDS_PER_DAY,
    WATER_DENSITY_KG_M3,
)

from envlink import InputError, open_grid
from envlink.grids.units import canonical_conversion, parse_units
from grids._writers import simple_grid

LAT = np.array([0.5, 1.5])
LON = np.array([10.5, 11.5])
UREG = pint.UnitRegistry()


def _grid(tmp_path, data, units, name="v", time=None, time_attrs=None, extra=None, **attrs):
    t = np.array([0.0, 31.0]) if time is None else time
    return simple_grid(tmp_path / f"{name}.nc", data, lat=LAT, lon=LON, time=t, name=name,
                       attrs={"units": units, **attrs}, time_attrs=time_attrs, extra=extra)


def test_kelvin_to_celsius(tmp_path):
    raw = np.array([273.15, 300.0, 250.5, 310.25] * 2, dtype="float64").reshape(2, 2, 2)
    g = open_grid(_grid(tmp_path, raw, "K"))
    # SI brochure §2.3.1: t/°C = T/K - 273.15; and pint's own conversion.
    assert_allclose(g.values, raw - KELVIN_AT_ZERO_CELSIUS, rtol=0.0, atol=1e-12)
    assert_allclose(g.values, UREG.Quantity(raw, "kelvin").to("degC").magnitude, rtol=0.0, atol=1e-12)
    assert g.attrs["units"] == "degC"
    assert "units K -> degC (x -273.15)" in json.loads(g.attrs["envlink_conventions"])


def test_fahrenheit_to_celsius(tmp_path):
    raw = np.array([32.0, 212.0, -40.0, 98.6] * 2, dtype="float32").reshape(2, 2, 2)
    g = open_grid(_grid(tmp_path, raw, "degF"))
    # NIST SP 811 (from memory): t/°C = (t/°F - 32) / 1.8; 212 °F = 100 °C, -40 °F = -40 °C.
    by_hand = (raw.astype(np.float64) - FAHRENHEIT_OFFSET) / FAHRENHEIT_PER_CELSIUS
    assert g.dtype == np.float64  # converted values are float64 even from float32 storage
    assert_allclose(g.values, by_hand, rtol=0.0, atol=1e-12)
    assert_allclose(g.values, UREG.Quantity(raw.astype(np.float64), "degF").to("degC").magnitude,
                    rtol=0.0, atol=1e-12)


def test_precipitation_flux_to_mm_per_day(tmp_path):
    raw = np.array([1e-5, 3.2e-5, 0.0, 1.1e-4] * 2, dtype="float32").reshape(2, 2, 2)
    g = open_grid(_grid(tmp_path, raw, "kg m-2 s-1", name="pr", standard_name="precipitation_flux"))
    # 1 kg m-2 of water is 1 mm (density 1000 kg m-3); 1 day = 86400 s (SI brochure Table 8).
    by_hand = raw.astype(np.float64) / WATER_DENSITY_KG_M3 * 1000.0 * SECONDS_PER_DAY
    assert_allclose(g.values, by_hand, rtol=1e-12, atol=0.0)
    ref = (UREG.Quantity(raw.astype(np.float64), "kg/m**2/s") / UREG.Quantity(1000.0, "kg/m**3")).to("mm/day")
    assert_allclose(g.values, ref.magnitude, rtol=1e-12, atol=0.0)
    assert g.attrs["units"] == "mm/day"


def test_monthly_precipitation_amount_divided_by_month_length(tmp_path):
    raw = np.array([31.0, 62.0, 0.0, 93.0, 29.0, 58.0, 0.0, 87.0], dtype="float64").reshape(2, 2, 2)
    g = open_grid(_grid(tmp_path, raw, "mm", name="precip", long_name="monthly precipitation total"))
    # January 2000 has 31 days, February 2000 has 29 (a Gregorian leap year).
    by_hand = raw / np.array([31.0, 29.0])[:, None, None]
    assert_allclose(g.values, by_hand, rtol=0.0, atol=1e-12)
    assert any("per time step -> mm/day" in c for c in json.loads(g.attrs["envlink_conventions"]))


def test_other_units_kept(tmp_path):
    raw = np.ones((2, 2, 2))
    g = open_grid(_grid(tmp_path, raw, "W m-2", name="rad"))
    assert g.attrs["units"] == "W m-2"
    assert_allclose(g.values, raw, rtol=0.0, atol=0.0)


def test_units_option_declares_missing_units(tmp_path):
    raw = np.full((2, 2, 2), 280.0)
    p = simple_grid(tmp_path / "nounits.nc", raw, lat=LAT, lon=LON, time=np.array([0.0, 31.0]),
                    attrs={"units": "K"})
    g = open_grid(p, units="degF")
    assert_allclose(g.values, (raw - 32.0) / 1.8, rtol=0.0, atol=1e-12)
    assert "units declared as 'degF' (file says 'K')" in json.loads(g.attrs["envlink_conventions"])


def test_unknown_units_say_how_to_declare(tmp_path):
    p = _grid(tmp_path, np.ones((2, 2, 2)), "furlongs per zorkmid")
    with pytest.raises(InputError, match=r"units 'furlongs per zorkmid' of 'v' are not recognised.*units='K'"):
        open_grid(p)


def test_missing_units_say_how_to_declare(tmp_path):
    from grids._writers import lat_lon_attrs, write_nc

    ca = lat_lon_attrs()
    ca["time"] = {"units": "days since 2000-01-01", "calendar": "standard"}
    p = write_nc(tmp_path / "nu.nc", np.ones((2, 2, 2)), name="v",
                 coords={"time": np.array([0.0, 1.0]), "lat": LAT, "lon": LON}, coord_attrs=ca)
    with pytest.raises(InputError, match="has no units attribute. Declare its units with units="):
        open_grid(p)
    assert open_grid(p, units="1").attrs["units"] == "1"


@pytest.mark.parametrize(
    ("text", "pint_text"),
    [("kg m-2 s-1", "kg/m**2/s"), ("m s-1", "m/s"), ("degK", "K"), ("mm d-1", "mm/day"),
     ("kg/m2/s", "kg/m**2/s"), ("W m^-2", "W/m**2")],
)
def test_udunits_spellings_parsed(text, pint_text):
    assert UREG.Quantity(1.0, str(parse_units(text))).to(pint_text).magnitude == pytest.approx(1.0, rel=1e-15)


def test_conversion_is_affine_like_pint():
    conv, per_step = canonical_conversion("degF")
    x = np.array([-40.0, 0.0, 100.0])
    assert not per_step
    assert_allclose(conv.scale * x + conv.offset, UREG.Quantity(x, "degF").to("degC").magnitude,
                    rtol=0.0, atol=1e-12)
