"""Units as people read them (service/units.py): the same words in the command's table and the
spectrum picture, scaled to the value.  Expected strings are worked by hand beside each case
(SI prefixes: BIPM, The International System of Units, 9th ed., §3)."""

from __future__ import annotations

import pytest
from render_support import default_block, make_carrier, make_plan, make_problem, texts_by_gid

from service.cli_report import summary_table
from service.convert import plan_to_wire
from service.render import build_spectrum_figure
from service.store import utc_now
from service.units import (
    KHZ,
    MBAUD,
    MBIT_S,
    MHZ,
    format_frequency,
    format_rate,
    format_shift,
    frequency_unit,
)


@pytest.mark.parametrize(
    ("rate_bps", "text"),
    [
        (999.0, "999 bit/s"),  # below 1 kbit/s: bit/s
        (1_000.0, "1 kbit/s"),
        (21_240.0, "21.2 kbit/s"),  # 21.24 to three significant digits
        (999_950.0, "1 Mbit/s"),  # 999.95 kbit/s rounds to 1000 kbit/s: written as 1 Mbit/s
        (2.004e6, "2 Mbit/s"),
        (62.157e6, "62.2 Mbit/s"),
    ],
)
def test_rates_scale(rate_bps: float, text: str) -> None:
    assert format_rate(rate_bps) == text


@pytest.mark.parametrize(
    ("value_hz", "text"),
    [
        (20_980.0, "20.98 kHz"),
        (155_000.0, "155 kHz"),
        (999_990.0, "1 MHz"),  # 999.99 kHz to four digits is 1000 kHz: 1 MHz
        (18.4034e6, "18.4 MHz"),  # 18.40 to four digits, the trailing zero dropped
        (2.5e9, "2500 MHz"),  # bandwidths stop at MHz, as the command's table does
    ],
)
def test_frequencies_scale(value_hz: float, text: str) -> None:
    assert format_frequency(value_hz) == text


def test_shifts_carry_their_sign() -> None:
    assert format_shift(2e6) == "+2 MHz"
    assert format_shift(-250e3) == "−250 kHz"


def test_the_axis_is_in_khz_below_a_megahertz() -> None:
    assert frequency_unit(200e3) == KHZ
    assert frequency_unit(1e6) == MHZ


def test_the_table_and_the_picture_use_the_same_words() -> None:
    block = default_block()
    carriers = [make_carrier("telemetry", 7_127e6, 20e3), make_carrier("backhaul", 7_140e6, 2e6)]
    plan, problem = make_plan(carriers), make_problem(carriers, block)
    header = summary_table(plan_to_wire(plan, plan_id=None, created_at=utc_now(), parent_id=None))
    head = header.splitlines()[1]
    for word in (MHZ[0], MBAUD[0], MBIT_S[0], KHZ[0]):
        assert word in head
    labels = texts_by_gid(build_spectrum_figure(plan, problem), "label-")
    # 20 kbaud × 2 bit × 3/4 × 0.98 = 29.4 kbit/s (the throughput make_carrier gives)
    assert "29.4 kbit/s" in labels["label-telemetry"]
    # 2 Mbaud × 2 × 3/4 × 0.98 = 2.94 Mbit/s
    assert "2.94 Mbit/s" in labels["label-backhaul"]
