"""Synchronous plans against a real server process: a client that leaves, and a store that stops.

* A client that disconnects mid-solve stops the work at once and nothing is stored: with one
  solve slot and no waiting place, the next request is served long before the abandoned solve's
  time limit would have freed the slot.
* PostgreSQL reached through a relay this test can cut: with the store down, ``POST /v1/plans``
  answers 503 with Retry-After before solving; cut during the solve and restored within the
  storing retries, the plan is stored once (201); cut for good, the answer is 503, never 500.
"""

from __future__ import annotations

import contextlib
import os
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from service.settings import Settings
from service.store import Store
from tests.api.api_support import crowded_request, on_postgres, small_request

pytestmark = pytest.mark.slow

START_WITHIN_S = 60.0
ABANDONED_LIMIT_S = 60.0


def _crowded(time_limit_s: float) -> dict[str, Any]:
    return crowded_request("crowded", time_limit_s)


class Relay:
    """A TCP relay on loopback to a real server, which the test can cut and restore."""

    def __init__(self, host: str, port: int) -> None:
        self.target = (host, port)
        self.listener = socket.create_server(("127.0.0.1", 0))
        self.port: int = self.listener.getsockname()[1]
        self.open = True
        self.sockets: list[socket.socket] = []
        self.lock = threading.Lock()
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while True:
            try:
                client, _ = self.listener.accept()
            except OSError:
                return
            if not self.open:
                client.close()
                continue
            upstream = socket.create_connection(self.target)
            with self.lock:
                self.sockets += [client, upstream]
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pump, args=(a, b), daemon=True).start()

    @staticmethod
    def _pump(source: socket.socket, sink: socket.socket) -> None:
        try:
            while data := source.recv(65536):
                sink.sendall(data)
        except OSError:
            pass
        finally:
            for s in (source, sink):
                with contextlib.suppress(OSError):
                    s.shutdown(socket.SHUT_RDWR)

    def cut(self) -> None:
        """Refuse new connections and drop every open one (the database went away)."""
        self.open = False
        with self.lock:
            for s in self.sockets:
                with contextlib.suppress(OSError):
                    s.shutdown(socket.SHUT_RDWR)
            self.sockets.clear()

    def restore(self) -> None:
        self.open = True

    def close(self) -> None:
        self.cut()
        self.listener.close()


def _serve(tmp_path: Path, database_url: str, **env: str) -> tuple[subprocess.Popen[bytes], str]:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    full_env = {
        **os.environ,
        "BANDWRIGHT_DATABASE_URL": database_url,
        "BANDWRIGHT_CACHE_DIR": str(tmp_path / "profiles"),
        "BANDWRIGHT_SOLVE_RATE_LIMIT": "",  # faults are under test here, not the client's rate
        **env,
    }
    process = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
        env=full_env,
        stdout=(tmp_path / "api.log").open("wb"),
        stderr=subprocess.STDOUT,
    )
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + START_WITHIN_S
    while time.monotonic() < deadline:
        assert process.poll() is None, (tmp_path / "api.log").read_text()
        try:
            if httpx.get(f"{base}/healthz", timeout=1).status_code == 200:
                return process, base
        except httpx.TransportError:
            pass
        time.sleep(0.2)
    process.kill()
    raise AssertionError("the service did not start")


@pytest.fixture
def one_slot_server(tmp_path: Path) -> Iterator[tuple[str, str]]:
    url = f"sqlite:///{tmp_path / 'plans.db'}"
    process, base = _serve(
        tmp_path, url, BANDWRIGHT_MAX_CONCURRENT_SOLVES="1", BANDWRIGHT_MAX_QUEUED="0"
    )
    try:
        yield base, url
    finally:
        process.terminate()
        process.wait(timeout=60)


def test_a_client_that_leaves_stops_its_solve_and_nothing_is_stored(
    one_slot_server: tuple[str, str],
) -> None:
    base, url = one_slot_server
    with pytest.raises(httpx.ReadTimeout):  # the client gives up and closes its connection
        httpx.post(f"{base}/v1/plans", json=_crowded(ABANDONED_LIMIT_S), timeout=2.0)
    left_at = time.monotonic()
    served = None
    while served is None and time.monotonic() - left_at < ABANDONED_LIMIT_S / 2:
        answer = httpx.post(f"{base}/v1/plans", json=small_request(time_limit_s=1.0), timeout=60)
        if answer.status_code == 201:
            served = time.monotonic() - left_at
        else:
            assert answer.status_code == 503, answer.text  # the slot is still taken
            time.sleep(0.2)
    assert served is not None, "the abandoned solve kept its slot"
    store = Store(url)
    assert store.count_plans() == 1  # only the small plan: nothing of the abandoned one
    store.close()


@pytest.fixture
def relayed_postgres(tmp_path: Path, settings: Settings) -> Iterator[tuple[Relay, str, str]]:
    direct = on_postgres(settings).database_url
    Store(direct).ensure_schema()
    address = httpx.URL(direct.replace("postgresql+psycopg", "http", 1))
    relay = Relay(address.host, address.port or 5432)
    relayed = direct.replace(f"{address.host}:{address.port}", f"127.0.0.1:{relay.port}", 1)
    process, base = _serve(tmp_path, relayed)
    try:
        yield relay, base, direct
    finally:
        process.terminate()
        process.wait(timeout=60)
        relay.close()


def test_a_store_that_stops_gives_503_never_500_and_loses_no_plan(
    relayed_postgres: tuple[Relay, str, str],
) -> None:
    relay, base, direct = relayed_postgres
    with httpx.Client(base_url=base, timeout=120) as client:
        relay.cut()
        ready = client.get("/readyz")
        started = time.monotonic()
        refused = client.post("/v1/plans", json=_crowded(30.0))
        refused_after = time.monotonic() - started
        relay.restore()

        # cut while solving, back within the storing retries: stored once
        def blink() -> None:
            time.sleep(0.5)
            relay.cut()
            time.sleep(3.5)
            relay.restore()

        threading.Thread(target=blink, daemon=True).start()
        kept = client.post("/v1/plans", json=_crowded(3.0))

        # cut while solving, for good
        def cut_later() -> None:
            time.sleep(0.5)
            relay.cut()

        threading.Thread(target=cut_later, daemon=True).start()
        lost = client.post("/v1/plans", json=_crowded(3.0))
        relay.restore()
        back = client.get("/readyz")
    assert ready.status_code == 503
    assert refused.status_code == 503
    assert refused.headers["retry-after"]
    assert refused_after < 30.0 / 2  # refused before solving, not after a 30 s solve
    assert kept.status_code == 201, kept.text
    assert lost.status_code == 503, lost.text
    assert lost.headers["retry-after"]
    assert back.status_code == 200
    store = Store(direct)
    assert store.count_plans() == 1
    assert store.get_plan(kept.json()["id"]) is not None
    store.close()
