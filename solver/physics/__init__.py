"""The physics floor of the solver: spectra, amplifiers, modulation and coding, link budgets.

Everything here computes from :mod:`solver.model` and third-party numerics alone; nothing in
this package imports the planning layers above it (candidates, packing, verify, planner …).
``tests/test_structure.py`` checks that rule.

Modules
-------
pulses
    Raised-cosine family: truncated root-raised-cosine taps, windows, ideal spectra.
amplifier
    Memoryless amplifier characteristics (Rapp, Saleh) and the drive for an output back-off.
distortion
    In-band distortion as an error-vector floor (Bussgang), and Es/N0 with that floor.
emission
    Normalised spectrum profiles, occupied bandwidth, leakage ratio, guard lookup; cached.
profilecache
    Amplifier profiles stored on disk across processes (``BANDWRIGHT_CACHE_DIR``).
constellations
    Unit-energy constellations and their uncoded error rates.
modcod
    Constellation-constrained capacity, coded thresholds, the MODCOD catalogue.
modcodsets
    Named MODCOD sets from open standards (DVB-S2, DVB-S2X, 3GPP NR MCS tables).
link
    Es/N0 from C/N0, margins, throughput.
bounds
    The Shannon–Nyquist bound of a block.

The package re-exports nothing: import the module you need (``from solver.physics import
emission``).  Library users find the public names in :mod:`solver`.
"""
