"""Stored plans are immutable: strong ETags, Cache-Control immutable, 304 on If-None-Match, and
nosniff on every answer.

Sources: RFC 9110 §8.8.3 (ETag), §13.1.2 (If-None-Match, weak comparison), §15.4.5 (304 carries
no body); RFC 8246 (immutable); WHATWG Fetch, X-Content-Type-Options.
"""

from __future__ import annotations

import pytest
from api_support import serving, small_request
from fastapi import FastAPI

pytestmark = pytest.mark.anyio


async def test_a_stored_plan_is_served_with_a_strong_etag_and_revalidated(app: FastAPI) -> None:
    async with serving(app) as client:
        created = await client.post("/v1/plans", json=small_request())
        where = created.headers["Location"]
        first = await client.get(where)
        again = await client.get(where, headers={"If-None-Match": first.headers["ETag"]})
        weak = await client.get(where, headers={"If-None-Match": f'"x", W/{first.headers["ETag"]}'})
        other = await client.get(where, headers={"If-None-Match": '"not-this-one"'})
    tag = first.headers["ETag"]
    assert first.status_code == 200 and tag.startswith('"') and not tag.startswith("W/")
    assert "immutable" in first.headers["Cache-Control"]
    assert first.json() == created.json()
    assert again.status_code == weak.status_code == 304
    assert again.content == b"" and again.headers["ETag"] == tag
    assert other.status_code == 200 and other.json() == created.json()


async def test_a_picture_is_revalidated_without_drawing_it_again(app: FastAPI) -> None:
    # Drawing happens in worker processes (service/pictures.py), so it is counted, not patched.
    drawn = 'bandwright_pictures_drawn_total{format="%s"}'
    async with serving(app) as client:
        created = await client.post("/v1/plans", json=small_request())
        where = created.headers["Location"] + "/spectrum.svg"
        first = await client.get(where)
        again = await client.get(where, headers={"If-None-Match": first.headers["ETag"]})
        png = await client.get(
            created.headers["Location"] + "/spectrum.png",
            headers={"If-None-Match": first.headers["ETag"]},  # the SVG's tag is not the PNG's
        )
        metrics = (await client.get("/metrics")).text.splitlines()
    assert first.status_code == 200 and first.headers["content-type"].startswith("image/svg")
    assert again.status_code == 304
    assert png.status_code == 200  # another representation: it had to be drawn
    assert f"{drawn % 'svg'} 1.0" in metrics  # once, for the first answer only
    assert f"{drawn % 'png'} 1.0" in metrics


async def test_every_answer_says_nosniff(app: FastAPI) -> None:
    async with serving(app) as client:
        answers = [
            await client.get("/healthz"),
            await client.get("/v1/plans/no-such-plan"),
            await client.post("/v1/plans", json={"bad": 1}),
        ]
    assert [a.headers.get("X-Content-Type-Options") for a in answers] == ["nosniff"] * 3
