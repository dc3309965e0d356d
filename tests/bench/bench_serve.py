"""HTTP load on the related-pages route, with the in-process library call beside it.

Run: `python -m tests.bench.bench_serve [--pages N] [--seconds S] [--max-requests N] [--clients C]
[--generator asyncio|httpx] [--workdir DIR]`

It writes an invented wiki of ``--pages`` pages (`rankrec synth`, layout "tables"), imports it,
builds an index with every page's related list precomputed, and serves it with uvicorn in a
child process on loopback (one worker; ``--http httptools`` / ``--loop uvloop`` only when those
are installed). The load generator runs on the same machine in this process, ``--clients``
keep-alive connections asking ``GET /v1/pages/{page}/related`` for seeded random pages (public
lists, k=10) for ``--seconds`` or ``--max-requests``, whichever comes first, after a one-second
warm-up: by default asyncio streams speaking HTTP/1.1 directly (light on CPU, so it leaves the
server its core), or with ``--generator httpx`` one ``httpx.Client`` per thread (several times
the client CPU per request; the figures then say as much about the client as the server). It
prints requests per second, p50/p90/p99 latency, errors, the load average, and the in-process
time of ``related()`` for the same pages (the ratio is what the HTTP layer costs). Target on a
2-core machine, generator included: >= 1,000 req/s, p99 < 25 ms, no errors.
"""

from __future__ import annotations

import argparse
import importlib.util
import itertools
import json
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from urllib.parse import quote

import numpy as np

from tests._serving import free_port, wait_healthy

PROJECT = Path(__file__).resolve().parents[2]


def _server_command(port: int) -> list[str]:
    command = [sys.executable, "-m", "uvicorn", "api.app:app_from_environment", "--factory"]
    command += ["--host", "127.0.0.1", "--port", str(port), "--workers", "1"]
    command += ["--log-level", "warning", "--no-access-log"]
    if importlib.util.find_spec("httptools") is not None:
        command += ["--http", "httptools"]
    if importlib.util.find_spec("uvloop") is not None:
        command += ["--loop", "uvloop"]
    return command


def _start_server(workdir: Path, index: Path, wiki: Path) -> tuple[subprocess.Popen, str, str, list[str]]:
    from api.settings import ServiceSettings
    from rankrec.tokens import add_token

    tokens = workdir / "tokens.json"
    token = add_token(tokens, "bench-frontend", "reader")
    # one token drives every request here: its rate limit off, to measure the service itself
    settings = ServiceSettings(index=index, tokens=tokens, wiki=wiki, watch_seconds=0, rate_per_second=0)
    port = free_port()
    command = _server_command(port)
    server = subprocess.Popen(
        command, cwd=PROJECT, env={**os.environ, **settings.environment()}, stdout=subprocess.DEVNULL
    )
    base = f"http://127.0.0.1:{port}"
    try:
        wait_healthy(server, base)
    except RuntimeError:
        server.kill()
        server.wait(timeout=30)
        raise
    return server, base, token, command


class _Load:
    """Closed-loop load: each client thread sends its next request when the previous one answered."""

    def __init__(self, base: str, token: str, paths: list[str], clients: int) -> None:
        self.base, self.token, self.paths, self.clients = base, token, paths, clients

    def run(self, seconds: float, max_requests: int) -> dict:
        import httpx

        tickets = itertools.count()
        deadline = time.perf_counter() + seconds
        latencies: list[list[float]] = [[] for _ in range(self.clients)]
        errors: list[list[str]] = [[] for _ in range(self.clients)]

        def client(number: int) -> None:
            rng = np.random.default_rng(1000 + number)
            headers = {"Authorization": f"Bearer {self.token}"}
            with httpx.Client(base_url=self.base, headers=headers, timeout=10.0) as session:
                while next(tickets) < max_requests and time.perf_counter() < deadline:
                    path = self.paths[int(rng.integers(len(self.paths)))]
                    started = time.perf_counter()
                    try:
                        answer = session.get(path)
                        if answer.status_code != 200:
                            errors[number].append(f"HTTP {answer.status_code}")
                    except httpx.HTTPError as error:
                        errors[number].append(type(error).__name__)
                    latencies[number].append(time.perf_counter() - started)

        threads = [threading.Thread(target=client, args=(n,)) for n in range(self.clients)]
        started = time.perf_counter()
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        wall = time.perf_counter() - started
        values = [value for found in latencies for value in found]
        return _summary(self.clients, values, [problem for found in errors for problem in found], wall)


class _LeanLoad:
    """Closed-loop load from asyncio connections speaking HTTP/1.1 keep-alive directly (stdlib only).

    A request costs the generator some tens of microseconds instead of the few hundred an httpx
    client spends, so on a 2-core machine the generator takes less of the server's CPU. Every
    answer's status line and Content-Length are checked; every 25th body is parsed as JSON and
    must hold a non-empty ``items`` list.
    """

    def __init__(self, base: str, token: str, paths: list[str], clients: int) -> None:
        host, port = base.removeprefix("http://").split(":")
        self.host, self.port, self.token, self.paths, self.clients = host, int(port), token, paths, clients

    async def _client(self, number, deadline, tickets, latencies, errors) -> None:
        import asyncio

        rng = np.random.default_rng(1000 + number)
        reader, writer = await asyncio.open_connection(self.host, self.port)
        head = f"Host: {self.host}:{self.port}\r\nAuthorization: Bearer {self.token}\r\n\r\n"
        try:
            while next(tickets) < self.max_requests and time.perf_counter() < deadline:
                path = self.paths[int(rng.integers(len(self.paths)))]
                started = time.perf_counter()
                writer.write(f"GET {path} HTTP/1.1\r\n{head}".encode())
                status, body = await self._answer(reader)
                latencies.append(time.perf_counter() - started)
                if status != 200:
                    errors.append(f"HTTP {status}")
                elif len(latencies) % 25 == 0 and not json.loads(body).get("items"):
                    errors.append("empty list")
        except (OSError, ValueError, EOFError) as error:
            errors.append(type(error).__name__)
        finally:
            writer.close()

    @staticmethod
    async def _answer(reader) -> tuple[int, bytes]:
        head = await reader.readuntil(b"\r\n\r\n")
        lines = head.split(b"\r\n")
        status = int(lines[0].split(b" ", 2)[1])
        length = None
        for line in lines[1:]:
            name, _, value = line.partition(b":")
            if name.strip().lower() == b"content-length":
                length = int(value)
        if length is None:
            raise ValueError("answer without Content-Length")
        return status, await reader.readexactly(length)

    def run(self, seconds: float, max_requests: int) -> dict:
        import asyncio

        self.max_requests = max_requests
        tickets = itertools.count()
        latencies: list[float] = []
        errors: list[str] = []

        async def everyone() -> None:
            deadline = time.perf_counter() + seconds
            await asyncio.gather(
                *(self._client(n, deadline, tickets, latencies, errors) for n in range(self.clients))
            )

        started = time.perf_counter()
        asyncio.run(everyone())
        return _summary(self.clients, latencies, errors, time.perf_counter() - started)


def _summary(clients: int, latencies: list[float], problems: list[str], wall: float) -> dict:
    values = np.array(latencies) * 1000.0
    return {
        "clients": clients,
        "requests": int(values.size),
        "seconds": round(wall, 2),
        "requests_per_second": round(values.size / wall, 1),
        "p50_ms": round(float(np.percentile(values, 50)), 2),
        "p90_ms": round(float(np.percentile(values, 90)), 2),
        "p99_ms": round(float(np.percentile(values, 99)), 2),
        "max_ms": round(float(values.max()), 2),
        "errors": len(problems),
        "error_kinds": sorted(set(problems))[:5],
    }


def _cpu_seconds(pid: int) -> float:
    """User + system CPU seconds a process has used (Linux ``/proc/PID/stat`` fields 14 and 15)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def _in_process(index_folder: Path, pages: list[str]) -> dict:
    from rankrec.index import load_index
    from rankrec.recommend import related

    index = load_index(index_folder)
    for page in pages[:50]:
        related(index, page, k=10)  # warm the memory map, as the server's warm-up does
    samples = []
    for page in pages:
        started = time.perf_counter()
        related(index, page, k=10)
        samples.append(time.perf_counter() - started)
    values = np.array(samples) * 1000.0
    return {
        "calls": len(samples),
        "p50_ms": round(float(np.percentile(values, 50)), 3),
        "p99_ms": round(float(np.percentile(values, 99)), 3),
    }


def _build(wiki: Path, target: Path) -> float:
    script = (
        "import sys; from rankrec.build import build_index; from rankrec.store import Store\n"
        "with Store(sys.argv[1], create=False) as store: build_index(store, sys.argv[2], workers=2)\n"
    )
    started = time.perf_counter()
    subprocess.run([sys.executable, "-c", script, str(wiki), str(target)], check=True, cwd=PROJECT)
    return time.perf_counter() - started


def _prepare(pages: int, workdir: Path) -> tuple[Path, Path]:
    """The store and index in ``workdir`` (made there unless a previous run left them)."""
    wiki, index_folder = workdir / "wiki.db", workdir / "index"
    if wiki.is_file() and (index_folder / "manifest.json").is_file():
        print(f"reusing {wiki} and {index_folder}", flush=True)
        return wiki, index_folder
    from tests.bench.bench_recommend import _make_store

    for stale in (workdir / "wiki", wiki, index_folder, workdir / "tokens.json"):
        if stale.is_dir() and not stale.is_symlink():
            shutil.rmtree(stale)
        elif stale.exists() or stale.is_symlink():
            stale.unlink()
    wiki = _make_store(pages, workdir)
    print(f"build: {_build(wiki, index_folder):.1f} s", flush=True)
    return wiki, index_folder


def _chosen_paths(index_folder: Path, sample: int) -> tuple[list[str], list[str]]:
    """Seeded random public pages whose related list is precomputed, and their request paths."""
    from rankrec.index import load_index

    index = load_index(index_folder)
    precomputed = np.flatnonzero(np.asarray(index.related["row"]) >= 0)
    public = precomputed[np.asarray(index.public)[precomputed]]
    rng = np.random.default_rng(7)
    chosen = rng.choice(public, size=min(sample, public.size), replace=False)
    pages = [index.pages[int(number)] for number in chosen]
    return pages, [f"/v1/pages/{quote(page, safe='')}/related?k=10" for page in pages]


def _measure(args, workdir: Path) -> dict:
    wiki, index_folder = _prepare(args.pages, workdir)
    pages, paths = _chosen_paths(index_folder, args.sample)
    (workdir / "tokens.json").unlink(missing_ok=True)
    server, base, token, command = _start_server(workdir, index_folder, wiki)
    kind = _LeanLoad if args.generator == "asyncio" else _Load
    try:
        load = kind(base, token, paths, args.clients)
        load.run(1.0, 2_000)  # warm-up, not counted
        before = os.getloadavg()
        server_cpu, own_cpu = _cpu_seconds(server.pid), time.process_time()
        measured = load.run(args.seconds, args.max_requests)
        server_cpu, own_cpu = _cpu_seconds(server.pid) - server_cpu, time.process_time() - own_cpu
        after = os.getloadavg()
    finally:
        server.terminate()
        server.wait(timeout=30)
    library = _in_process(index_folder, pages)
    return {
        "server": " ".join(command[1:]),
        "generator": f"{args.generator} ({args.clients} keep-alive connections, same machine)",
        "pages": args.pages,
        "http": measured,
        "server_cpu_ms_per_request": round(1000 * server_cpu / max(measured["requests"], 1), 3),
        "generator_cpu_ms_per_request": round(1000 * own_cpu / max(measured["requests"], 1), 3),
        "library_related": library,
        "ratio_p50_http_to_library": round(measured["p50_ms"] / max(library["p50_ms"], 1e-6), 1),
        "load_average_before": [round(value, 2) for value in before],
        "load_average_after": [round(value, 2) for value in after],
        "cpus": os.cpu_count(),
    }


def main(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--pages", type=int, default=20_000, help="pages of the invented wiki")
    parser.add_argument("--seconds", type=float, default=10.0, help="length of the measured run")
    parser.add_argument("--max-requests", type=int, default=50_000, help="stop after this many requests")
    parser.add_argument("--clients", type=int, default=8, help="concurrent keep-alive connections")
    parser.add_argument(
        "--generator",
        choices=("asyncio", "httpx"),
        default="asyncio",
        help="asyncio: HTTP/1.1 over asyncio streams (light); httpx: one httpx.Client per thread",
    )
    parser.add_argument("--sample", type=int, default=2_000, help="distinct pages asked for")
    parser.add_argument("--workdir", type=Path, help="keep the wiki and index here and reuse them next time")
    args = parser.parse_args(argv)
    if args.workdir is not None:
        args.workdir.mkdir(parents=True, exist_ok=True)
        report = _measure(args, args.workdir)
    else:
        with tempfile.TemporaryDirectory(prefix="rankrec-bench-serve-") as scratch:
            report = _measure(args, Path(scratch))
    print(json.dumps(report, indent=2), flush=True)
    http = report["http"]
    met = http["requests_per_second"] >= 1000 and http["p99_ms"] < 25 and http["errors"] == 0
    print(f"target (>= 1,000 req/s, p99 < 25 ms, no errors): {'met' if met else 'NOT met'}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
