"""One planner run and one referee run per instance, shared by the property modules that
compare the two (``test_referee.py``, ``test_bound_interference.py``)."""

from __future__ import annotations

import functools
from dataclasses import dataclass

from referee import Refereed, referee

from solver import Plan, Problem, solve

__all__ = ["Outcome", "outcome"]


@dataclass(frozen=True)
class Outcome:
    plan: Plan
    found: Refereed


@functools.lru_cache(maxsize=64)
def outcome(problem: Problem) -> Outcome:
    """The planner's plan and the referee's best for ``problem`` (each computed once)."""
    return Outcome(solve(problem), referee(problem))
