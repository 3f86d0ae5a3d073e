"""Units of grid variables: parse CF/UDUNITS strings with pint and convert to canonical units.

Canonical units (docs/grids.md, "Units"): temperatures in ``degC``; precipitation rates (a mass
flux such as ``kg m-2 s-1`` or a depth rate such as ``m/s``) in ``mm/day``. A mass
flux of water becomes a depth rate through the density of liquid water, taken as
exactly 1000 kg m-3 (so 1 kg m-2 of water is 1 mm). Other quantities keep the units
the file states. Every conversion is affine, ``y = scale * x + offset``; the two
numbers come from pint, so no conversion factor is typed in by hand here.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import xarray as xr

from envlink.errors import InputError

if TYPE_CHECKING:
    import pint

__all__ = ["Conversion", "parse_units", "canonical_conversion", "WATER_DENSITY_KG_M3", "unit_conversion",
           "convert_units", "step_days"]

#: Density of liquid water used to turn a mass flux into a depth rate (kg m-3).
WATER_DENSITY_KG_M3 = 1000.0

#: Spellings found in files that pint does not read as intended.
_ALIASES = {
    "degk": "K",
    "deg_k": "K",
    "degrees_k": "K",
    "degree_k": "K",
    "kelvins": "K",
    "degc": "degC",
    "deg_c": "degC",
    "degrees_c": "degC",
    "degree_c": "degC",
    "celsius": "degC",
    "degrees_celsius": "degC",
    "degree_celsius": "degC",
    "c": "degC",
    "°c": "degC",
    "degf": "degF",
    "deg_f": "degF",
    "degrees_f": "degF",
    "degree_f": "degF",
    "fahrenheit": "degF",
    "degrees_fahrenheit": "degF",
    "°f": "degF",
    "1": "dimensionless",
    "": "dimensionless",
    "fraction": "dimensionless",
    "mm/d": "mm/day",
    "mm d-1": "mm/day",
    "mm day-1": "mm/day",
    "mm/day": "mm/day",
}

_EXPONENT = re.compile(r"(?<![\w*^])([A-Za-z]+)\^?(-?\d+)(?![\w.])")


@functools.lru_cache(maxsize=1)
def _registry() -> pint.UnitRegistry:
    import pint  # imported on first use: grids in degrees Celsius never need it

    return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


def _to_pint_text(text: str) -> str:
    """Rewrite UDUNITS syntax (``kg m-2 s-1``, ``m^2``, ``m.s-1``) into pint syntax."""
    t = text.strip()
    alias = _ALIASES.get(t.lower())
    if alias is not None:
        return alias
    t = t.replace("·", " ").replace(".", " ") if re.search(r"[A-Za-z]\.[A-Za-z]", t) else t
    t = _EXPONENT.sub(lambda m: f"{m.group(1)}**{m.group(2)}", t)
    t = re.sub(r"\s+", " ", t).strip()
    t = re.sub(r"(?<=[\w)])\s+(?=[\w(])", " * ", t)
    return t


def parse_units(text: str, *, variable: str = "the variable") -> pint.Unit:
    """Parse a units string as written in CF files into a pint unit.

    Parameters
    ----------
    text : str
        Units as stated (UDUNITS syntax such as ``"kg m-2 s-1"`` or pint syntax).
    variable : str
        Name used in the error message.

    Returns
    -------
    pint.Unit

    Raises
    ------
    InputError
        When the units cannot be read; the message says how to declare them.

    Examples
    --------
    >>> str(parse_units("kg m-2 s-1"))
    'kilogram / meter ** 2 / second'
    >>> str(parse_units("degK"))
    'kelvin'
    """
    ureg = _registry()
    try:
        unit = ureg.parse_units(_to_pint_text(str(text)))
    except Exception as exc:  # pint raises several unrelated types for bad text
        raise InputError(
            f"The units {text!r} of {variable} are not recognised ({type(exc).__name__}). "
            "Declare them with units='K' (say; any units pint reads, e.g. "
            "'degC', 'K', 'degF', 'kg m-2 s-1', 'mm/day', '1')."
        ) from None
    return unit


@dataclass(frozen=True)
class Conversion:
    """An affine conversion ``y = scale * x + offset`` from ``source`` to ``target`` units."""

    source: str
    target: str
    scale: float
    offset: float
    note: str

    @property
    def is_identity(self) -> bool:
        """True when the conversion leaves values unchanged."""
        return self.scale == 1.0 and self.offset == 0.0


def _affine(unit: pint.Unit, target: str, divide_by: pint.Quantity | None = None) -> tuple[float, float]:
    ureg = _registry()
    q0 = ureg.Quantity(0.0, unit)
    q1 = ureg.Quantity(1024.0, unit)
    if divide_by is not None:
        q0, q1 = q0 / divide_by, q1 / divide_by
    y0 = float(q0.to(target).magnitude)
    y1 = float(q1.to(target).magnitude)
    return (y1 - y0) / 1024.0, y0


def canonical_conversion(
    text: str, *, variable: str = "the variable", standard_name: str = ""
) -> tuple[Conversion, bool]:
    """Find the conversion of ``text`` units to envlink's canonical units.

    Parameters
    ----------
    text : str
        Units as stated in the file (or declared by the user).
    variable : str
        Name used in messages.
    standard_name : str
        CF standard name (or long name) of the variable; a name containing
        ``precipitation`` or ``rain`` together with units of length or mass per area
        marks an amount per time step.

    Returns
    -------
    (Conversion, bool)
        The conversion, and whether the values are an *amount per time step*
        (mm or kg m-2) that still has to be divided by each step's length in days
        to become a rate in mm/day.

    Examples
    --------
    >>> c, per_step = canonical_conversion("K")
    >>> c.target, c.scale, c.offset, per_step
    ('degC', 1.0, -273.15, False)
    >>> c, _ = canonical_conversion("kg m-2 s-1")
    >>> c.target, c.scale
    ('mm/day', 86400.0)
    """
    if _ALIASES.get(str(text).strip().lower()) == "degC" or str(text).strip() == "degC":
        # already canonical: pint (a costly import) is not needed to say so
        return Conversion(str(text), "degC", 1.0, 0.0, f"units {text} -> degC"), False
    ureg = _registry()
    unit = parse_units(text, variable=variable)
    dim = ureg.Quantity(1.0, unit).dimensionality
    name = standard_name.lower()
    precip_like = any(w in name for w in ("precip", "rain", "snowfall"))
    rho = ureg.Quantity(WATER_DENSITY_KG_M3, "kg/m**3")
    if dim == ureg.Quantity(1.0, "K").dimensionality:
        scale, offset = _affine(unit, "degC")
        target = "degC"
        note = f"units {text} -> degC"
        if scale != 1.0:
            note += f" (x * {scale:.10g} {offset:+.10g})"
        elif offset:
            note += f" (x {offset:+.10g})"
        return Conversion(str(text), target, scale, offset, note), False
    if dim == ureg.Quantity(1.0, "kg/m**2/s").dimensionality:
        scale, offset = _affine(unit, "mm/day", divide_by=rho)
        note = (
            f"units {text} -> mm/day (x * {scale:g}; water density "
            f"{WATER_DENSITY_KG_M3:g} kg m-3)"
        )
        return Conversion(str(text), "mm/day", scale, offset, note), False
    if dim == ureg.Quantity(1.0, "m/s").dimensionality:
        scale, offset = _affine(unit, "mm/day")
        note = f"units {text} -> mm/day (x * {scale:g})"
        return Conversion(str(text), "mm/day", scale, offset, note), False
    if precip_like and dim == ureg.Quantity(1.0, "kg/m**2").dimensionality:
        scale, offset = _affine(unit, "mm", divide_by=rho)
        note = (
            f"units {text} per time step -> mm/day (x * {scale:g} / step length in days; "
            f"water density {WATER_DENSITY_KG_M3:g} kg m-3)"
        )
        return Conversion(str(text), "mm/day", scale, offset, note), True
    if precip_like and dim == ureg.Quantity(1.0, "m").dimensionality:
        scale, offset = _affine(unit, "mm")
        note = f"units {text} per time step -> mm/day (x * {scale:g} / step length in days)"
        return Conversion(str(text), "mm/day", scale, offset, note), True
    return Conversion(str(text), str(text), 1.0, 0.0, ""), False


def unit_conversion(variable: str, raw_attrs: Mapping[str, Any], declared: str | None, timed: bool,
                    label: str, notes: list[str]) -> tuple[Conversion, bool]:
    """The conversion to canonical units and whether values are amounts per time step."""
    units_text = declared if declared is not None else raw_attrs.get("units")
    if declared is not None:
        notes.append(
            f"units declared as {declared!r}"
            + (f" (file says {raw_attrs['units']!r})" if raw_attrs.get("units") not in (None, declared) else "")
        )
    if units_text is None:
        raise InputError(
            f"The variable {variable!r} in {label} has no units attribute. Declare its units with "
            "units='degC' (say; any units pint reads, '1' for a dimensionless quantity)."
        )
    hint = " ".join(str(raw_attrs.get(k, "")) for k in ("standard_name", "long_name")) + " " + variable
    conv, per_step = canonical_conversion(str(units_text), variable=repr(variable), standard_name=hint)
    if per_step and not timed:
        raise InputError(
            f"{variable!r} holds amounts per time step ({units_text}); a static grid has no "
            "step to turn them into a rate. Declare a rate with units='mm/day' if it is one."
        )
    if not conv.is_identity or per_step:
        notes.append(conv.note)
    elif conv.source != conv.target:
        notes.append(f"units {conv.source} read as {conv.target}")
    return conv, per_step


def convert_units(values: xr.DataArray, conv: Conversion, per_step: bool, days: np.ndarray | None) -> xr.DataArray:
    """Apply :func:`unit_conversion`'s result (``days``: each time step's length, for per-step amounts).

    The one home of these operations, so a grid read whole and one read cell by cell
    (:mod:`envlink.grids.archive`) get the same float values, bit for bit.
    """
    if conv.is_identity and not per_step:
        return values
    if values.dtype != np.float64:
        values = values.astype(np.float64)
    if conv.scale != 1.0:
        values = values * conv.scale
    if conv.offset != 0.0:
        values = values + conv.offset
    if per_step:
        values = values / xr.DataArray(days, dims="time")
    return values


def step_days(starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """Length in days of each time cell ``[start, end)``."""
    s, e = np.asarray(starts), np.asarray(ends)
    if s.dtype.kind == "M":
        return (e - s) / np.timedelta64(1, "D")
    return np.array([(b - a).total_seconds() / 86400.0 for a, b in zip(s, e, strict=True)])
