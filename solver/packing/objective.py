"""The linear stage-2 objective shared by the CP-SAT model, the LP relaxation and the level
search, and the value it gives a choice."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

from solver.packing.capacity import key_coefficients
from solver.packing.items import Key, PackingInput

__all__ = ["StageObjective"]


@dataclass(frozen=True)
class StageObjective:
    """A linear stage-2 objective over items, in the model's own units::

        Σ h[k]·half-width + Σ x[k]·chosen + Σ_s segment[s]·(max δ + max hR) + offset

    ``max_throughput`` uses ``h`` alone; ``min_bandwidth`` is the weighted free width (the
    offset less each segment's weight times its capacity row).  ``widen`` says whether a
    rounded plan should grow its carriers into the room left (more throughput) or not.
    """

    h: Mapping[Key, float]
    x: Mapping[Key, float] = field(default_factory=dict)
    segment: Mapping[int, float] = field(default_factory=dict)
    offset: float = 0.0
    widen: bool = True

    def value(self, data: PackingInput, choice: Mapping[Key, int]) -> float:
        """The objective of a choice (half-width per chosen item)."""
        total = self.offset
        total += sum(self.h.get(k, 0.0) * h + self.x.get(k, 0.0) for k, h in choice.items())
        for s in {k.segment for k in choice} & set(self.segment):
            coefs = [(key_coefficients(data, k), h) for k, h in choice.items() if k.segment == s]
            tops = max(c.delta(h) for c, h in coefs) + max(c.right(h) for c, h in coefs)
            total += self.segment[s] * tops
        return float(total)
