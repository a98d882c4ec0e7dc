"""One end-to-end run against a real uvicorn process on 127.0.0.1 (bounded; stops itself).

Covers what in-process transports cannot: the console script starting a server, real sockets,
and a plan answered over TCP.  HTTP semantics: RFC 9110 §15.3.2 (201 with Location).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
from api_support import small_request

START_TIMEOUT_S = 30.0
REQUEST_TIMEOUT_S = 60.0


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def test_plan_over_a_real_socket(tmp_path: Path) -> None:
    port = _free_port()
    env = dict(os.environ, BANDWRIGHT_DATABASE_URL=f"sqlite:///{tmp_path / 'live.db'}")
    root = Path(__file__).resolve().parents[2]
    env["PYTHONPATH"] = str(root)
    command = [
        sys.executable,
        "-m",
        "service.cli",
        "serve",
        "--host",
        "127.0.0.1",
        "--port",
        str(port),
    ]
    server = subprocess.Popen(
        command, env=env, cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE
    )
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + START_TIMEOUT_S
        while True:
            try:
                if httpx.get(f"{base}/healthz", timeout=1.0).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert server.poll() is None, server.stderr.read() if server.stderr else ""
            assert time.monotonic() < deadline, "server did not start"
            time.sleep(0.1)
        with httpx.Client(base_url=base, timeout=REQUEST_TIMEOUT_S) as client:
            created = client.post("/v1/plans", json=small_request(time_limit_s=2.0))
            assert created.status_code == 201, created.text
            fetched = client.get(created.headers["location"])
            ready = client.get("/readyz")
        assert fetched.json()["id"] == created.json()["id"]
        assert ready.status_code == 200
    finally:
        server.terminate()
        try:
            server.wait(timeout=15)
        except subprocess.TimeoutExpired:
            server.kill()
            server.wait(timeout=5)
