"""The store's own promises, on SQLite and on PostgreSQL (the scaled-out deployment's store):
plans round-trip through the API unchanged, plans and replays are kept as first written, and the
job leases are compare-and-set, so that racing processes never both win a job and a job gives at
most one plan.

Races are run for real: the competing calls start together on threads (a barrier releases
them), and each test says what must hold whichever call the database lets through first.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from datetime import timedelta
from typing import TypeVar

import pytest
from api_support import serving, small_request

from service.app import create_app
from service.convert import plan_to_wire, to_problem
from service.runtime import SolveFunction, new_id
from service.schemas import JobProgress, JobState, PlanOut, PlanRequest
from service.settings import Settings
from service.store import JobCapError, Replay, Store, StoreUnavailableError, utc_now

T = TypeVar("T")

LEASE_S = 30.0
SHORT_LEASE_S = 0.05  # lapses during the test's own wait
LAPSE_WAIT_S = 0.2
RACERS = 6


@pytest.fixture
def store(stores: Settings) -> Iterator[Store]:
    """A store at the newest schema, on SQLite and then on PostgreSQL."""
    store = Store(stores.database_url)
    store.ensure_schema()
    yield store
    store.close()


@pytest.fixture(scope="module")
def request_() -> PlanRequest:
    return PlanRequest.model_validate(small_request(time_limit_s=1.0))


@pytest.fixture(scope="module")
def solved(request_: PlanRequest) -> PlanOut:
    """A real plan of the small request (solved once); tests give copies their own ids."""
    from solver import solve

    plan = solve(to_problem(request_))
    return plan_to_wire(plan, plan_id=new_id(), created_at=utc_now(), parent_id=None)


def _copy(plan: PlanOut, **changes: object) -> PlanOut:
    return plan.model_copy(update={"id": new_id(), **changes})


def _at_once(*calls: Callable[[], T]) -> list[T]:
    """Run the calls on threads released together; their results, in the calls' order."""
    start = threading.Barrier(len(calls))

    def run(call: Callable[[], T]) -> T:
        start.wait()
        return call()

    with ThreadPoolExecutor(len(calls)) as pool:
        return list(pool.map(run, calls))


def _queued(
    store: Store, request: PlanRequest, owner: str | None = None, lease_s: float = 0
) -> str:
    job_id = new_id()
    store.add_job(job_id, request, owner=owner, lease_s=lease_s if owner else None)
    return job_id


@pytest.mark.anyio
async def test_plans_round_trip_through_the_api(
    stores: Settings, real_solve: SolveFunction
) -> None:
    async with serving(create_app(stores, solve=real_solve)) as client:
        ready = await client.get("/readyz")
        assert ready.status_code == 200, ready.text
        created = await client.post("/v1/plans", json=small_request())
        assert created.status_code == 201, created.text
        plan = created.json()
        fetched = await client.get(created.headers["location"])
        assert fetched.json() == plan
        replan = await client.post(
            "/v1/plans", json=small_request(previous_plan_id=plan["id"], name="replan")
        )
        assert replan.status_code == 201, replan.text
        assert replan.json()["parent_id"] == plan["id"]
        page = await client.get("/v1/plans", params={"limit": 10})
        assert page.json()["total"] == 2


def test_a_plan_is_read_back_as_written_and_listed_newest_first(
    store: Store, solved: PlanOut, request_: PlanRequest
) -> None:
    first = _copy(solved, created_at=solved.created_at - timedelta(minutes=1))
    second = _copy(solved, parent_id=first.id)
    store.add_plan(first, request_)
    store.add_plan(second, request_)
    stored = store.get_plan(second.id or "")
    assert stored is not None and stored.plan == second and stored.request == request_
    items, total = store.list_plans(0, 1)
    assert total == 2 and [(i.id, i.parent_id) for i in items] == [(second.id, first.id)]
    assert store.get_plan(new_id()) is None


def test_the_first_replay_kept_for_a_key_is_the_one_given_again(store: Store) -> None:
    first = Replay("a" * 64, 201, "/v1/plans/1", '{"id": "1"}')
    second = Replay("b" * 64, 202, "/v1/jobs/2", '{"id": "2"}')
    assert store.add_replay("POST /v1/plans k1", first) == first
    assert store.add_replay("POST /v1/plans k1", second) == first
    assert store.find_replay("POST /v1/plans k1") == first
    assert store.find_replay("POST /v1/jobs k1") is None


def test_of_two_claims_of_one_queued_job_exactly_one_wins(
    store: Store, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    owners = [f"worker-{i}" for i in range(RACERS)]
    claims = _at_once(*(lambda o=o: store.claim_job(job_id, o, LEASE_S) for o in owners))
    winners = [o for o, claim in zip(owners, claims, strict=True) if claim is not None]
    assert len(winners) == 1
    record = store.get_job(job_id)
    assert record is not None and record.job.state is JobState.RUNNING and record.job.attempts == 1
    holders = [o for o in owners if store.renew_leases(o, [job_id], LEASE_S)]
    assert holders == winners


def test_a_job_held_on_a_live_lease_is_claimed_only_by_its_holder(
    store: Store, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_, owner="api-1", lease_s=LEASE_S)
    assert store.claim_job(job_id, "worker-2", LEASE_S) is None
    assert store.claim_job(job_id, "api-1", LEASE_S) is not None
    assert store.claim_job(job_id, "worker-2", LEASE_S) is None  # running on a live lease


def test_a_running_job_whose_lease_ran_out_is_claimable(
    store: Store, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    assert store.claim_job(job_id, "killed", SHORT_LEASE_S) is not None
    time.sleep(LAPSE_WAIT_S)
    taken = store.claim_job(job_id, "survivor", LEASE_S)
    assert taken is not None and taken.job.state is JobState.RUNNING and taken.job.attempts == 2
    progress = JobProgress(
        elapsed_s=1.0, objective_value=None, best_bound=None, optimality_gap=None
    )
    assert not store.record_progress(job_id, "killed", progress)
    assert store.record_progress(job_id, "survivor", progress)
    assert store.renew_leases("killed", [job_id], LEASE_S) == set()
    assert not store.fail_job(job_id, "killed", {"detail": "late"})


def test_finishing_a_job_twice_keeps_the_first_plan(
    store: Store, solved: PlanOut, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    store.claim_job(job_id, "worker-1", LEASE_S)
    first, second = _copy(solved), _copy(solved)
    assert store.finish_job(job_id, first, request_) == first.id
    assert store.finish_job(job_id, second, request_) == first.id
    assert store.plans_of_job(job_id) == [first.id]
    assert store.get_plan(second.id or "") is None
    record = store.get_job(job_id)
    assert record is not None and record.job.state is JobState.DONE
    assert record.job.plan_id == first.id


def test_two_finishes_at_once_store_one_plan_and_agree_on_it(
    store: Store, solved: PlanOut, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    store.claim_job(job_id, "worker-1", LEASE_S)
    plans = [_copy(solved) for _ in range(RACERS)]
    kept = _at_once(*(lambda p=p: store.finish_job(job_id, p, request_) for p in plans))
    stored = store.plans_of_job(job_id)
    assert len(stored) == 1 and kept == stored * RACERS
    record = store.get_job(job_id)
    assert record is not None and (record.job.state, record.job.plan_id) == (
        JobState.DONE,
        stored[0],
    )


def test_a_job_cancelled_while_running_stores_no_plan(
    store: Store, solved: PlanOut, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    store.claim_job(job_id, "worker-1", LEASE_S)
    cancelled = store.cancel_job(job_id)
    assert cancelled is not None and cancelled.state is JobState.CANCELLED
    plan = _copy(solved)
    assert store.finish_job(job_id, plan, request_) is None
    assert store.plans_of_job(job_id) == [] and store.get_plan(plan.id or "") is None
    assert store.renew_leases("worker-1", [job_id], LEASE_S) == set()
    assert store.claim_job(job_id, "worker-2", LEASE_S) is None
    assert store.cancel_job(new_id()) is None


def test_a_finished_job_is_not_cancelled(
    store: Store, solved: PlanOut, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    store.claim_job(job_id, "worker-1", LEASE_S)
    store.finish_job(job_id, _copy(solved), request_)
    after = store.cancel_job(job_id)
    assert after is not None and after.state is JobState.DONE


def test_two_adopters_take_each_stranded_job_once(store: Store, request_: PlanRequest) -> None:
    stranded = {_queued(store, request_, owner="killed", lease_s=SHORT_LEASE_S) for _ in range(5)}
    live = _queued(store, request_, owner="alive", lease_s=LEASE_S)
    time.sleep(LAPSE_WAIT_S)
    first, second = _at_once(
        lambda: store.adopt_jobs("adopter-a", LEASE_S),
        lambda: store.adopt_jobs("adopter-b", LEASE_S),
    )
    assert set(first).isdisjoint(second) and set(first) | set(second) == stranded
    assert store.renew_leases("adopter-a", stranded, LEASE_S) == set(first)
    assert store.renew_leases("alive", [live], LEASE_S) == {live}
    assert store.adopt_jobs("adopter-c", LEASE_S) == []


def test_adopting_unheld_jobs_skips_those_sent_to_the_queue(
    store: Store, request_: PlanRequest
) -> None:
    unsent, sent = _queued(store, request_), _queued(store, request_)
    assert store.mark_sent(sent)
    assert store.adopt_jobs("api-1", LEASE_S) == []  # no lease ran out
    assert store.adopt_jobs("api-1", LEASE_S, unheld=True) == [unsent]
    assert store.adopt_jobs("api-2", LEASE_S, unheld=True) == []


def test_a_job_is_marked_sent_once_and_unsent_jobs_are_found(
    store: Store, request_: PlanRequest
) -> None:
    job_id = _queued(store, request_)
    _queued(store, request_, owner="api-1", lease_s=LEASE_S)  # held here: never sent
    time.sleep(LAPSE_WAIT_S)
    assert store.unsent_jobs(older_than_s=LAPSE_WAIT_S / 2) == [job_id]
    assert store.unsent_jobs(older_than_s=3600) == []
    assert store.mark_sent(job_id) and not store.mark_sent(job_id)
    assert store.unsent_jobs(older_than_s=0) == []
    assert store.mark_sent(job_id, sent=False)  # the send failed: it is unsent again
    assert store.unsent_jobs(older_than_s=LAPSE_WAIT_S / 2) == [job_id]


def test_only_the_holder_releases_or_fails_a_job(store: Store, request_: PlanRequest) -> None:
    job_id = _queued(store, request_)
    store.claim_job(job_id, "worker-1", LEASE_S)
    assert not store.release_job(job_id, "worker-2")
    assert store.release_job(job_id, "worker-1")
    released = store.get_job(job_id)
    assert released is not None and released.job.state is JobState.QUEUED
    assert store.claim_job(job_id, "worker-2", LEASE_S) is not None
    error = {"status": 500, "detail": "the solver failed"}
    assert not store.fail_job(job_id, "worker-1", error)
    assert store.fail_job(job_id, "worker-2", error)
    failed = store.get_job(job_id)
    assert failed is not None and (failed.job.state, failed.job.error) == (JobState.FAILED, error)
    assert not store.fail_job(job_id, "worker-2", error)


def test_submissions_racing_on_one_key_never_pass_its_cap(
    store: Store, request_: PlanRequest
) -> None:
    cap, racers = 3, 12
    store.add_key("k" * 32, "racer", "plan", "hash-of-the-racing-key")

    def submit() -> str:
        try:
            store.add_job(new_id(), request_, key_id="k" * 32, key_cap=cap)
        except JobCapError:
            return "refused"
        except StoreUnavailableError:  # SQLite: a writer that lost the lock race
            return "busy"
        return "queued"

    outcomes = _at_once(*([submit] * racers))
    assert outcomes.count("queued") == cap, outcomes
    assert store.count_jobs(JobState.QUEUED, key_id="k" * 32) == cap
    store.add_job(new_id(), request_, key_id="another-key", key_cap=cap)  # keys count apart
