"""Running the service for tests and benchmarks: a free loopback port, waiting for a server process
to answer its health check, and a uvicorn server in a thread of the test process."""

from __future__ import annotations

import socket
import subprocess
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now (the kernel picks it)."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def wait_healthy(
    server: subprocess.Popen, base: str, *, seconds: float = 60.0, log: Path | None = None
) -> None:
    """Return once ``GET base/v1/health`` answers 200; RuntimeError if ``server`` exits first or
    ``seconds`` pass (with the tail of ``log``, the server's output file, when given)."""
    import httpx

    def tail() -> str:
        return "" if log is None or not log.is_file() else ":\n" + log.read_text(errors="replace")[-2000:]

    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise RuntimeError(f"the server exited with status {server.returncode} before answering{tail()}")
        try:
            if httpx.get(base + "/v1/health", timeout=1.0).status_code == 200:
                return
        except httpx.TransportError:
            pass
        time.sleep(0.1)
    raise RuntimeError(f"the server did not answer /v1/health with 200 within {seconds} s{tail()}")


@contextmanager
def serve_in_thread(app, *, seconds: float = 30.0) -> Iterator[str]:
    """Serve ``app`` with uvicorn on a free loopback port in a daemon thread; yields its base URL
    and stops the server on exit. RuntimeError if it has not started within ``seconds``."""
    import uvicorn

    port = free_port()
    config = uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning", access_log=False)
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, name="test-server", daemon=True)
    thread.start()
    try:
        deadline = time.monotonic() + seconds
        while not server.started:
            if time.monotonic() > deadline or not thread.is_alive():
                raise RuntimeError(f"the test server did not start within {seconds} s")
            time.sleep(0.02)
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=30)
