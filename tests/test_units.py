"""Quantities, units and arithmetic (seqlang/lang/units.py, seqlang/program/evaluate.py).

Unit factors are the SI prefixes (BIPM, The International System of Units, 9th ed. 2019);
1 deg = π/180 rad (same source). Frequencies are cyclic: `1 MHz` means Ω/2π = 1e6 Hz.
"""
from __future__ import annotations

import math

import pytest

from seqlang.lang import units
from seqlang.lang.parser import parse_text
from seqlang.program.evaluate import EvalError, Scope, evaluate, expect_kind


def value(text: str, scope: Scope | None = None) -> units.Quantity:
    let = parse_text(f"let x = {text}", "expr.seq").items[0]
    return evaluate(let.value, scope or Scope())


def failure(text: str) -> str:
    with pytest.raises(EvalError) as info:
        value(text)
    return info.value.diagnostic.message


@pytest.mark.parametrize("text, si, dim", [
    ("1.3 MHz", 1.3e6, units.FREQUENCY), ("22 kHz", 22e3, units.FREQUENCY), ("9.2 GHz", 9.2e9, units.FREQUENCY),
    ("250 us", 250e-6, units.DURATION), ("2 ns", 2e-9, units.DURATION), ("11 ms", 11e-3, units.DURATION),
    ("5.2 um", 5.2e-6, units.LENGTH), ("589 nm", 589e-9, units.LENGTH), ("15 uK", 15e-6, units.TEMPERATURE),
    ("90 deg", math.pi / 2, units.ANGLE), ("98.7 %", 0.987, units.DIMENSIONLESS), ("500 mA", 0.5, units.CURRENT),
])
def test_units_convert_to_si(text, si, dim):
    q = value(text)
    assert q.dim == dim
    assert q.value == pytest.approx(si, rel=1e-12)


def test_pi_is_an_angle_factor():
    assert value("pi/2").value == pytest.approx(math.pi / 2, rel=1e-15)
    assert value("2pi").value == pytest.approx(2 * math.pi, rel=1e-15)


def test_inverse_frequency_is_a_duration():
    # A square π pulse at f_Rabi lasts 1/(2 f_Rabi) (Rabi formula, textbook): 1 MHz -> 500 ns.
    q = value("1 / (2 * 1 MHz)")
    assert q.dim == units.DURATION
    assert q.value == pytest.approx(500e-9, rel=1e-15)


def test_phase_accumulated_is_plain():
    q = value("2 * pi * 1 MHz * 1 us")
    assert q.dim == units.DIMENSIONLESS
    assert q.value == pytest.approx(2 * math.pi, rel=1e-15)


def test_unit_binds_tighter_than_power():
    """`4 MHz^2` is (4 MHz)²: the unit belongs to the number it follows."""
    q = value("4 MHz^2")
    assert q.dim == tuple(2 * e for e in units.FREQUENCY)
    assert q.value == pytest.approx(16e12)
    assert value("sqrt(4 MHz^2)").value == pytest.approx(4e6)


def test_precedence_and_parentheses():
    assert value("1 + 2 * 3").value == 7
    assert value("(1 + 2) * 3").value == 9
    assert value("-2^2").value == -4
    assert value("2 us - 500 ns").value == pytest.approx(1.5e-6)


def test_named_constants():
    scope = Scope({"omega": units.Quantity(1.3e6, units.FREQUENCY)})
    tau = value("4.29268 / (2 * pi * omega)", scope)
    assert tau.dim == units.DURATION
    assert tau.value == pytest.approx(4.29268 / (2 * math.pi * 1.3e6), rel=1e-14)


def test_adding_different_kinds_is_an_error():
    message = failure("1 MHz + 2 ns")
    assert message.startswith("cannot add") and "a frequency" in message and "a duration" in message


def test_second_unit_is_an_error():
    assert failure("(2 MHz) us") == "`us` follows a value that already has units"


def test_division_by_zero_is_an_error():
    assert failure("1 us / 0") == "division by zero"


def test_unknown_name_suggests_the_closest():
    with pytest.raises(EvalError) as info:
        value("omeg * 2", Scope({"omega": units.Quantity(1.0, units.FREQUENCY)}))
    assert info.value.diagnostic.message == "unknown name `omeg`"
    assert info.value.diagnostic.hint == "did you mean `omega`?"


def test_expect_kind_names_both_kinds():
    with pytest.raises(EvalError) as info:
        expect_kind(value("2 MHz"), units.DURATION, value_span())
    assert info.value.diagnostic.message == "expected a duration, got a frequency"


def test_number_without_unit_gets_a_hint():
    with pytest.raises(EvalError) as info:
        expect_kind(value("20"), units.DURATION, value_span())
    assert info.value.diagnostic.message == "expected a duration, got a plain number or angle"
    assert info.value.diagnostic.hint == "add a unit, e.g. `20 ns`"


def test_plain_number_is_accepted_as_radians():
    assert expect_kind(value("1.5"), units.ANGLE, value_span()) == 1.5


def value_span():
    return parse_text("let x = 1", "expr.seq").items[0].span


@pytest.mark.parametrize("si, dim, text", [
    (1.3e6, units.FREQUENCY, "1.3 MHz"), (2.5e-9, units.DURATION, "2.5 ns"), (11e-3, units.DURATION, "11 ms"),
    (15e-6, units.TEMPERATURE, "15 uK"), (3.0, units.CURRENT, "3 A"), (-0.5, units.CURRENT, "-500 mA"),
    (0.0, units.FREQUENCY, "0 Hz"),
])
def test_format_quantity_picks_a_readable_unit(si, dim, text):
    assert units.format_quantity(si, dim) == text


def test_kind_name_of_an_unnamed_dimension():
    assert units.kind_name((0, 2, 0, 0, 0, 0, 0)) == "a quantity in m^2"
