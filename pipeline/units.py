"""Reading quantities: a number is taken as SI, a string like "0.5 ns" or "2 cm" is
converted with pint to the SI unit of the expected dimension."""

from __future__ import annotations

import functools

from .errors import UnitError

# canonical SI unit of every dimension lagfield reads
SI_UNITS = {
    "time": "s",
    "length": "m",
    "frequency": "Hz",
    "charge": "C",
    "angle": "rad",
    "dimensionless": "",
}


@functools.cache
def _registry():
    import pint

    return pint.UnitRegistry()


def unit_factor(unit: str, dimension: str, *, where: str = "") -> float:
    """Factor that turns a value in `unit` into the SI unit of `dimension`.

    >>> unit_factor("ns", "time")
    1e-09
    """
    si = SI_UNITS[dimension]
    ureg = _registry()
    try:
        quantity = ureg.Quantity(1.0, unit) if unit else ureg.Quantity(1.0)
        return float(quantity.to(si).magnitude) if si else float(quantity.to("").magnitude)
    except Exception as exc:  # pint raises several classes; all mean the same to a user
        place = f" for {where}" if where else ""
        raise UnitError(
            f"unit '{unit}'{place} is not a {dimension} unit ({type(exc).__name__}: {exc})"
        ) from None


def to_si(value, dimension: str, *, where: str = "") -> float:
    """A number (already SI) or a string with a unit ("2 cm") as an SI float."""
    if isinstance(value, bool):
        raise UnitError(f"{where or 'value'}: expected a {dimension}, got a boolean")
    if isinstance(value, int | float):
        return float(value)
    if not isinstance(value, str):
        raise UnitError(f"{where or 'value'}: expected a {dimension}, got {value!r}")
    ureg = _registry()
    try:
        quantity = ureg.Quantity(value)
    except Exception as exc:
        raise UnitError(f"{where or 'value'}: cannot read '{value}' as a {dimension} "
                        f"({type(exc).__name__}: {exc})") from None
    si = SI_UNITS[dimension]
    try:
        magnitude = quantity.to(si).magnitude if si else quantity.to("").magnitude
    except Exception:
        raise UnitError(f"{where or 'value'}: '{value}' is not a {dimension} "
                        f"(expected something convertible to '{si or 'dimensionless'}')"
                        ) from None
    return float(magnitude)
