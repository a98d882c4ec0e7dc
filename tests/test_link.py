"""Link arithmetic: textbook relations and properties."""

from __future__ import annotations

import math
from fractions import Fraction

import pytest
from hypothesis import given
from hypothesis import strategies as st

from solver.physics.link import (
    cn0_from_esn0_db,
    esn0_from_cn0_db,
    margin_db,
    max_symbol_rate_for_esn0,
    throughput_bps,
)

cn0 = st.floats(30.0, 110.0)
baud = st.floats(1e3, 1e9)


def test_esn0_from_cn0_textbook_relation() -> None:
    # Es/N0 = C/N0 − 10·log10(Rs) (Roddy 4th ed., link-budget chapter, C/N0 = Es/N0 + 10 log Rs
    # — from memory): 80 dB·Hz at 1 Mbaud is 20 dB.  Exact arithmetic, 1e-12 dB.
    assert esn0_from_cn0_db(80.0, 1e6) == pytest.approx(20.0, abs=1e-12)
    assert cn0_from_esn0_db(20.0, 1e6) == pytest.approx(80.0, abs=1e-12)


def test_roddy_qpsk_bandwidth_example_throughput() -> None:
    # Roddy 4th ed. problem 10.14 (check-values §1): 1.544 Mb/s over QPSK is 0.772 Mbaud.
    assert throughput_bps(0.772e6, 2, None, 0.0) == pytest.approx(1.544e6, rel=1e-12)


@given(cn0, baud)
def test_round_trip(c: float, rs: float) -> None:
    assert cn0_from_esn0_db(esn0_from_cn0_db(c, rs), rs) == pytest.approx(c, abs=1e-9)


@given(cn0, baud, baud)
def test_wider_carrier_has_lower_esn0(c: float, a: float, b: float) -> None:
    low, high = sorted((a, b))
    assert esn0_from_cn0_db(c, high) <= esn0_from_cn0_db(c, low) + 1e-12


@given(cn0, st.floats(-10.0, 30.0))
def test_max_symbol_rate_just_closes(c: float, required: float) -> None:
    rs = max_symbol_rate_for_esn0(c, required)
    assert esn0_from_cn0_db(c, rs) == pytest.approx(required, abs=1e-9)
    assert esn0_from_cn0_db(c, rs * 1.001) < required


@given(baud, baud, st.sampled_from([1, 2, 3, 4, 6, 8]), st.floats(0.0, 0.5))
def test_throughput_rises_with_symbol_rate(a: float, b: float, bits: int, overhead: float) -> None:
    low, high = sorted((a, b))
    rate = Fraction(3, 4)
    assert throughput_bps(low, bits, rate, overhead) <= throughput_bps(high, bits, rate, overhead)
    expected = high * bits * 0.75 * (1 - overhead)
    assert throughput_bps(high, bits, rate, overhead) == pytest.approx(expected, rel=1e-12)


def test_margin() -> None:
    assert margin_db(12.5, 9.0) == pytest.approx(3.5)
    assert margin_db(12.5, math.inf) == -math.inf
    assert max_symbol_rate_for_esn0(70.0, math.inf) == 0.0


@pytest.mark.parametrize(
    ("call", "name"),
    [
        (lambda: esn0_from_cn0_db(80.0, 0.0), "symbol_rate_baud"),
        (lambda: esn0_from_cn0_db(float("nan"), 1e6), "cn0_dbhz"),
        (lambda: cn0_from_esn0_db(10.0, -5.0), "symbol_rate_baud"),
        (lambda: throughput_bps(1e6, 0, None, 0.0), "bits_per_symbol"),
        (lambda: throughput_bps(1e6, 2, Fraction(5, 4), 0.0), "code_rate"),
        (lambda: throughput_bps(1e6, 2, None, 1.0), "framing_overhead"),
        (lambda: margin_db(10.0, float("nan")), "required_esn0_db"),
        (lambda: max_symbol_rate_for_esn0(float("inf"), 3.0), "cn0_dbhz"),
    ],
)
def test_errors_name_the_value(call, name: str) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(ValueError, match=name):
        call()
