"""Every problem ``type`` the service emits names the service's own namespace, never a web
address it does not own: ``urn:bandwright:problem:<slug>``, or ``about:blank``.

Sources: RFC 9457 §3.1.1 (``type`` is a URI reference identifying the problem type) and §4.2.1
(``about:blank``: the problem has no more semantics than the HTTP status); RFC 8141 §2 (URN
syntax: ``urn:`` NID ``:`` NSS, the NID 2 to 32 letters, digits or hyphens, neither end a
hyphen; the NSS RFC 3986 ``pchar`` and ``/``).  The patterns below are written from that ABNF,
not from the service's code.
"""

from __future__ import annotations

import ast
import json
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from api_support import serving, small_request

from service.errors import PROBLEM_TYPES, problem_type
from service.settings import Settings

pytestmark = pytest.mark.anyio

ROOT = Path(__file__).resolve().parents[2]

# RFC 8141 §2: assigned-name = "urn" ":" NID ":" NSS; NID = (alphanum) 0*30(ldh) alphanum;
# NSS = pchar *(pchar / "/"); pchar (RFC 3986 §3.3) = unreserved / pct-encoded / sub-delims /
# ":" / "@".  The scheme "urn" is case-insensitive (RFC 8141 §3.1).
PCHAR = r"(?:[A-Za-z0-9\-._~!$&'()*+,;=:@]|%[0-9A-Fa-f]{2})"
RFC_8141_URN = re.compile(
    rf"^[uU][rR][nN]:[A-Za-z0-9][A-Za-z0-9-]{{0,30}}[A-Za-z0-9]:{PCHAR}(?:{PCHAR}|/)*$"
)
# The project's own form (README "HTTP"): lower-case words joined by hyphens after the prefix.
OWN_PROBLEM_TYPE = re.compile(r"^urn:bandwright:problem:[a-z0-9]+(?:-[a-z0-9]+)*$")


def _is_own_type(value: str) -> bool:
    return value == "about:blank" or bool(
        RFC_8141_URN.match(value) and OWN_PROBLEM_TYPE.match(value)
    )


def test_the_patterns_tell_a_urn_from_a_web_address() -> None:
    # Examples of RFC 8141 §2 (a valid URN) and of what must not pass: a URL, an empty NSS,
    # a NID ending in a hyphen, another namespace.
    assert RFC_8141_URN.match("urn:example:a123,z456")
    assert not RFC_8141_URN.match("urn:example:")
    assert not RFC_8141_URN.match("urn:example-:a")
    assert not _is_own_type("https://bandwright.dev/problems/not-found")
    assert not _is_own_type("urn:other:problem:not-found")
    assert not _is_own_type("urn:bandwright:problem:Not_Found")
    assert _is_own_type("urn:bandwright:problem:not-found")


@pytest.mark.parametrize("slug", sorted(PROBLEM_TYPES))
def test_every_registered_type_is_an_own_urn(slug: str) -> None:
    assert _is_own_type(problem_type(slug)), problem_type(slug)
    assert problem_type(slug) == f"urn:bandwright:problem:{slug}"


def test_an_unregistered_slug_is_refused() -> None:
    with pytest.raises(ValueError, match="slug="):
        problem_type("made-up")


def _slug_literals(tree: ast.AST) -> Iterator[tuple[int, str]]:
    """String constants a module passes as a problem slug: ``slug=…`` keywords and ``slug = …``
    assignments (each constant inside, e.g. both arms of a conditional), the second argument of
    ``problem_document`` and the first of ``TooManyRequestsError``."""
    values: list[ast.AST] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            values += [k.value for k in node.keywords if k.arg == "slug"]
            name = getattr(node.func, "id", getattr(node.func, "attr", ""))
            if name == "problem_document" and len(node.args) >= 2:
                values.append(node.args[1])
            if name == "TooManyRequestsError" and node.args:
                values.append(node.args[0])
        elif isinstance(node, ast.Assign) and any(
            isinstance(t, ast.Name) and t.id == "slug" for t in node.targets
        ):
            values.append(node.value)
    for value in values:
        for inner in ast.walk(value):
            if isinstance(inner, ast.Constant) and isinstance(inner.value, str):
                yield inner.lineno, inner.value


def test_every_slug_the_service_passes_is_registered() -> None:
    found: dict[str, str] = {}
    for module in sorted((ROOT / "service").rglob("*.py")):
        tree = ast.parse(module.read_text(encoding="utf-8"))
        for line, slug in _slug_literals(tree):
            found[slug] = f"{module.relative_to(ROOT)}:{line}"
    # The scan must see the slugs of each kind of call, or it proves nothing.
    assert {"invalid-request", "rate-limited", "pictures-busy", "internal"} <= found.keys()
    unknown = {slug: where for slug, where in found.items() if slug not in PROBLEM_TYPES}
    assert not unknown, unknown


def test_no_problem_type_points_at_a_web_address() -> None:
    for path in [ROOT / "service" / "errors.py", ROOT / "openapi" / "openapi.json"]:
        assert "bandwright.dev" not in path.read_text(encoding="utf-8"), path


async def test_answers_of_every_kind_carry_an_own_type(settings: Settings) -> None:
    from service.app import create_app

    def broken_solve(problem: Any, **_: Any) -> Any:
        raise RuntimeError("disk on fire")

    small = settings.model_copy(update={"max_body_bytes": 1024})
    headers = {"content-type": "application/json"}
    async with serving(create_app(small, solve=broken_solve)) as client:
        answers = {
            400: await client.post("/v1/plans", content=b"{", headers=headers),
            404: await client.get("/v1/plans/nope"),
            405: await client.delete("/v1/plans"),
            413: await client.post("/v1/plans", content=b" " * 2048, headers=headers),
            422: await client.post("/v1/plans", json={"demands": []}),
            500: await client.post("/v1/plans", json=small_request()),
        }
    for status, answer in answers.items():
        assert answer.status_code == status, answer.text
        assert answer.headers["content-type"].startswith("application/problem+json")
        assert _is_own_type(answer.json()["type"]), answer.json()
    assert answers[405].json()["type"] == "about:blank"  # RFC 9457 §4.2.1: a plain 405


def test_the_documents_name_the_urn_form() -> None:
    openapi = json.loads((ROOT / "openapi" / "openapi.json").read_text(encoding="utf-8"))
    described = openapi["components"]["schemas"]["ProblemDocument"]["properties"]["type"]
    assert "urn:bandwright:problem:<slug>" in described["description"]
    assert "urn:bandwright:problem:<slug>" in openapi["info"]["description"]
    assert "urn:bandwright:problem:<slug>" in (ROOT / "README.md").read_text(encoding="utf-8")
