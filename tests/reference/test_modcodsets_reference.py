"""Named MODCOD sets against the tables of the standards they come from.

"check-values" is /work/shared/reference/check-values.md.  Every expected value is written out
here from the source named beside it, independently of solver/physics/modcodsets.py; where a
value is from memory of the standard, the comment says so.
"""

from __future__ import annotations

from fractions import Fraction

import pytest
from dvbs2_table13 import TABLE_13

from solver.model import Modulation
from solver.physics.modcodsets import SetEntry, modcod_set

EFFICIENCY_ATOL = 5e-6  # the tables print 6 decimals (±5e-7); 5e-6 as the brief asks

# (modulation, code rate) → (spectral efficiency b/sym, ideal QEF Es/N0 dB): EN 302 307-1
# Table 13 (tests/dvbs2_table13.py, where each row's source is noted).
DVB_S2 = TABLE_13

# Ring ratios per code rate, EN 302 307-1 §5.4.3 (16APSK γ) and §5.4.4 (32APSK γ1, γ2), from
# memory.
DVB_S2_RING_RATIOS = {
    ("16APSK", "2/3"): (3.15,),
    ("16APSK", "3/4"): (2.85,),
    ("16APSK", "4/5"): (2.75,),
    ("16APSK", "5/6"): (2.70,),
    ("16APSK", "8/9"): (2.60,),
    ("16APSK", "9/10"): (2.57,),
    ("32APSK", "3/4"): (2.84, 5.27),
    ("32APSK", "4/5"): (2.72, 4.87),
    ("32APSK", "5/6"): (2.64, 4.64),
    ("32APSK", "8/9"): (2.54, 4.33),
    ("32APSK", "9/10"): (2.53, 4.30),
}

# EN 302 307-2 (DVB-S2X) normal-frame additions for QPSK/8PSK/16APSK/32APSK, regular (non "-L")
# constellations, from memory.  Value: the S2X table's spectral efficiency (EN 302 307-2
# Table 20a, from memory) where the module records one, None where it records none.
DVB_S2X_ADDED = {
    ("QPSK", "13/45"): 0.567805,
    ("QPSK", "9/20"): 0.889135,
    ("QPSK", "11/20"): 1.088581,
    ("8PSK", "23/36"): 1.896173,
    ("8PSK", "25/36"): 2.062148,
    ("8PSK", "13/18"): 2.145136,
    ("16APSK", "26/45"): None,
    ("16APSK", "3/5"): None,
    ("16APSK", "28/45"): None,
    ("16APSK", "23/36"): None,
    ("16APSK", "25/36"): None,
    ("16APSK", "13/18"): None,
    ("16APSK", "7/9"): None,
    ("16APSK", "77/90"): None,
    ("32APSK", "32/45"): None,
    ("32APSK", "11/15"): None,
    ("32APSK", "7/9"): None,
}

# 3GPP TS 38.214 Table 5.1.3.1-1 (64QAM MCS table), from memory: MCS → (Qm, target code rate
# R×1024, spectral efficiency as printed to 4 decimals).  MCS 29–31 are reserved.
NR_64QAM = {
    0: (2, "120", 0.2344),
    1: (2, "157", 0.3066),
    2: (2, "193", 0.3770),
    3: (2, "251", 0.4902),
    4: (2, "308", 0.6016),
    5: (2, "379", 0.7402),
    6: (2, "449", 0.8770),
    7: (2, "526", 1.0273),
    8: (2, "602", 1.1758),
    9: (2, "679", 1.3262),
    10: (4, "340", 1.3281),
    11: (4, "378", 1.4766),
    12: (4, "434", 1.6953),
    13: (4, "490", 1.9141),
    14: (4, "553", 2.1602),
    15: (4, "616", 2.4063),
    16: (4, "658", 2.5703),
    17: (6, "438", 2.5664),
    18: (6, "466", 2.7305),
    19: (6, "517", 3.0293),
    20: (6, "567", 3.3223),
    21: (6, "616", 3.6094),
    22: (6, "666", 3.9023),
    23: (6, "719", 4.2129),
    24: (6, "772", 4.5234),
    25: (6, "822", 4.8164),
    26: (6, "873", 5.1152),
    27: (6, "910", 5.3320),
    28: (6, "948", 5.5547),
}

# 3GPP TS 38.214 Table 5.1.3.1-2 (256QAM MCS table), from memory; MCS 28–31 are reserved.
NR_256QAM = {
    0: (2, "120", 0.2344),
    1: (2, "193", 0.3770),
    2: (2, "308", 0.6016),
    3: (2, "449", 0.8770),
    4: (2, "602", 1.1758),
    5: (4, "378", 1.4766),
    6: (4, "434", 1.6953),
    7: (4, "490", 1.9141),
    8: (4, "553", 2.1602),
    9: (4, "616", 2.4063),
    10: (4, "658", 2.5703),
    11: (6, "466", 2.7305),
    12: (6, "517", 3.0293),
    13: (6, "567", 3.3223),
    14: (6, "616", 3.6094),
    15: (6, "666", 3.9023),
    16: (6, "719", 4.2129),
    17: (6, "772", 4.5234),
    18: (6, "822", 4.8164),
    19: (6, "873", 5.1152),
    20: (8, "682.5", 5.3320),
    21: (8, "711", 5.5547),
    22: (8, "754", 5.8906),
    23: (8, "797", 6.2266),
    24: (8, "841", 6.5703),
    25: (8, "885", 6.9141),
    26: (8, "916.5", 7.1602),
    27: (8, "948", 7.4063),
}
# TS 38.214 §5.1.3.1: modulation order Qm of each modulation (from memory).
NR_MODULATION_ORDER = {"QPSK": 2, "16QAM": 4, "64QAM": 6, "256QAM": 8}
# The printed column is rounded to 4 decimals (half away from zero: 2.40625 prints 2.4063).
PRINTED_ATOL = 0.5e-4 + 1e-12


def _key(entry: SetEntry) -> tuple[str, str]:
    assert entry.code_rate is not None
    return entry.modulation.value, f"{entry.code_rate.numerator}/{entry.code_rate.denominator}"


def test_dvb_s2_membership_order_and_labels() -> None:
    entries = modcod_set("dvb-s2")
    assert [_key(e) for e in entries] == list(DVB_S2)  # the standard's order, 28 entries
    assert len(entries) == 28
    assert all(e.label == f"{m} {r}" for e, (m, r) in zip(entries, DVB_S2, strict=True))


@pytest.mark.parametrize("key", list(DVB_S2), ids=lambda k: f"{k[0]}-{k[1]}")
def test_dvb_s2_efficiency_and_threshold(key: tuple[str, str]) -> None:
    entry = {_key(e): e for e in modcod_set("dvb-s2")}[key]
    efficiency, esn0_db = DVB_S2[key]
    assert entry.spectral_efficiency == pytest.approx(efficiency, abs=EFFICIENCY_ATOL)
    assert entry.published_esn0_db == pytest.approx(esn0_db, abs=1e-9)


def test_dvb_s2_ring_ratios() -> None:
    for entry in modcod_set("dvb-s2"):
        assert entry.ring_ratios == DVB_S2_RING_RATIOS.get(_key(entry), ()), entry.label


def test_dvb_s2x_is_s2_plus_the_additions() -> None:
    entries = modcod_set("dvb-s2x")
    assert entries[:28] == modcod_set("dvb-s2")
    assert [_key(e) for e in entries[28:]] == list(DVB_S2X_ADDED)
    assert len(entries) == 28 + 17


@pytest.mark.parametrize("key", list(DVB_S2X_ADDED), ids=lambda k: f"{k[0]}-{k[1]}")
def test_dvb_s2x_additions(key: tuple[str, str]) -> None:
    entry = {_key(e): e for e in modcod_set("dvb-s2x")}[key]
    expected = DVB_S2X_ADDED[key]
    if expected is None:
        assert entry.spectral_efficiency is None
    else:
        assert entry.spectral_efficiency == pytest.approx(expected, abs=EFFICIENCY_ATOL)
    assert entry.ring_ratios == ()
    assert entry.published_esn0_db is None


@pytest.mark.parametrize(
    ("name", "table"), [("nr-64qam", NR_64QAM), ("nr-256qam", NR_256QAM)], ids=["64", "256"]
)
def test_nr_tables_row_by_row(name: str, table: dict[int, tuple[int, str, float]]) -> None:
    entries = modcod_set(name)
    assert [e.label for e in entries] == [f"MCS {index}" for index in table]
    for entry, (order, scaled_rate, printed) in zip(entries, table.values(), strict=True):
        assert NR_MODULATION_ORDER[entry.modulation.value] == order, entry.label
        assert entry.code_rate == Fraction(scaled_rate) / 1024, entry.label
        assert entry.spectral_efficiency is not None
        assert abs(entry.spectral_efficiency - printed) <= PRINTED_ATOL, entry.label
        assert entry.ring_ratios == () and entry.published_esn0_db is None


def test_nr_half_integer_rates_are_exact() -> None:
    # TS 38.214 Table 5.1.3.1-2: MCS 20 is Qm 8, R×1024 = 682.5, efficiency 5.3320 (from memory).
    entry = modcod_set("nr-256qam")[20]
    assert (entry.modulation, entry.code_rate) == (Modulation.QAM256, Fraction(1365, 2048))
