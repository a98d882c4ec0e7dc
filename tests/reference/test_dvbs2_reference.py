"""Ideal finite-length thresholds against DVB-S2's published QEF Es/N0 values.

Source: ETSI EN 302 307-1 (DVB-S2), the "ideal Es/N0 for QEF operation" table (Table 13,
table number medium confidence), normal FECFRAME n = 64 800, AWGN, no pilots, packet error
rate ≈ 1e-7 — as reproduced in check-values §3 (values high confidence: every spectral
efficiency there is reproduced from the standard's K_bch values).

Reasoning for the checks.  Our threshold is the normal approximation of Polyanskiy, Poor &
Verdú (2010) for the same constellation, the same block length and a tight block error rate,
with zero implementation loss: an ideal code of that length.  The standard's values come from
simulations of its actual LDPC + BCH codes with ideal synchronisation, so they must lie *at
or above* ours.  Practical long LDPC codes decoded by belief propagation operate roughly
0.5–1 dB from the finite-length limit (common practice; the DVB-S2 designers reported
0.7–1 dB from the Shannon limit — from memory), and the lowest rates are known to be the
least efficient.  We therefore require 0 < gap ≤ 1.3 dB for every row, and a median gap
between 0.3 and 1.0 dB.  A threshold computation off by a dB in either direction fails.

The 16APSK and 32APSK rows are checked the same way, each with its own code rate's ring
ratios (the DVB-S2 set of solver/physics/modcodsets.py, EN 302 307-1 §5.4.3–5.4.4); their
Table 13 values are from memory.
"""

from __future__ import annotations

import statistics
from fractions import Fraction
from itertools import combinations

import pytest

from solver.model import Coding, Modulation
from solver.physics.modcod import constellation, required_esn0_db
from solver.physics.modcodsets import modcod_set

# (modulation, code rate) → (standard's spectral efficiency b/sym, ideal Es/N0 dB);
# check-values §3, quoting EN 302 307-1.
DVB_S2 = {
    ("QPSK", "1/4"): (0.490243, -2.35),
    ("QPSK", "1/3"): (0.656448, -1.24),
    ("QPSK", "2/5"): (0.789412, -0.30),
    ("QPSK", "1/2"): (0.988858, 1.00),
    ("QPSK", "3/5"): (1.188304, 2.23),
    ("QPSK", "2/3"): (1.322253, 3.10),
    ("QPSK", "3/4"): (1.487473, 4.03),
    ("QPSK", "4/5"): (1.587196, 4.68),
    ("QPSK", "5/6"): (1.654663, 5.18),
    ("QPSK", "8/9"): (1.766451, 6.20),
    ("QPSK", "9/10"): (1.788612, 6.42),
    ("8PSK", "3/5"): (1.779991, 5.50),
    ("8PSK", "2/3"): (1.980636, 6.62),
    ("8PSK", "3/4"): (2.228124, 7.91),
    ("8PSK", "5/6"): (2.478562, 9.35),
    ("8PSK", "8/9"): (2.646012, 10.69),
    ("8PSK", "9/10"): (2.679207, 10.98),
}
# EN 302 307-1 Table 13, ideal QEF Es/N0 (dB) of the APSK rows, from memory (32APSK 9/10 =
# 16.05 dB is also quoted by an independent secondary copy, check-values §3).
DVB_S2_APSK_ESN0_DB = {
    ("16APSK", "2/3"): 8.97,
    ("16APSK", "3/4"): 10.21,
    ("16APSK", "4/5"): 11.03,
    ("16APSK", "5/6"): 11.61,
    ("16APSK", "8/9"): 12.89,
    ("16APSK", "9/10"): 13.13,
    ("32APSK", "3/4"): 12.73,
    ("32APSK", "4/5"): 13.64,
    ("32APSK", "5/6"): 14.28,
    ("32APSK", "8/9"): 15.69,
    ("32APSK", "9/10"): 16.05,
}
IDEAL = Coding(block_length_bits=64_800, target_block_error_rate=1e-7, implementation_loss_db=0.0)
MAX_GAP_DB = 1.3


def _ours(key: tuple[str, str]) -> float:
    return required_esn0_db(key[0], Fraction(key[1]), IDEAL)


@pytest.mark.parametrize("key", sorted(DVB_S2), ids=lambda k: f"{k[0]}-{k[1]}")
def test_ideal_threshold_below_standard_within_gap(key: tuple[str, str]) -> None:
    gap = DVB_S2[key][1] - _ours(key)
    assert 0.0 < gap <= MAX_GAP_DB, (key, gap)


def test_median_gap_is_typical_of_long_ldpc_codes() -> None:
    gaps = [value[1] - _ours(key) for key, value in DVB_S2.items()]
    assert 0.3 <= statistics.median(gaps) <= 1.0


def test_threshold_order_matches_standard() -> None:
    # Whatever the absolute gap, a MODCOD the standard ranks harder must be harder for us too.
    for a, b in combinations(DVB_S2, 2):
        standard = DVB_S2[a][1] - DVB_S2[b][1]
        ours = _ours(a) - _ours(b)
        assert standard * ours > 0, (a, b)


def test_spectral_efficiency_order_matches_standard() -> None:
    # Our efficiency is log2 M · r (no BCH/header overhead); the standard's includes them, so
    # values differ by a few percent, but the order must agree (ties allowed for our nominal
    # values: 8PSK 3/5 and QPSK 9/10 are both 1.8 b/sym nominal).
    def nominal(key: tuple[str, str]) -> float:
        return constellation(Modulation(key[0])).bits_per_symbol * float(Fraction(key[1]))

    for a, b in combinations(DVB_S2, 2):
        if DVB_S2[a][0] < DVB_S2[b][0]:
            assert nominal(a) <= nominal(b), (a, b)
        else:
            assert nominal(a) >= nominal(b), (a, b)
    for key, (efficiency, _) in DVB_S2.items():
        assert efficiency == pytest.approx(nominal(key), rel=0.025)


@pytest.mark.parametrize("key", sorted(DVB_S2_APSK_ESN0_DB), ids=lambda k: f"{k[0]}-{k[1]}")
def test_apsk_threshold_with_own_ring_ratios_below_standard(key: tuple[str, str]) -> None:
    # Measured gaps (this commit): 0.59 dB (16APSK 5/6) to 1.09 dB (32APSK 9/10).
    entries = {(e.modulation.value, str(e.code_rate)): e for e in modcod_set("dvb-s2")}
    entry = entries[key]
    assert entry.ring_ratios, key  # the standard's own geometry, not the default
    ours = required_esn0_db(entry.modulation, entry.code_rate, IDEAL, entry.ring_ratios)
    gap = DVB_S2_APSK_ESN0_DB[key] - ours
    assert 0.0 < gap <= MAX_GAP_DB, (key, gap)
