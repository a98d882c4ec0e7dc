"""Named MODCOD sets: structure every set must have (the published values are checked in
tests/reference/test_modcodsets_reference.py)."""

from __future__ import annotations

from itertools import pairwise

import pytest

from solver.model import Modulation, ProblemError
from solver.physics.modcod import CODE_RATES, constellation
from solver.physics.modcodsets import MODCOD_SET_NAMES, modcod_set

RADIO_SETS = tuple(name for name in MODCOD_SET_NAMES if name != "full")
NOT_RADIO = {Modulation.BPSK, Modulation.PAM4, Modulation.PAM8}


@pytest.mark.parametrize("name", MODCOD_SET_NAMES)
def test_no_pair_twice(name: str) -> None:
    pairs = [(e.modulation, e.code_rate) for e in modcod_set(name)]
    assert len(pairs) == len(set(pairs))
    assert len({e.label for e in modcod_set(name)}) == len(pairs)


@pytest.mark.parametrize("name", RADIO_SETS)
def test_radio_sets_hold_no_one_dimensional_or_bpsk_formats(name: str) -> None:
    # BPSK and M-PAM appear in neither DVB-S2/S2X (EN 302 307-1/-2) nor the TS 38.214 PDSCH
    # MCS tables.
    assert not {e.modulation for e in modcod_set(name)} & NOT_RADIO


@pytest.mark.parametrize("name", RADIO_SETS)
def test_radio_sets_are_coded_and_framing_only_lowers_efficiency(name: str) -> None:
    for entry in modcod_set(name):
        assert entry.code_rate is not None and 0 < entry.code_rate < 1, entry.label
        if entry.spectral_efficiency is not None:
            bits = constellation(entry.modulation).bits_per_symbol
            nominal = bits * float(entry.code_rate)
            # DVB-S2 framing (BBHEADER, PLHEADER) costs under 3 % here; 3GPP's is exactly Qm·R.
            assert 0.97 * nominal < entry.spectral_efficiency <= nominal + 1e-12, entry.label


@pytest.mark.parametrize("name", RADIO_SETS)
def test_ring_ratios_only_on_apsk_and_growing(name: str) -> None:
    for entry in modcod_set(name):
        if entry.modulation == Modulation.APSK16:
            assert len(entry.ring_ratios) in (0, 1), entry.label
        elif entry.modulation == Modulation.APSK32:
            assert len(entry.ring_ratios) in (0, 2), entry.label
        else:
            assert entry.ring_ratios == (), entry.label
        radii = (1.0, *entry.ring_ratios)
        assert all(a < b for a, b in pairwise(radii)), entry.label


def test_full_is_the_catalogue_grid() -> None:
    entries = modcod_set("full")
    expected = [(m, r) for m in Modulation for r in (*CODE_RATES, None)]
    assert [(e.modulation, e.code_rate) for e in entries] == expected
    assert all(e.spectral_efficiency is None and e.ring_ratios == () for e in entries)
    assert entries[len(CODE_RATES)].label == "BPSK uncoded"


def test_standard_is_dvb_s2_then_nr_256qam() -> None:
    expected = [*modcod_set("dvb-s2"), *modcod_set("nr-256qam")]
    assert list(modcod_set("standard")) == expected  # no pair shared, so nothing dropped
    assert len(expected) == 28 + 28  # EN 302 307-1: 28 MODCODs; TS 38.214 Table 5.1.3.1-2: MCS 0–27


def test_unknown_name_names_the_allowed_ones() -> None:
    with pytest.raises(ProblemError) as info:
        modcod_set("dvb-t2")
    assert info.value.field == "modcod_set"
    assert "'dvb-t2'" in info.value.message
    assert all(name in info.value.message for name in MODCOD_SET_NAMES)
