"""Modulation and coding: constellations, error rates, capacity, coded thresholds, catalogue."""

from __future__ import annotations

from solver.constellations import Constellation, constellation

__all__ = ["Constellation", "constellation"]
