"""Named MODCOD sets taken from open standards, for requests that restrict the catalogue.

A set is an ordered tuple of :class:`SetEntry`: a modulation, a code rate, a label as the
standard prints it, and where the standard gives them its own spectral efficiency (framing
included), APSK ring ratios and published threshold.  The sets, by name:

``"dvb-s2"``
    ETSI EN 302 307-1 (DVB-S2), normal FECFRAME (64 800 bits): the 28 MODCODs of QPSK, 8PSK,
    16APSK and 32APSK.  Spectral efficiency η = (K_bch − 80)/(64 800/log2 M + 90) — the BCH
    payload less the 80-bit BBHEADER over the XFECFRAME plus the 90-symbol PLHEADER, no pilots —
    with K_bch from EN 302 307-1 Table 5a; it reproduces the efficiency column of the
    standard's Table 13.  Ring ratios per code rate from §5.4.3 (16APSK, γ = R2/R1) and §5.4.4
    (32APSK, γ1 = R2/R1, γ2 = R3/R1); published QEF Es/N0 from Table 13 (AWGN, no pilots).
``"dvb-s2x"``
    ``"dvb-s2"`` followed by the normal-frame MODCODs that EN 302 307-2 (DVB-S2X) adds for the
    modulations of :class:`~solver.model.Modulation`: QPSK 13/45, 9/20, 11/20; 8PSK 23/36, 25/36,
    13/18; 16APSK 26/45, 3/5, 28/45, 23/36, 25/36, 13/18, 7/9, 77/90; 32APSK 32/45, 11/15, 7/9.
    Left out: the "-L" constellations (8APSK-L, 16APSK-L, 32APSK-L …), 8APSK, 64/128/256APSK,
    and short and medium frames.  The QPSK and 8PSK additions carry η from the same formula
    with K_bch = K_ldpc − 192 (BCH t = 12), which reproduces the S2X table's efficiencies for
    those six rows.  The 16APSK and 32APSK additions carry no efficiency (``None``): the values
    we remember for them do not agree with that formula, so neither is used.  Their ring ratios
    are not confirmed either, so they are ``()`` (the default geometry of
    :func:`solver.physics.constellations.constellation`), and no S2X threshold is recorded.
``"nr-64qam"``, ``"nr-256qam"``
    3GPP TS 38.214 Table 5.1.3.1-1 (MCS 0–28) and Table 5.1.3.1-2 (MCS 0–27), the PDSCH MCS
    index tables: modulation order Qm, target code rate R×1024, spectral efficiency Qm·R/1024.
    Reserved indices are left out.  Labels are ``"MCS n"``.
``"full"``
    Every modulation × :data:`solver.physics.modcod.CODE_RATES` and uncoded, no efficiency: the
    catalogue grid, for studies.
``"standard"``
    The set used when a request names none: ``"dvb-s2"`` then ``"nr-256qam"``, each
    (modulation, code rate) pair once.

Every value in the tables below is from memory of the cited documents, cross-checked where
a formula links two columns (η against K_bch; TS 38.214's efficiency against Qm·R/1024).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass
from fractions import Fraction
from functools import cache

from solver.model import CodeRate, Modulation, ProblemError, format_code_rate
from solver.physics.constellations import constellation
from solver.physics.modcod import CODE_RATES

__all__ = ["MODCOD_SET_NAMES", "SetEntry", "dvb_s2_efficiency", "modcod_set"]


@dataclass(frozen=True)
class SetEntry:
    """One MODCOD of a named set.

    Attributes
    ----------
    modulation : Modulation
    code_rate : Fraction or None
        ``None`` for uncoded (only in ``"full"``).
    label : str
        As the standard names it: ``"QPSK 1/4"``, ``"MCS 17"``.
    spectral_efficiency : float or None
        The standard's own information bits per modulation symbol, framing included where
        its table includes it (DVB-S2: BBHEADER and PLHEADER; 3GPP: Qm·R/1024); ``None``
        where no published figure is recorded.
    ring_ratios : tuple of float
        APSK ring radii over the inner radius for this code rate — (γ,) for 16APSK, (γ1, γ2)
        for 32APSK — or ``()`` for the default geometry and for non-APSK formats.
    published_esn0_db : float or None
        The standard's published ideal (QEF) Es/N0 in dB where it has one (DVB-S2 Table 13);
        for reference and tests only, never used by the solver.
    """

    modulation: Modulation
    code_rate: CodeRate
    label: str
    spectral_efficiency: float | None
    ring_ratios: tuple[float, ...] = ()
    published_esn0_db: float | None = None


MODCOD_SET_NAMES: tuple[str, ...] = (
    "dvb-s2",
    "dvb-s2x",
    "nr-64qam",
    "nr-256qam",
    "full",
    "standard",
)
"""Names accepted by :func:`modcod_set`."""

# ----------------------------------------------------------------------------- DVB-S2 / S2X

_NORMAL_FECFRAME_BITS = 64_800
_PLHEADER_SYMBOLS = 90
_BBHEADER_BITS = 80
_S2X_BCH_PARITY_BITS = 192  # BCH t = 12 on every S2X normal-frame rate (EN 302 307-2; memory)

_DVB_S2_K_BCH: dict[Fraction, int] = {
    Fraction(rate): k_bch
    for rate, k_bch in (
        ("1/4", 16008),
        ("1/3", 21408),
        ("2/5", 25728),
        ("1/2", 32208),
        ("3/5", 38688),
        ("2/3", 43040),
        ("3/4", 48408),
        ("4/5", 51648),
        ("5/6", 53840),
        ("8/9", 57472),
        ("9/10", 58192),
    )
}
"""Uncoded BCH block K_bch (bits) of each normal-FECFRAME code rate, EN 302 307-1 Table 5a."""

# EN 302 307-1: one row per MODCOD, in the standard's order.  Columns: modulation, code rate,
# ring ratios (§5.4.3 Table 9 for 16APSK, §5.4.4 Table 10 for 32APSK; "-" for none), ideal
# Es/N0 in dB for QEF operation (Table 13, AWGN, normal FECFRAME, no pilots).
_DVB_S2_TABLE = """
QPSK    1/4   -          -2.35
QPSK    1/3   -          -1.24
QPSK    2/5   -          -0.30
QPSK    1/2   -           1.00
QPSK    3/5   -           2.23
QPSK    2/3   -           3.10
QPSK    3/4   -           4.03
QPSK    4/5   -           4.68
QPSK    5/6   -           5.18
QPSK    8/9   -           6.20
QPSK    9/10  -           6.42
8PSK    3/5   -           5.50
8PSK    2/3   -           6.62
8PSK    3/4   -           7.91
8PSK    5/6   -           9.35
8PSK    8/9   -          10.69
8PSK    9/10  -          10.98
16APSK  2/3   3.15        8.97
16APSK  3/4   2.85       10.21
16APSK  4/5   2.75       11.03
16APSK  5/6   2.70       11.61
16APSK  8/9   2.60       12.89
16APSK  9/10  2.57       13.13
32APSK  3/4   2.84,5.27  12.73
32APSK  4/5   2.72,4.87  13.64
32APSK  5/6   2.64,4.64  14.28
32APSK  8/9   2.54,4.33  15.69
32APSK  9/10  2.53,4.30  16.05
"""

# EN 302 307-2 normal-frame additions for our modulations.  Column "eta": "k" where the
# efficiency comes from K_bch = K_ldpc − 192 (reproduces the S2X table), "-" where none is kept.
_DVB_S2X_TABLE = """
QPSK    13/45  k
QPSK    9/20   k
QPSK    11/20  k
8PSK    23/36  k
8PSK    25/36  k
8PSK    13/18  k
16APSK  26/45  -
16APSK  3/5    -
16APSK  28/45  -
16APSK  23/36  -
16APSK  25/36  -
16APSK  13/18  -
16APSK  7/9    -
16APSK  77/90  -
32APSK  32/45  -
32APSK  11/15  -
32APSK  7/9    -
"""


def dvb_s2_efficiency(modulation: Modulation, k_bch: int) -> float:
    """DVB-S2 spectral efficiency of a normal FECFRAME without pilots, bits per symbol.

    Parameters
    ----------
    modulation : Modulation
        The MODCOD's constellation (log2 M bits per symbol).
    k_bch : int
        BCH information block length K_bch, bits.

    Returns
    -------
    float
        η = (K_bch − 80) / (64 800 / log2 M + 90): the user bits of one frame (K_bch less the
        80-bit BBHEADER) per transmitted symbol (the XFECFRAME plus the 90-symbol PLHEADER).

    References
    ----------
    ETSI EN 302 307-1, §5.1.6 (BBHEADER), §5.3 and Table 5a (K_bch), §5.5.2 (PLHEADER),
    Table 13 (the resulting efficiencies); clause and table numbers from memory.

    Examples
    --------
    >>> round(dvb_s2_efficiency(Modulation.QPSK, 16008), 6)  # Table 13, QPSK 1/4: 0.490243
    0.490243
    """
    bits = constellation(modulation).bits_per_symbol
    symbols = _NORMAL_FECFRAME_BITS / bits + _PLHEADER_SYMBOLS
    return (k_bch - _BBHEADER_BITS) / symbols


def _table_rows(table: str) -> list[list[str]]:
    return [line.split() for line in table.strip().splitlines()]


def _ring_ratios(text: str) -> tuple[float, ...]:
    return () if text == "-" else tuple(float(part) for part in text.split(","))


def _dvb_label(modulation: Modulation, rate: Fraction) -> str:
    return f"{modulation.value} {format_code_rate(rate)}"


@cache
def _dvb_s2() -> tuple[SetEntry, ...]:
    entries = []
    for mod_text, rate_text, rings, esn0_db in _table_rows(_DVB_S2_TABLE):
        mod, rate = Modulation(mod_text), Fraction(rate_text)
        efficiency = dvb_s2_efficiency(mod, _DVB_S2_K_BCH[rate])
        label = _dvb_label(mod, rate)
        entries.append(SetEntry(mod, rate, label, efficiency, _ring_ratios(rings), float(esn0_db)))
    return tuple(entries)


def _s2x_efficiency(modulation: Modulation, rate: Fraction, marker: str) -> float | None:
    if marker == "-":
        return None
    k_ldpc = rate * _NORMAL_FECFRAME_BITS
    if k_ldpc.denominator != 1:
        raise AssertionError(f"{rate=} does not divide the 64 800-bit frame")
    return dvb_s2_efficiency(modulation, int(k_ldpc) - _S2X_BCH_PARITY_BITS)


@cache
def _dvb_s2x() -> tuple[SetEntry, ...]:
    added = []
    for mod_text, rate_text, marker in _table_rows(_DVB_S2X_TABLE):
        mod, rate = Modulation(mod_text), Fraction(rate_text)
        efficiency = _s2x_efficiency(mod, rate, marker)
        added.append(SetEntry(mod, rate, _dvb_label(mod, rate), efficiency))
    return (*_dvb_s2(), *added)


# ----------------------------------------------------------------------------- 3GPP NR

_NR_MODULATION = {
    2: Modulation.QPSK,
    4: Modulation.QAM16,
    6: Modulation.QAM64,
    8: Modulation.QAM256,
}
"""Modulation order Qm → modulation, TS 38.214 §5.1.3.1."""
_NR_RATE_SCALE = 1024

# TS 38.214 Table 5.1.3.1-1 (MCS index table 1 for PDSCH): MCS index, Qm, target code rate R×1024.
_NR_TABLE_64QAM = """
 0 2 120
 1 2 157
 2 2 193
 3 2 251
 4 2 308
 5 2 379
 6 2 449
 7 2 526
 8 2 602
 9 2 679
10 4 340
11 4 378
12 4 434
13 4 490
14 4 553
15 4 616
16 4 658
17 6 438
18 6 466
19 6 517
20 6 567
21 6 616
22 6 666
23 6 719
24 6 772
25 6 822
26 6 873
27 6 910
28 6 948
"""

# TS 38.214 Table 5.1.3.1-2 (MCS index table 2 for PDSCH): MCS index, Qm, target code rate R×1024.
_NR_TABLE_256QAM = """
 0 2 120
 1 2 193
 2 2 308
 3 2 449
 4 2 602
 5 4 378
 6 4 434
 7 4 490
 8 4 553
 9 4 616
10 4 658
11 6 466
12 6 517
13 6 567
14 6 616
15 6 666
16 6 719
17 6 772
18 6 822
19 6 873
20 8 682.5
21 8 711
22 8 754
23 8 797
24 8 841
25 8 885
26 8 916.5
27 8 948
"""


def _nr_set(table: str) -> tuple[SetEntry, ...]:
    """Entries of a TS 38.214 MCS table: R = (R×1024)/1024 exactly, η = Qm·R."""
    entries = []
    for index, order_text, scaled_rate in _table_rows(table):
        order = int(order_text)
        rate = Fraction(scaled_rate) / _NR_RATE_SCALE
        efficiency = float(order * rate)
        entries.append(SetEntry(_NR_MODULATION[order], rate, f"MCS {index}", efficiency))
    return tuple(entries)


# ----------------------------------------------------------------------------- study sets


def _full() -> tuple[SetEntry, ...]:
    entries = []
    for mod in Modulation:
        for rate in (*CODE_RATES, None):
            label = f"{mod.value} {format_code_rate(rate)}"
            entries.append(SetEntry(mod, rate, label, None))
    return tuple(entries)


def _union(groups: Iterable[tuple[SetEntry, ...]]) -> tuple[SetEntry, ...]:
    """Entries in order, the first of each (modulation, code rate) pair kept."""
    seen: set[tuple[Modulation, CodeRate]] = set()
    kept = []
    for entry in (entry for group in groups for entry in group):
        if (entry.modulation, entry.code_rate) not in seen:
            seen.add((entry.modulation, entry.code_rate))
            kept.append(entry)
    return tuple(kept)


def _standard() -> tuple[SetEntry, ...]:
    return _union((_dvb_s2(), _nr_set(_NR_TABLE_256QAM)))


_BUILDERS: dict[str, Callable[[], tuple[SetEntry, ...]]] = {
    "dvb-s2": _dvb_s2,
    "dvb-s2x": _dvb_s2x,
    "nr-64qam": lambda: _nr_set(_NR_TABLE_64QAM),
    "nr-256qam": lambda: _nr_set(_NR_TABLE_256QAM),
    "full": _full,
    "standard": _standard,
}


@cache
def modcod_set(name: str) -> tuple[SetEntry, ...]:
    """The MODCODs of a named set, in the standard's order.

    Parameters
    ----------
    name : str
        One of :data:`MODCOD_SET_NAMES`: ``"dvb-s2"``, ``"dvb-s2x"``, ``"nr-64qam"``,
        ``"nr-256qam"``, ``"full"``, ``"standard"`` (see the module docstring).

    Returns
    -------
    tuple of SetEntry
        Cached; no (modulation, code rate) pair appears twice.

    Raises
    ------
    ProblemError
        ``field`` ``"modcod_set"``, when ``name`` is not one of the allowed names.

    References
    ----------
    ETSI EN 302 307-1 (DVB-S2) Tables 5a and 13, §5.4.3–5.4.4; ETSI EN 302 307-2 (DVB-S2X);
    3GPP TS 38.214 Tables 5.1.3.1-1 and 5.1.3.1-2.  Table contents from memory.

    Examples
    --------
    >>> entries = modcod_set("dvb-s2")
    >>> len(entries), entries[0].label, round(entries[0].spectral_efficiency or 0.0, 6)
    (28, 'QPSK 1/4', 0.490243)
    >>> modcod_set("nr-256qam")[20].code_rate
    Fraction(1365, 2048)
    """
    builder = _BUILDERS.get(name)
    if builder is None:
        allowed = ", ".join(MODCOD_SET_NAMES)
        raise ProblemError(
            "modcod_set", f"{name!r} is not a named MODCOD set; use one of {allowed}"
        )
    return builder()
