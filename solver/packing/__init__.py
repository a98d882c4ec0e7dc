"""The CP-SAT packing model: one candidate (or none) per demand, in one free segment each.

Exclusions and pinned carriers split the block into free segments.  Inside one segment the best
order of carriers is ascending guard need: the gap between neighbours is the larger of their two
guards, so each guard but the smallest is paid once between neighbours.  With ``w`` the width,
``g`` the guard, ``hL``/``hR`` the guard a carrier needs towards the segment's left/right
boundary and ``δ = max(hL - g, 0)``, the width a set of carriers needs is at most::

    Σ (w + g) + max δ + max hR

which is exact (Σ(w + g) + max g) when both boundaries are block edges at the plan's own limit.
The model is therefore a multiple-choice knapsack per segment, which CP-SAT proves quickly;
positions follow by sorting (:func:`place_segment`).

Modules, each importing only those above it:

==============  ==========================================================================
items           segments, the input and the result, the named keys of the model's items
capacity        the capacity row in plain numbers: coefficients, room, fitting, placement
objective       the linear stage-2 objective and the value it gives a choice
relaxation      the throughput stage's LP relaxation (HiGHS): bound and fractional plan
levelsearch     one LP per protection-level combination: the bound and a rounded plan
model           the CP-SAT variables, hard rules and hints, one rule per function
terms           the CP-SAT objective terms, maximised in order
results         results read from a solver or made from a known choice, and bounded
driver          :func:`solve_packing`: the stages, the solves and their progress reports
==============  ==========================================================================
"""

from solver.packing.capacity import (
    SCALE,
    ItemCoefficients,
    fit_segment,
    item_coefficients,
    place_segment,
    segment_room,
)
from solver.packing.driver import GAP_TOLERANCE, solve_packing
from solver.packing.items import (
    Boundary,
    DemandFamily,
    Hint,
    Key,
    PackingInput,
    PackingResult,
    Pick,
    Seat,
    Segment,
    SegmentLevel,
    admission_weights,
)
from solver.packing.levelsearch import ComboBound, LevelSearch, round_relaxation, search_levels
from solver.packing.objective import StageObjective
from solver.packing.relaxation import Relaxation, solve_relaxation, throughput_lp_bound

__all__ = [
    "GAP_TOLERANCE",
    "SCALE",
    "Boundary",
    "ComboBound",
    "DemandFamily",
    "Hint",
    "ItemCoefficients",
    "Key",
    "LevelSearch",
    "PackingInput",
    "PackingResult",
    "Pick",
    "Relaxation",
    "Seat",
    "Segment",
    "SegmentLevel",
    "StageObjective",
    "admission_weights",
    "fit_segment",
    "item_coefficients",
    "place_segment",
    "round_relaxation",
    "search_levels",
    "segment_room",
    "solve_packing",
    "solve_relaxation",
    "throughput_lp_bound",
]
