"""Quantity formatting in mcmatch.units: engineering prefixes that parse back (common practice, no source; the
prefix names and powers are the SI's: BIPM, The International System of Units, 9th edition, 2019)."""

from __future__ import annotations

import pytest

from mcmatch.units import format_quantity, parse_quantity


@pytest.mark.parametrize(
    ("value", "unit", "text"),
    [
        (4e-6, "m", "4 um"),  # SI prefix micro = 1e-6
        (1.5e-5, "A", "15 uA"),
        (2.2e4, "ohm", "22 kohm"),  # kilo = 1e3
        (0.9, "V", "0.9 V"),  # node voltages stay in volts
        (-0.04, "V", "-40 mV"),  # below 0.1 V the prefix returns
        (3.3e-12, "F", "3.3 pF"),  # pico = 1e-12
        (2e-13, "S", "200 fS"),  # femto = 1e-15
        (0.0125, "1", "1.25 %"),  # a fraction as percent
        (0.0, "A", "0 A"),
    ],
)
def test_format_quantity_uses_the_si_prefix(value, unit, text):
    assert format_quantity(value, unit) == text


def test_format_quantity_round_trips_through_the_parser():
    for value, unit in [
        (4e-6, "m"),
        (1.5e-5, "A"),
        (0.9, "V"),
        (2.2e4, "ohm"),
        (-0.04, "V"),
        (2e-13, "S"),
        (0.0125, "1"),
    ]:
        assert parse_quantity(format_quantity(value, unit), unit) == pytest.approx(value, rel=1e-12)


def test_rounding_carries_into_the_next_prefix():
    # 999.9996 uA rounded to 6 digits is 1000 uA, which reads as 1 mA
    assert format_quantity(999.9996e-6, "A") == "1 mA"
    assert format_quantity(123.456789e-6, "A", 4) == "123.5 uA"


def test_display_form_uses_symbols():
    assert format_quantity(4e-6, "m", symbols=True) == "4 \u00b5m"
    assert format_quantity(2.2e4, "ohm", symbols=True) == "22 k\u03a9"
