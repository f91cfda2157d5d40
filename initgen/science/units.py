"""Units of the quantities initgen reads, parsed with cf-units (UDUNITS-2, the CF conventions' unit system).

One place turns a units attribute into a conversion: temperatures to kelvin, soil water amounts
to kg m-2 or a volume fraction, lengths to metres, suction (a length of water or a pressure) to
metres of water. Each function returns None for units it cannot use, and the caller raises a
one-line :class:`~initgen.errors.InputError` naming the variable and the layout key
(``units.<role>``) that sets its units when the file has none.

A few spellings common in model files are not UDUNITS: ``C`` (coulomb in UDUNITS) is read as
degrees Celsius for a temperature, ``fraction`` as 1, and the dedicated ``saturation_fraction``
(a fraction of the porosity) is handled by the soil module. ``mm`` of a water amount is a
depth of liquid water: 1 mm = 1 kg m-2 (density of water 1000 kg m-3, common practice).
cf-units ships the UDUNITS-2 database with its wheel, so nothing is fetched at run time.
"""

from __future__ import annotations

import functools
import re

from initgen.errors import InputError
from initgen.science.constants import RHO_WATER

__all__ = ["parse", "temperature_scale_offset", "metres_per", "pascal_per", "water_amount", "fraction_per",
           "percent_content"]

_ALIASES = {"fraction": "1", "pct": "%", "°c": "degC", "c": "degC", "deg°c": "degC"}


@functools.lru_cache(maxsize=512)
def _parse(text: str):
    import cf_units  # lazy: loading the UDUNITS-2 database is paid only when a unit is parsed

    try:
        return cf_units.Unit(text)
    except (ValueError, TypeError):
        return None


def parse(units):
    """``units`` (a string) as a cf_units.Unit, or None when it is empty or not a unit."""
    if units is None:
        return None
    text = str(units).strip()
    if not text:
        return None
    text = _ALIASES.get(text.lower(), text)
    return _parse(text) or _parse(text.lower()) or _parse(_ALIASES.get(text.lower().replace(" ", ""),
                                                                        text.replace(" ", "")))


def _convertible(u, target: str) -> bool:
    return u is not None and not u.is_unknown() and not u.is_no_unit() and u.is_convertible(_parse(target))


def temperature_scale_offset(units) -> tuple[float, float] | None:
    """(scale, offset) with ``K = scale * value + offset`` for kelvin (offset 0) or degrees
    Celsius (offset 273.15) in any UDUNITS spelling; None for anything else.

    ``C`` alone is read as degrees Celsius: in UDUNITS it is the coulomb, which a temperature
    cannot be. Temperatures on other scales (degF, degR) are refused rather than converted: no
    land model keeps its state in them, so such a unit is taken for a mistake.
    """
    u = parse(units)
    if not _convertible(u, "K"):
        return None
    offset = float(u.convert(0.0, _parse("K")))
    scale = float(u.convert(1.0, _parse("K"))) - offset
    if abs(scale - 1.0) > 1e-12 or offset not in (0.0, 273.15):
        return None
    return 1.0, offset


def metres_per(units) -> float | None:
    """Metres per unit of a length (m, cm, mm, km, ft ...), or None."""
    u = parse(units)
    return float(u.convert(1.0, _parse("m"))) if _convertible(u, "m") else None


def pascal_per(units) -> float | None:
    """Pascals per unit of a pressure (Pa, hPa, kPa, MPa, bar ...), or None."""
    u = parse(units)
    return float(u.convert(1.0, _parse("Pa"))) if _convertible(u, "Pa") else None


_MASS_WORD = re.compile(r"(^|[^a-z])k?g([^a-z]|$)")


def fraction_per(units) -> float | None:
    """Fraction (of 1) per unit of a dimensionless quantity (1, %, m3 m-3 ...); None for units
    with a dimension, and for mass ratios (kg kg-1), which are not volume fractions. Empty units
    are 1."""
    if units is None or not str(units).strip():
        return 1.0
    u = parse(units)
    if u is None or not u.is_dimensionless() or u.is_no_unit():
        return None
    return float(u.convert(1.0, _parse("1")))


def water_amount(units) -> tuple[str, float] | None:
    """How a soil water amount is given: ('mass', kg m-2 per unit) for a mass per area or a depth
    of liquid water (1 mm = 1 kg m-2); ('volume', m3 m-3 per unit) for a volume fraction (1,
    m3 m-3, %); None otherwise (a mass ratio such as kg kg-1 is no volume fraction)."""
    u = parse(units)
    if u is None:
        return None
    if _convertible(u, "kg m-2"):
        return "mass", float(u.convert(1.0, _parse("kg m-2")))
    if _convertible(u, "m"):
        m = float(u.convert(1.0, _parse("m")))
        # a depth of liquid water, in m, cm or mm (x RHO_WATER, 1000 kg m-3); a furlong of soil water is a unit slip
        return ("mass", m * RHO_WATER) if 1e-3 - 1e-12 <= m <= 1.0 + 1e-12 else None
    if u.is_dimensionless() and not _MASS_WORD.search(str(units).lower()):
        f = float(u.convert(1.0, _parse("1")))
        # percent is refused: of the soil volume, or of saturation? (the layout says which)
        return ("volume", f) if f == 1.0 else None
    return None


def percent_content(values, role, role_name: str):
    """Sand or clay content in percent, decided by the units alone (never by the values, which a
    block of a low-clay region could make look like fractions): percent as it is, fractions
    ('1', 'fraction', 'kg kg-1') times 100; anything else is refused, naming the layout key.

    ``role`` is anything with ``units`` and ``variables`` (a bound role)."""
    u = role.units.strip().lower()
    if u in ("%", "percent", "pct"):
        return values
    if u in ("1", "fraction", "kg kg-1", "kg/kg"):
        return values * 100.0
    raise InputError(f"variable '{role.variables[0]}' ({role_name}) has units {role.units!r}; initgen reads sand and "
                     f"clay as '%' or as fractions '1': set units.{role_name} in the layout")
