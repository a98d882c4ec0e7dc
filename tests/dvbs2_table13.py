"""ETSI EN 302 307-1 (DVB-S2) Table 13, normal FECFRAME, no pilots: the standard's spectral
efficiency and ideal quasi-error-free Es/N0 of every MODCOD.  Shared by the reference tests of
the thresholds (tests/reference/test_dvbs2_reference.py) and of the named MODCOD sets
(tests/reference/test_modcodsets_reference.py)."""

# (modulation, code rate) → (spectral efficiency b/sym, ideal QEF Es/N0 dB), ETSI EN 302 307-1
# Table 13, normal FECFRAME, no pilots.
TABLE_13: dict[tuple[str, str], tuple[float, float]] = {
    # QPSK and 8PSK rows: check-values §3 (high confidence for the values).
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
    # 16APSK and 32APSK rows: EN 302 307-1 Table 13, from memory (32APSK 9/10 = 16.05 dB is
    # also quoted by an independent secondary copy, check-values §3).
    ("16APSK", "2/3"): (2.637201, 8.97),
    ("16APSK", "3/4"): (2.966728, 10.21),
    ("16APSK", "4/5"): (3.165623, 11.03),
    ("16APSK", "5/6"): (3.300184, 11.61),
    ("16APSK", "8/9"): (3.523143, 12.89),
    ("16APSK", "9/10"): (3.567342, 13.13),
    ("32APSK", "3/4"): (3.703295, 12.73),
    ("32APSK", "4/5"): (3.951571, 13.64),
    ("32APSK", "5/6"): (4.119540, 14.28),
    ("32APSK", "8/9"): (4.397854, 15.69),
    ("32APSK", "9/10"): (4.453027, 16.05),
}
