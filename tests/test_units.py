"""Quantity strings: read by a regular expression and a small unit grammar, never
evaluated; errors in plain words."""

from __future__ import annotations

import math
import subprocess
import sys

import pytest

from lagfield.errors import UnitError
from lagfield.units import LIMITS, SI_UNITS, gain_factor, to_si, unit_factor

E_C = 1.602176634e-19  # elementary charge, exact by definition (SI Brochure, 9th ed., 2019)

# every quantity string SPEC.md shows, with its SI value worked out by hand
SPEC_EXAMPLES = [
    ("2 cm", "length", 0.02),
    ("0.5 ns", "time", 5e-10),
    ("1 THz", "frequency", 1e12),
    ("-0.5 ps", "time", -5e-13),
    ("80 mm2", "area", 80e-6),
    ("1 cm2", "area", 1e-4),
    ("50 ohm", "resistance", 50.0),
    ("4 pF", "capacitance", 4e-12),
    ("30 MHz", "frequency", 3e7),
    ("500 MHz", "frequency", 5e8),
    ("-1 V", "voltage", -1.0),
    ("2 mV", "voltage", 2e-3),
    ("1e-19 C", "charge", 1e-19),
    ("-1 e", "charge", -E_C),
    ("1 mrad", "angle", 1e-3),
    ("5 deg", "angle", 5.0 * math.pi / 180.0),
]
OTHER_SPELLINGS = [
    ("3 m^2", "area", 3.0), ("3 m**2", "area", 3.0), ("2 mm²", "area", 2e-6),
    ("2 s^-1", "frequency", 2.0), ("1 kV/m", "electric_field", 1e3),
    ("1 V·m^-1", "electric_field", 1.0), ("1 V * m^-1", "electric_field", 1.0),
    ("1.5e-3 T", "magnetic_field", 1.5e-3), ("2 mA", "current", 2e-3),
    ("1 µs", "time", 1e-6), ("1 us", "time", 1e-6), ("1 Ω", "resistance", 1.0),
    ("+.5ns", "time", 5e-10), ("7", "dimensionless", 7.0), ("1e3 m/km", "dimensionless", 1.0),
]


@pytest.mark.parametrize(("text", "dimension", "si"), SPEC_EXAMPLES + OTHER_SPELLINGS)
def test_quantity_strings(text, dimension, si):
    assert to_si(text, dimension) == pytest.approx(si, rel=1e-12)


def test_detector_dimensions_have_si_units():
    for dimension in ("area", "resistance", "capacitance", "voltage", "current",
                      "magnetic_field", "electric_field", "frequency"):
        assert dimension in SI_UNITS and dimension in LIMITS
        assert to_si(f"1 {SI_UNITS[dimension].replace('**', '^')}", dimension) == 1.0


@pytest.mark.parametrize(("text", "factor"), [
    ("20 dB", 10.0), ("0 dB", 1.0), ("-6 dB", 10 ** (-6 / 20)), ("40 dB", 100.0), (2.5, 2.5)])
def test_gain_in_decibels_of_voltage(text, factor):
    # a voltage ratio in dB is 20·log10(V2/V1) (the field-quantity decibel, IEC 60027-3)
    assert gain_factor(text, where="gain") == pytest.approx(factor, rel=1e-12)


@pytest.mark.parametrize(("text", "fragment"), [
    ("20 dB", "decibels are accepted for gains only"),
    ("2 cm", "'2 cm' is a length, not a time"),
    ("5 m/s", "not a time"),
    ("3 furlongz", "unknown unit 'furlongz'"),
    ("1 m^10", "power 10 of 'm'"),
    ("1 s**99999999", "power 99999999"),
    ("10**10**10 ps", "cannot read the unit"),
    ("2**1000 s", "cannot read the unit"),
    ("__import__('os') s", "cannot read"),
    ("1 (s)", "cannot read the unit"),
    ("1e400 s", "too large"),
    ("1e7 s", "beyond the accepted magnitude of 1e+06 s"),
    ("nan s", "cannot read 'nan s' as a time"),
    ("inf", "cannot read 'inf' as a time"),
    ("0.02", "'0.02' has no unit"),
    ("", "cannot read '' as a time"),
    ("1 s s s s s s s", "more than 6 parts"),
    ("1 " + "s" * 200, "cannot read"),
])
def test_bad_time_strings(text, fragment):
    with pytest.raises(UnitError) as caught:
        to_si(text, "time", where="[time] step")
    message = str(caught.value)
    assert message.startswith("[time] step: ") and fragment in message, message
    assert "Error" not in message  # no library exception names


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf, 1e13, True, None, [1.0]])
def test_bad_numbers(value):
    with pytest.raises(UnitError, match=r"^\[x\] y: "):
        to_si(value, "length", where="[x] y")


def test_pathological_strings_return_promptly():
    # in a separate process so that a hang fails the test instead of stalling the suite
    code = ("from lagfield.units import to_si\n"
            "for text in ('10**10**10 ps', '1 ps**1000000000', '1 ps^99999999999'):\n"
            "    try:\n        to_si(text, 'time')\n    except Exception as exc:\n"
            "        print(type(exc).__name__)\n")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            timeout=120, check=True)
    assert result.stdout.split() == ["UnitError"] * 3


def test_column_units_use_the_same_grammar():
    assert unit_factor("ns", "time") == pytest.approx(1e-9, rel=1e-12)
    assert unit_factor("mm", "length") == pytest.approx(1e-3, rel=1e-12)
    assert unit_factor("", "dimensionless") == 1.0
    with pytest.raises(UnitError, match="column 't': cannot read the unit '10\\*\\*10 ns'"):
        unit_factor("10**10 ns", "time", where="column 't'")
    with pytest.raises(UnitError, match="'ns' is a time, not a length"):
        unit_factor("ns", "length", where="column 'x'")
