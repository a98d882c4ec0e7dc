"""A bounded schema-fuzzing run: schemathesis generates requests from the service's own OpenAPI
document and checks every answer.

Checks (schemathesis's own): no 5xx (``not_a_server_error``), every status code declared for
its operation (``status_code_conformance``), every body in the declared schema
(``response_schema_conformance``) and the declared media type (``content_type_conformance``).
Schema-valid requests may still be refused with a 422 for what a JSON Schema cannot say (a
block's stop above its start, a target at least the minimum), so schemathesis's
``positive_data_acceptance`` is not one of the checks.

Plans are kept small before each call (at most three demands, a one-second limit, a short
filter) so that the run stays bounded; every operation gets :data:`EXAMPLES` generated requests.
"""

from __future__ import annotations

import tempfile
from collections import Counter
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, settings
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from service.app import create_app
from service.settings import Settings

EXAMPLES = 90
"""Generated requests per operation (15 operations: some 1,300 requests in all)."""

LEAST_REQUESTS = 1_000

_HOME = Path(tempfile.mkdtemp(prefix="bandwright-fuzz-"))
APP = create_app(
    Settings(
        database_url=f"sqlite:///{_HOME / 'fuzz.db'}",
        max_concurrent_solves=2,
        max_queued=8,
        workers_per_solve=1,
        job_workers=1,
        rate_limit="100000/minute",  # counted on every call, but never the answer: the run
        solve_rate_limit="100000/minute",  # is about what the operations answer
    )
)
SCHEMA = schemathesis.openapi.from_asgi("/openapi.json", APP)
SEEN: Counter[int] = Counter()
REFUSED: Counter[str] = Counter()
"""The first field named by each 422 to a POST (what the generated bodies get wrong)."""


def _small(body: Any) -> Any:
    """Plans small enough to solve in a second: at most three demands, a one-second limit,
    a short filter (the profile of a 256-symbol filter takes seconds to compute)."""
    if not isinstance(body, dict):
        return body
    small = dict(body)
    if isinstance(small.get("items"), list):  # a batch: each item a plan request
        small["items"] = [_small(item) for item in small["items"][:2]]
    if isinstance(small.get("demands"), list):
        small["demands"] = [_coherent(i, d) for i, d in enumerate(small["demands"][:3])]
    if isinstance(small.get("block"), dict):
        small["block"] = _coherent_block(small["block"])
    if "demands" in small:
        small["time_limit_s"] = 1.0
        small.pop("previous_plan_id", None)  # a generated id names no stored plan
    transmitter = small.get("transmitter")
    if isinstance(transmitter, dict) and "filter_span_symbols" in transmitter:
        small["transmitter"] = transmitter | {"filter_span_symbols": 8}
    if "filter_span_symbols" in small:
        small["filter_span_symbols"] = 8
    return small


def _coherent(i: int, demand: Any) -> Any:
    """Most generated demands break a rule a JSON Schema cannot state (unique ids, a target
    at least the minimum, a pin inside the block); all are mended so that plans get solved."""
    if not isinstance(demand, dict):
        return demand
    mended = dict(demand, id=f"d{i}")
    mended.pop("pinned_center_hz", None)
    low, high = mended.get("min_rate_bps"), mended.get("target_rate_bps")
    if isinstance(low, float | int) and isinstance(high, float | int) and high < low:
        mended["min_rate_bps"], mended["target_rate_bps"] = high, low
    return mended


def _coherent_block(block: dict[str, Any]) -> dict[str, Any]:
    """A block whose stop lies above its start, some hundred raster steps wide."""
    start, raster = block.get("start_hz"), block.get("raster_hz", 25e3)
    if not isinstance(start, float | int) or not isinstance(raster, float | int) or raster <= 0:
        return block
    return dict(block, stop_hz=start + 100 * raster)


@pytest.mark.slow
@SCHEMA.parametrize()
@settings(
    max_examples=EXAMPLES,
    deadline=None,
    derandomize=True,
    phases=[Phase.explicit, Phase.generate],
    suppress_health_check=list(HealthCheck),
)
def test_every_answer_is_declared_and_none_is_a_server_error(case: schemathesis.Case) -> None:
    if isinstance(case.body, dict):  # every phase's bodies, not only the generated ones
        case.body = _small(case.body)
    response = case.call()
    SEEN[response.status_code] += 1
    if response.status_code == 422 and case.operation.method.upper() == "POST":
        fields = [e.get("field", "") for e in response.json().get("errors", [])]
        REFUSED.update(f.split(".")[-1] for f in fields[:1])
    case.validate_response(
        response,
        checks=[
            not_a_server_error,
            status_code_conformance,
            response_schema_conformance,
            content_type_conformance,
        ],
    )


@pytest.mark.slow
def test_the_run_was_not_trivially_small() -> None:
    total = sum(SEEN.values())
    assert total >= LEAST_REQUESTS, f"only {total} requests: {dict(SEEN)}"
    assert not any(code >= 500 for code in SEEN), dict(SEEN)
    print(f"schema fuzzing: {total} requests, by status {dict(sorted(SEEN.items()))}")
    print(f"most refused fields: {REFUSED.most_common(8)}")
