"""How many carrier configurations the solver weighs for a demand, bounded from the problem alone.

:mod:`solver.candidates` builds, for every demand, one row per (MODCOD table entry, roll-off,
back-off): the table is the demand's equipment profile's (:func:`solver.equipment.modcod_table`),
restricted to the modulations the demand allows, and each entry is taken once per roll-off and
amplifier back-off the profile lists.
Under ``max_throughput`` and ``min_bandwidth`` a row becomes one
family whose width is a single integer variable of the packing model, so it counts once.  Under
``max_margin`` every row is laid out on a geometric width grid of ratio
:data:`~solver.candidates.WIDTH_STEP` between what the minimum rate and the target rate need,
and every grid point is a configuration of its own.

:func:`configuration_bound` counts these without computing a threshold or a spectrum (a few
arithmetic operations per demand).  It is an upper bound: the solver then drops rows that no
other row beats, rows whose link cannot close and widths that round to the same raster slot.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass

from solver import equipment
from solver.candidates import WIDTH_STEP
from solver.model import Demand, Objective, Problem
from solver.physics import modcodsets

__all__ = ["ConfigurationBound", "configuration_bound"]


@dataclass(frozen=True)
class ConfigurationBound:
    """Upper bound on the configurations the solver weighs for one demand, by factor.

    Attributes
    ----------
    modulations : int
        Modulations of the demand's MODCOD table that the demand allows.
    code_rates : int
        Most table entries of one of those modulations.
    rolloffs : int
        Roll-off factors the demand's profile lists.
    width_steps : int
        Widths per (entry, roll-off): 1 for a family (its width is one model variable), the
        width-grid bound under ``max_margin``.
    backoffs : int
        Amplifier back-offs the profile lets the optimiser choose from (1 when fixed).
    """

    modulations: int
    code_rates: int
    rolloffs: int
    width_steps: int
    backoffs: int = 1

    @property
    def total(self) -> int:
        """The product of the factors: configurations weighed for the demand, at most."""
        return self.modulations * self.code_rates * self.rolloffs * self.width_steps * self.backoffs


def width_steps_bound(min_rate_bps: float, target_rate_bps: float) -> int:
    """Most widths the ``max_margin`` grid lays out for one (catalogue entry, roll-off).

    The grid runs from the narrowest width ``lo`` (at least two raster steps, rounded up to an
    even count) to the widest ``hi`` (the target rate's, rounded up to an even count) in ratios
    of ``WIDTH_STEP``.  Rounding adds less than two raster steps to ``hi`` and takes nothing from
    ``lo``, so ``hi / lo`` stays below ``target / min + 1``, and the grid holds at most
    ``ceil(log(target / min + 1) / log(WIDTH_STEP)) + 2`` widths (one more than the exact count
    of that ratio, for floating-point rounding).

    Parameters
    ----------
    min_rate_bps, target_rate_bps : float
        The demand's least and wanted rates (bit/s), both positive.

    Returns
    -------
    int
        The bound (at least 2).

    Examples
    --------
    >>> width_steps_bound(1e6, 1e6)  # log(2) / log(1.01) = 69.66
    72
    >>> width_steps_bound(1e6, 3e6)  # log(4) / log(1.01) = 139.32
    142
    """
    if not (min_rate_bps > 0 and target_rate_bps > 0):
        raise ValueError(f"{min_rate_bps=} and {target_rate_bps=} must be > 0")
    ratio = max(target_rate_bps / min_rate_bps, 1.0)
    return math.ceil(math.log(ratio + 1.0) / math.log(WIDTH_STEP)) + 2


def configuration_bound(problem: Problem, demand: Demand) -> ConfigurationBound:
    """Upper bound on the carrier configurations the solver weighs for ``demand``.

    Parameters
    ----------
    problem : Problem
        Supplies the transmitter's roll-offs and the objective.
    demand : Demand
        Its allowed modulations and, under ``max_margin``, its rate range.

    Returns
    -------
    ConfigurationBound
        The factors and their product (:attr:`ConfigurationBound.total`).

    Examples
    --------
    >>> from solver.model import Block, Transmitter
    >>> demand = Demand("a", min_rate_bps=1e6, target_rate_bps=2e6, esn0_db=12.0)
    >>> problem = Problem(Block(0.0, 1e6), (demand,), transmitter=Transmitter(rolloffs=(0.2, 0.35)))
    >>> bound = configuration_bound(problem, demand)
    >>> bound.modulations, bound.code_rates, bound.rolloffs, bound.width_steps, bound.total
    (7, 16, 2, 1, 224)
    """
    profile = equipment.profile_for(problem, demand)
    rows = profile.modcods or modcodsets.modcod_set(profile.modcod_set)
    allowed = [
        r.modulation for r in rows if not demand.modulations or r.modulation in demand.modulations
    ]
    per_modulation = Counter(allowed)
    if problem.objective is Objective.MAX_MARGIN:
        steps = width_steps_bound(demand.min_rate_bps, demand.target_rate_bps)
    else:
        steps = 1
    backoffs = len(set(profile.output_backoffs_db)) if profile.amplifier is not None else 0
    return ConfigurationBound(
        modulations=len(per_modulation),
        code_rates=max(per_modulation.values(), default=0),
        rolloffs=len(profile.rolloffs),
        width_steps=steps,
        backoffs=max(backoffs, 1),
    )
