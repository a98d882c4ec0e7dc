"""The last resort after a failed verification, one rule for every planner: leave out the
carriers to blame until the rest passes, and say so.

Used by the optimising planner (:func:`solver.planner.solve`, once its re-solves with stricter
emission are spent) and by the hand method (:func:`solver.rules.rule_of_thumb_plan`), so that
neither is credited with a plan that breaks the limits.
"""

from __future__ import annotations

from collections.abc import Sequence

from solver.model import Problem, Unserved, UnservedReason
from solver.verify import Verification, verify_plan

__all__ = ["drop_until_passing", "dropped_notice"]


def drop_until_passing(
    problem: Problem, check: Verification
) -> tuple[Verification, list[Unserved]]:
    """Leave out every carrier a violation names, verify the rest again, until it passes.

    Parameters
    ----------
    problem : Problem
        The request the carriers were planned for.
    check : Verification
        The failed (or passed) verification of the plan's carriers.

    Returns
    -------
    tuple of Verification and list of Unserved
        The verification of the carriers kept (it passes), and one ``no_spectrum`` entry per
        demand left out, its detail naming the violation.  A plan that passes comes back as
        it is, with nothing left out.
    """
    dropped: list[Unserved] = []
    while not check.passed:
        blamed = {v.demand_id: v.detail for v in check.violations}
        dropped += [
            Unserved(d, UnservedReason.NO_SPECTRUM, f"left out after verification: {why}")
            for d, why in sorted(blamed.items())
        ]
        check = verify_plan(problem, [c for c in check.carriers if c.demand_id not in blamed])
    return check, dropped


def dropped_notice(dropped: Sequence[Unserved]) -> str:
    """The plan's notice for demands left out by :func:`drop_until_passing`.

    >>> dropped_notice([Unserved("a", UnservedReason.NO_SPECTRUM, "")])
    'Verification failed: 1 demand was left out so that the rest passes (a).'
    """
    ids = ", ".join(u.demand_id for u in dropped)
    count = f"{len(dropped)} demand was" if len(dropped) == 1 else f"{len(dropped)} demands were"
    return f"Verification failed: {count} left out so that the rest passes ({ids})."
