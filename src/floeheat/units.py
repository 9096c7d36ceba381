"""Unit conversion through a CF-aware units library (pint with cf-xarray's registry).

No conversion table lives in the code: every factor comes from the registry.
"""

from __future__ import annotations

import numpy as np

__all__ = ["parse_units", "convert", "conversion"]

_ALIASES = {
    # Spellings seen in CF files that the registry does not know by themselves.
    "PSU": "psu",
    "degree_C": "degC",
    "degrees_C": "degC",
    "deg_C": "degC",
    "Celsius": "degC",
    "celsius": "degC",
}


def _registry():
    from cf_xarray.units import units

    return units


def parse_units(text: str):
    """Parse a CF/UDUNITS units string into a pint unit.

    Raises ``ValueError`` naming the string when the registry cannot read it.

    Examples
    --------
    >>> str(parse_units("W m-2"))
    'watt / meter ** 2'
    """
    if text is None:
        raise ValueError("no units given")
    text = str(text).strip()
    text = _ALIASES.get(text, text)
    ureg = _registry()
    try:
        return ureg.Unit(text)
    except Exception as exc:  # pint raises several error types
        raise ValueError(f"units {text!r} are not understood ({exc})") from exc


def _as_float(values):
    return np.asarray(values, dtype="float64")


def _same_spelling(from_units, to_units) -> bool:
    """Both strings spell the same units exactly (after the alias table)."""
    if from_units is None or to_units is None:
        return False
    a, b = str(from_units).strip(), str(to_units).strip()
    return bool(a) and _ALIASES.get(a, a) == _ALIASES.get(b, b)


def conversion(from_units: str, to_units: str):
    """Return a function converting numbers from ``from_units`` to ``to_units``.

    Offset units (degC, K) are handled. Raises ``ValueError`` when the units are
    unknown or of different dimensions.

    Examples
    --------
    >>> f = conversion("K", "degC")
    >>> round(float(f(273.15)), 10)
    0.0
    >>> float(conversion("%", "1")(50.0))
    0.5
    """
    if _same_spelling(from_units, to_units):
        # the file already uses the wanted spelling: nothing to convert, and no need to
        # load the registry (about 2 s per process, most of a small job's work)
        return _as_float
    ureg = _registry()
    src = parse_units(from_units)
    dst = parse_units(to_units)
    # Practical salinity is dimensionless in the registry but not a fraction: "psu"
    # and "1" both mean the PSS-78 number itself.
    if {str(src), str(dst)} <= {"practical_salinity_unit", "dimensionless"}:
        return _as_float
    if src.dimensionality != dst.dimensionality:
        raise ValueError(
            f"units {from_units!r} cannot be converted to {to_units!r} "
            f"({src.dimensionality} vs {dst.dimensionality})"
        )
    if src == dst:
        return _as_float

    def _convert(values):
        q = ureg.Quantity(np.asarray(values, dtype="float64"), src)
        return np.asarray(q.to(dst).magnitude, dtype="float64")

    return _convert


def convert(values, from_units: str, to_units: str):
    """Convert ``values`` from ``from_units`` to ``to_units``.

    Examples
    --------
    >>> float(convert(1000.0, "J m-2", "MJ m-2"))
    0.001
    >>> float(convert(10000.0, "Pa", "dbar"))
    1.0
    >>> float(convert(10.0, "mS cm-1", "S m-1"))
    1.0
    """
    return conversion(from_units, to_units)(values)
