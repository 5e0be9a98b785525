"""Reading quantities: a number is taken as SI, a string like "0.5 ns" or "2 cm" is
converted to the SI unit of the expected dimension.

Nothing in a string is ever evaluated. The number is matched by a regular expression
(sign, digits, decimal point, exponent) and the unit by a small grammar: unit names with
optional SI prefixes ("ns", "mm", "ohm", "e" for the elementary charge), joined by `*`,
`·`, `/` or spaces, each with an optional small integer power ("m2", "m^2", "m**2",
"s^-1", "mm²"). Only single, checked unit names reach pint, so no input can make it
compute a large power or run an expression. Gains in decibels are read by `gain_factor`.
"""

from __future__ import annotations

import functools
import math
import re

from .errors import UnitError

# canonical SI unit of every dimension lagfield reads
SI_UNITS = {
    "time": "s",
    "length": "m",
    "area": "m**2",
    "frequency": "Hz",
    "charge": "C",
    "angle": "rad",
    "dimensionless": "",
    "resistance": "ohm",
    "capacitance": "F",
    "voltage": "V",
    "current": "A",
    "magnetic_field": "T",
    "electric_field": "V/m",
}

# Largest magnitude accepted for a quantity of each dimension (SI). These refuse absurd
# input (1e300 m, overflowed strings), not unusual physics: each is far beyond any
# scenario lagfield models, and small enough that grids built from it stay finite.
LIMITS = {
    "time": 1e6,             # s, about 12 days; |start|, |stop|, step, offsets
    "length": 1e12,          # m, about 7 astronomical units
    "area": 1e6,             # m², a square kilometre
    "frequency": 1e25,       # Hz, a 40 GeV photon
    "charge": 1.0,           # C per physical particle
    "angle": 1e3,            # rad, many turns; directions repeat every 2π anyway
    "dimensionless": 1e12,   # direction vectors and plain factors
    "resistance": 1e12,      # ohm
    "capacitance": 1.0,      # F
    "voltage": 1e9,          # V
    "current": 1e9,          # A
    "magnetic_field": 1e6,   # T
    "electric_field": 1e15,  # V/m
}
MAX_POWER = 4  # largest |power| of one unit ("m^4"); bounds what pint is asked to compute
MAX_UNIT_FACTORS = 6  # unit names in one expression
MAX_TEXT = 80  # characters in a quantity string
MAX_GAIN_DB = 400.0  # |gain| in dB of voltage (a factor of 1e20)

_NUMBER = re.compile(r"\s*(?P<number>[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)"
                     r"\s*(?P<unit>.*?)\s*")
_FACTOR = re.compile(r"\s*(?P<op>[*/·⋅]?)\s*(?P<name>(?:[^\W\d²³¹]|°)+)"
                     r"(?:(?:\^|\*\*)(?P<power>[+-]?\d+)|(?P<bare>\d+)|(?P<sup>[²³]))?\s*")
_SUPERSCRIPTS = {"²": 2, "³": 3}
_EXAMPLES = {"time": '"0.5 ns"', "length": '"2 cm"', "frequency": '"1 THz"',
             "charge": '"-1 e"', "angle": '"5 deg"', "area": '"80 mm2"',
             "dimensionless": "0.05", "gain": '"20 dB"'}


@functools.cache
def _registry():
    import pint

    return pint.UnitRegistry()


def _label(where: str) -> str:
    return where or "value"


def _noun(dimension: str) -> str:
    """"a time", "an electric field", "a plain number" (for dimensionless)."""
    noun = "plain number" if dimension == "dimensionless" else dimension.replace("_", " ")
    return f"an {noun}" if noun[0] in "aeiou" else f"a {noun}"


def _factors(text: str, where: str) -> list[tuple[str, int]]:
    """[(unit name, power)] of a unit expression, or a UnitError."""
    factors = []
    position = 0
    while position < len(text):
        match = _FACTOR.match(text, position)
        if match is None or match.end() == position or (not factors and match["op"] == "/"):
            raise UnitError(f"{_label(where)}: cannot read the unit '{text}' (write unit names "
                            "such as ns, mm2, V/m or ohm, joined by *, / or spaces)")
        if match["power"] is not None:
            power = int(match["power"])
        elif match["bare"] is not None:
            power = int(match["bare"])
        else:
            power = _SUPERSCRIPTS.get(match["sup"], 1)
        if not 0 < abs(power) <= MAX_POWER:
            raise UnitError(f"{_label(where)}: power {power} of '{match['name']}' in '{text}' "
                            f"is outside -{MAX_POWER}..{MAX_POWER} (and not 0)")
        factors.append((match["name"], -power if match["op"] == "/" else power))
        if len(factors) > MAX_UNIT_FACTORS:
            raise UnitError(f"{_label(where)}: the unit '{text}' has more than "
                            f"{MAX_UNIT_FACTORS} parts")
        position = match.end()
    return factors


def _unit(text: str, where: str):
    """The pint Unit of a unit expression ("" is dimensionless), checked by the grammar."""
    ureg = _registry()
    unit = ureg.Unit("")
    for name, power in _factors(text, where):
        if name.lower() == "db":
            raise UnitError(f"{_label(where)}: decibels are accepted for gains only")
        try:
            known = bool(ureg.parse_unit_name(name))
        except Exception:  # noqa: BLE001 - pint's reasons all mean "not a unit name"
            known = False
        if not known:
            raise UnitError(f"{_label(where)}: unknown unit '{name}' in '{text}'")
        unit = unit * ureg.Unit(name) ** power
    return unit


def _dimension_of(unit) -> str | None:
    """The name of the dimension in SI_UNITS that `unit` has, if any."""
    ureg = _registry()
    for dimension, si in SI_UNITS.items():
        if ureg.Unit(si).dimensionality == unit.dimensionality:
            return dimension
    return None


def _factor(unit, dimension: str, shown: str, where: str) -> float:
    """SI factor of `unit` for `dimension`; a plain-words UnitError on a mismatch."""
    si = _registry().Unit(SI_UNITS[dimension])
    if unit.dimensionality != si.dimensionality:
        found = _dimension_of(unit)
        what = _noun(found) if found else f"in {unit:~}"
        expected = SI_UNITS[dimension] or "a plain number"
        raise UnitError(f"{_label(where)}: '{shown}' is {what}, not {_noun(dimension)} "
                        f"(expected a unit convertible to {expected})")
    return float((1.0 * unit).to(si).magnitude)


def unit_factor(unit: str, dimension: str, *, where: str = "") -> float:
    """Factor that turns a value in `unit` into the SI unit of `dimension`.

    >>> unit_factor("ns", "time")
    1e-09
    """
    if not isinstance(unit, str) or len(unit) > MAX_TEXT:
        raise UnitError(f"{_label(where)}: expected a unit name such as \"ns\", got {unit!r}")
    return _factor(_unit(unit.strip(), where), dimension, unit, where)


def _split(text: str, what: str, where: str) -> tuple[float, str]:
    """(number, unit text) of a quantity string, the number checked to be finite."""
    match = _NUMBER.fullmatch(text) if len(text) <= MAX_TEXT else None
    if match is None:
        example = _EXAMPLES.get(what, '"0.5 ns"')
        how = {"dimensionless": "a number", "gain": "decibels of voltage or a plain factor"
               }.get(what, "a number and a unit")
        raise UnitError(f"{_label(where)}: cannot read '{text}' as {_noun(what)}; write "
                        f"{how}, like {example}")
    number = float(match["number"])
    if not math.isfinite(number):
        raise UnitError(f"{_label(where)}: the number in '{text}' is too large")
    return number, match["unit"]


def _checked(value: float, dimension: str, shown, where: str) -> float:
    limit = LIMITS[dimension]
    if not math.isfinite(value):
        raise UnitError(f"{_label(where)}: {shown!r} is not a finite number")
    if abs(value) > limit:
        unit = SI_UNITS[dimension].replace("**2", "²")
        raise UnitError(f"{_label(where)}: {shown!r} is beyond the accepted magnitude of "
                        f"{limit:g} {unit}".rstrip() + f" for {_noun(dimension)}")
    return value


def to_si(value, dimension: str, *, where: str = "") -> float:
    """A number (already SI) or a string with a unit ("2 cm") as a finite SI float within
    LIMITS. A string without a unit is accepted for dimensionless quantities only."""
    if isinstance(value, bool) or not isinstance(value, int | float | str):
        kind = "true/false" if isinstance(value, bool) else type(value).__name__
        raise UnitError(f"{_label(where)}: expected {_noun(dimension)} "
                        f"(a number or a string like {_EXAMPLES.get(dimension, '1.0')}), "
                        f"got {kind} {value!r}")
    if not isinstance(value, str):
        return _checked(float(value), dimension, value, where)
    number, unit_text = _split(value, dimension, where)
    if not unit_text and SI_UNITS[dimension]:
        raise UnitError(f"{_label(where)}: '{value}' has no unit; write it as a number (SI, "
                        f"{SI_UNITS[dimension]}) or with a unit, like "
                        f"{_EXAMPLES.get(dimension, repr(value + ' ' + SI_UNITS[dimension]))}")
    factor = _factor(_unit(unit_text, where), dimension, value, where)
    return _checked(number * factor, dimension, value, where)


def gain_factor(value, *, where: str = "") -> float:
    """A voltage gain as a factor: "20 dB" → 10^(20/20) = 10; a plain number is the
    factor itself."""
    if isinstance(value, str):
        number, unit_text = _split(value, "gain", where)
        if unit_text.lower() == "db":
            if abs(number) > MAX_GAIN_DB:
                raise UnitError(f"{_label(where)}: '{value}' is beyond ±{MAX_GAIN_DB:g} dB")
            return 10.0 ** (number / 20.0)
        if unit_text:
            raise UnitError(f"{_label(where)}: a gain is in dB (of voltage) or a plain "
                            f"factor, got '{value}'")
        value = number
    factor = to_si(value, "dimensionless", where=where)
    if factor == 0.0:
        raise UnitError(f"{_label(where)}: a gain of 0 removes the signal")
    return factor
