"""openapi/openapi.json is generated from the app; this fails when it is stale.

Regenerate with ``python -m service.openapi_export openapi/openapi.json`` (or ``make openapi``).
"""

from __future__ import annotations

import json
from pathlib import Path

from service.openapi_export import openapi_document, openapi_text

OPENAPI_FILE = Path(__file__).resolve().parents[2] / "openapi" / "openapi.json"
CONTRACT_PATHS = {
    "/v1/plans": {"get", "post"},
    "/v1/plans/{plan_id}": {"get"},
    "/v1/plans/{plan_id}/spectrum.svg": {"get"},
    "/v1/plans/{plan_id}/spectrum.png": {"get"},
    "/v1/plans/{plan_id}/carriers.csv": {"get"},
    "/v1/plans/{plan_id}/retunes": {"get"},
    "/v1/carriers/evaluate": {"post"},
    "/v1/modcods": {"get"},
    "/v1/jobs": {"post"},
    "/v1/jobs/{job_id}": {"get"},
    "/healthz": {"get"},
    "/readyz": {"get"},
    "/metrics": {"get"},
}


def test_openapi_file_is_current() -> None:
    assert OPENAPI_FILE.read_text(encoding="utf-8") == openapi_text(), (
        "openapi/openapi.json is stale: run python -m service.openapi_export openapi/openapi.json"
    )


def test_every_contract_endpoint_is_documented() -> None:
    paths = json.loads(OPENAPI_FILE.read_text(encoding="utf-8"))["paths"]
    for path, methods in CONTRACT_PATHS.items():
        assert methods <= paths[path].keys(), path


def test_schema_carries_units_and_bounds() -> None:
    schemas = openapi_document()["components"]["schemas"]
    demand = schemas["DemandIn"]["properties"]
    assert demand["target_rate_bps"]["minimum"] == 1  # bit/s: the validator's least rate
    assert "bit/s" in demand["target_rate_bps"]["description"]
    assert schemas["PlanRequest"]["additionalProperties"] is False
    assert schemas["PlanRequest"]["properties"]["time_limit_s"]["maximum"] == 300
