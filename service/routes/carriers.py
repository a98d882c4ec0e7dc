"""``POST /v1/carriers/evaluate``: figures for one carrier configuration."""

from __future__ import annotations

from fastapi import APIRouter
from starlette.concurrency import run_in_threadpool

from service.convert import amplifier_from_wire, coding_from_wire, finite_or_none
from service.routes.plans import PROBLEM_RESPONSES
from service.schemas import EvaluateRequest, EvaluateResponse, LeakageAtGap
from solver import evaluate_carrier, parse_code_rate

__all__ = ["router"]

router = APIRouter(prefix="/v1/carriers", tags=["carriers"])


@router.post(
    "/evaluate",
    operation_id="evaluate_carrier",
    summary="Bandwidths, leakage, guard, margin and throughput of one carrier",
    responses=PROBLEM_RESPONSES,
)
async def evaluate(body: EvaluateRequest) -> EvaluateResponse:
    """Evaluate one configuration; no block, no placement, nothing stored.

    Once a (spectrum, coding) pair has been seen its profile and thresholds are cached and an
    evaluation takes about a millisecond, so it runs on the event loop; the first evaluation
    of a pair (a profile or catalogue to compute, up to about a second) runs in a thread.
    """
    warm_key = body.model_dump_json(include=_CACHE_FIELDS)
    if warm_key in _WARM:
        return _evaluate(body)
    response = await run_in_threadpool(_evaluate, body)
    if len(_WARM) >= _MAX_WARM:  # bounded: a client cannot grow it without limit
        _WARM.clear()
    _WARM.add(warm_key)
    return response


_CACHE_FIELDS = {"rolloff", "modulation", "code_rate", "filter_span_symbols", "window"}
_CACHE_FIELDS |= {"amplifier", "coding"}
_MAX_WARM = 4096
_WARM: set[str] = set()
"""Serialised (spectrum, coding) inputs already evaluated once in this process."""


def _evaluate(body: EvaluateRequest) -> EvaluateResponse:
    result = evaluate_carrier(
        symbol_rate_baud=body.symbol_rate_baud,
        rolloff=body.rolloff,
        modulation=body.modulation,
        code_rate=parse_code_rate(body.code_rate),
        filter_span_symbols=body.filter_span_symbols,
        window=body.window,
        amplifier=amplifier_from_wire(body.amplifier),
        cn0_dbhz=body.cn0_dbhz,
        esn0_db=body.esn0_db,
        coding=coding_from_wire(body.coding),
        margin_db=body.margin_db,
        gaps_hz=body.gaps_hz,
        leakage_limit_db=body.leakage_limit_db,
    )
    return EvaluateResponse(
        occupied_bandwidth_hz=result.occupied_bandwidth_hz,
        allocated_bandwidth_hz=result.allocated_bandwidth_hz,
        leakage_ratio_db=[
            LeakageAtGap(gap_hz=item.gap_hz, ratio_db=finite_or_none(item.ratio_db))
            for item in result.leakage_ratio_db
        ],
        guard_needed_hz=finite_or_none(result.guard_needed_hz),  # None: no limit, or none met
        esn0_db=result.esn0_db,
        required_esn0_db=finite_or_none(result.required_esn0_db),
        headroom_db=finite_or_none(result.margin_db),
        link_closes=result.link_closes,
        bits_per_symbol=result.bits_per_symbol,
        throughput_bps=result.throughput_bps,
    )
