"""Units of the fields: which spellings mean the same quantity, and converting between them.

Data to be classified with a saved model must be in the model's units. This
module knows a small table of the units geophysical fields come in (pressure,
temperature, length and height, geopotential, speed, dimensionless) and
converts between members of one family with ``value * factor + offset``.
Units of different families (K against Pa) are refused.

Why a table and not a units library: the inputs are a handful of gridded
geophysical variables whose ``units`` attributes use a few UDUNITS spellings
("Pa", "hPa", "m2 s-2", "degC"). ``cf-units`` parses every UDUNITS
expression but binds the compiled UDUNITS-2 C library; ``pint`` is pure
Python but does not read the CF spellings ("m2 s-2", "degrees_north")
without a further add-on. Forty lines of table cover what the job meets, are
tested directly, and add no dependency; an unknown spelling is refused with a
message, never guessed.
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import UserError


@dataclass(frozen=True)
class Unit:
    """A unit as ``SI value = value * factor + offset`` within a family of one physical dimension."""

    family: str
    factor: float
    offset: float = 0.0


def _family(name: str, entries: dict[tuple[str, ...], tuple[float, float]]) -> dict[str, Unit]:
    return {spelling: Unit(name, factor, offset) for spellings, (factor, offset) in entries.items() for spelling in spellings}


# Factors are exact by definition of the units (SI brochure, 9th edition, 2019; the knot and the
# degree Fahrenheit from their definitions: 1 kn = 1852 m / 3600 s, 0 degF = 459.67 degR).
TABLE: dict[str, Unit] = {
    **_family("pressure", {
        ("Pa", "pascal", "N m-2"): (1.0, 0.0),
        ("hPa", "mbar", "millibar", "mb", "hectopascal"): (100.0, 0.0),
        ("kPa",): (1000.0, 0.0),
        ("dbar", "decibar"): (1.0e4, 0.0),
        ("bar",): (1.0e5, 0.0),
    }),
    **_family("temperature", {
        ("K", "kelvin", "degK"): (1.0, 0.0),
        ("degC", "deg_C", "celsius", "degree_Celsius", "degrees_Celsius", "°C"): (1.0, 273.15),
        ("degF", "deg_F", "fahrenheit", "degree_Fahrenheit", "°F"): (5.0 / 9.0, 459.67 * 5.0 / 9.0),
    }),
    **_family("length", {
        ("m", "meter", "metre", "meters", "metres", "gpm"): (1.0, 0.0),
        ("dam", "decameter", "decametre"): (10.0, 0.0),
        ("km", "kilometer", "kilometre"): (1000.0, 0.0),
        ("cm",): (0.01, 0.0),
        ("mm",): (0.001, 0.0),
    }),
    **_family("specific energy", {("m2 s-2", "m2/s2", "J kg-1", "J/kg"): (1.0, 0.0)}),
    **_family("speed", {
        ("m s-1", "m/s"): (1.0, 0.0),
        ("km h-1", "km/h"): (1000.0 / 3600.0, 0.0),
        ("kn", "knot", "knots", "kt"): (1852.0 / 3600.0, 0.0),
    }),
    **_family("dimensionless", {("1", "", "-"): (1.0, 0.0), ("%", "percent"): (0.01, 0.0), ("1e-3", "0.001", "g kg-1", "g/kg"): (0.001, 0.0)}),
}


def _spelling(text: str | None) -> str:
    """Normalise a units attribute: no ``**`` or ``^`` exponent marks, single blanks."""
    text = "" if text is None else str(text)
    return " ".join(text.replace("**", "").replace("^", "").split())


def lookup(text: str | None, what: str) -> Unit:
    """The table entry of a units attribute; ``what`` names its owner in the error.

    Raises
    ------
    UserError
        If the spelling is not in :data:`TABLE`.
    """
    key = _spelling(text)
    if key in TABLE:
        return TABLE[key]
    lowered = {k.lower(): v for k, v in TABLE.items()}  # no two entries differ only by case
    if key.lower() in lowered:
        return lowered[key.lower()]
    raise UserError(f"{what} has units '{text}', which regimes cannot convert (known: Pa, hPa, K, degC, m, dam, m2 s-2, m s-1, 1, ...); convert the data first")


def conversion(source: str | None, target: str | None, what: str, against: str = "the model") -> tuple[float, float] | None:
    """``(factor, offset)`` taking values in ``source`` units to ``target`` units, or None when they are the same.

    Parameters
    ----------
    source, target : str
        Units attributes, e.g. ``"hPa"`` and ``"Pa"``.
    what : str
        Names the data in error messages, e.g. ``"variable 'psl'"``.
    against : str
        Names what ``target`` belongs to in error messages.

    Raises
    ------
    UserError
        If either is unknown, or they measure different quantities (e.g. K and Pa).
    """
    if _spelling(source) == _spelling(target):
        return None
    a, b = lookup(source, what), lookup(target, against)
    if a.family != b.family:
        raise UserError(
            f"{what} has units '{source}' ({a.family}) but {against} has '{target}' ({b.family}); "
            f"these cannot be converted; give data of the same quantity as {against}"
        )
    factor = a.factor / b.factor
    offset = (a.offset - b.offset) / b.factor
    if factor == 1.0 and offset == 0.0:
        return None
    return factor, offset
