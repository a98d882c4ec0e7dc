"""After a 500 the connection stays open: the client's next request on it is answered.

Before: the unhandled error was re-raised past the application (so that the server logged it),
and the server closed the connection after the 500, so a client reusing it failed.  HTTP/1.1
persistence: RFC 9112 §9.3 (a connection persists unless either side signals close).
"""

from __future__ import annotations

import json
import socket
import threading
import time
from pathlib import Path
from typing import Any

import uvicorn
from api_support import small_request

from service.app import create_app
from service.settings import Settings
from solver import Plan, Problem

START_TIMEOUT_S = 20.0


def _failing_solve(problem: Problem, **kw: Any) -> Plan:
    raise RuntimeError("a defect inside the solver (test double)")


def _read_response(sock: socket.socket) -> tuple[int, dict[str, str], bytes]:
    data = b""
    while b"\r\n\r\n" not in data:
        chunk = sock.recv(65536)
        assert chunk, "the server closed the connection"
        data += chunk
    head, body = data.split(b"\r\n\r\n", 1)
    lines = head.decode("latin-1").split("\r\n")
    status = int(lines[0].split()[1])
    headers = {k.lower(): v.strip() for k, v in (line.split(":", 1) for line in lines[1:])}
    length = int(headers.get("content-length", "0"))
    while len(body) < length:
        chunk = sock.recv(65536)
        assert chunk, "the server closed the connection mid-body"
        body += chunk
    return status, headers, body[:length]


def test_a_500_leaves_the_connection_open_for_the_next_request(tmp_path: Path) -> None:
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'plans.db'}")
    app = create_app(settings, solve=_failing_solve)
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="critical"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    try:
        deadline = time.monotonic() + START_TIMEOUT_S
        while not server.started:
            assert time.monotonic() < deadline, "server did not start"
            time.sleep(0.05)
        body = json.dumps(small_request()).encode()
        with socket.create_connection(("127.0.0.1", port), timeout=30) as sock:
            sock.sendall(
                b"POST /v1/plans HTTP/1.1\r\nHost: test\r\nContent-Type: application/json\r\n"
                + f"Content-Length: {len(body)}\r\n\r\n".encode()
                + body
            )
            status, headers, answer = _read_response(sock)
            assert status == 500, answer
            assert headers["content-type"].startswith("application/problem+json")
            assert headers.get("connection", "").lower() != "close"
            sock.sendall(b"GET /healthz HTTP/1.1\r\nHost: test\r\n\r\n")
            status, _, answer = _read_response(sock)
            assert status == 200, answer
    finally:
        server.should_exit = True
        thread.join(timeout=10)
