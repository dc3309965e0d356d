"""Honest clients' throughput with and without an attacker sending unknown page ids.

Imports the invented demo wiki into a temporary folder, builds its index, and serves it with
`rankrec serve` in a child process (default settings: rate and concurrency limits on). Then, twice
for ``--seconds`` each: ``--honest`` threads with the front end's token ask for related lists of
random public pages (keep-alive httpx clients), first alone, then while ``--attackers`` connections
in another process, with a token of their own, ask for unknown page ids (a known id with a few
letters changed, so each costs a close-id search) as fast as they are answered, ignoring
Retry-After. Prints the honest requests per second both ways, their ratio, and how the attacker's
requests were answered.

    python tools/attack_throughput.py [--seconds 10] [--honest 4] [--attackers 19] [--pages N]
        [--rate-per-second R] [--rate-burst N]

``--pages N`` serves an invented wiki of N pages (`rankrec synth`) instead of the demo wiki;
``--rate-per-second`` and ``--rate-burst`` are handed to `rankrec serve` (each token's bucket), e.g.
to raise the limit above what the honest clients ask, so that the server, not their own token's
bucket, bounds their throughput. Each measured run starts after a pause long enough for the honest
token's bucket to fill up again, so both runs start alike.
"""

from __future__ import annotations

import argparse
import multiprocessing
import random
import subprocess
import sys
import tempfile
import threading
import time
from collections import Counter
from pathlib import Path
from urllib.parse import quote

import httpx

PROJECT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(PROJECT))

from tests._serving import free_port, wait_healthy  # noqa: E402


def _prepare(workdir: Path, pages: int | None) -> tuple[Path, Path, list[str]]:
    """The store and the published index, and the public page ids of the wiki."""
    from rankrec.build import build_index
    from rankrec.demo import import_demo
    from rankrec.index import load_index
    from rankrec.store import Store

    if pages is None:
        wiki = import_demo(workdir)
    else:
        from rankrec.cli import main

        source = workdir / "synth"
        wiki = workdir / "wiki.db"
        for command in (
            ["synth", "--pages", str(pages), "--out", str(source)],
            ["import", str(source), "--wiki", str(wiki)],
        ):
            if main(command) != 0:
                raise SystemExit(f"rankrec {command[0]} failed")
    with Store(wiki, create=False) as store:
        build_index(store, workdir / "index")
    index = load_index(workdir / "index")
    public = [index.pages[number] for number in range(index.size) if index.public[number]]
    return wiki, workdir / "index", public


def _honest(base: str, token: str, pages: list[str], seconds: float, threads: int) -> tuple[int, Counter]:
    """Related-list requests answered 200 to ``threads`` clients in ``seconds``, and every status seen."""
    statuses: Counter = Counter()
    lock = threading.Lock()
    deadline = time.monotonic() + seconds

    def client(seed: int) -> None:
        pick = random.Random(seed)
        seen: Counter = Counter()
        with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=30) as http:
            while time.monotonic() < deadline:
                page = pick.choice(pages)
                seen[http.get(f"/v1/pages/{quote(page, safe='')}/related").status_code] += 1
        with lock:
            statuses.update(seen)

    workers = [threading.Thread(target=client, args=(seed,)) for seed in range(threads)]
    for worker in workers:
        worker.start()
    for worker in workers:
        worker.join()
    return statuses[200], statuses


def _probe(base: str, token: str, pages: list[str], stop, counts, seed: int) -> None:
    """One attacker connection: unknown ids close to real ones, as fast as answered."""
    pick = random.Random(seed)
    letters = "abcdefghijklmnopqrstuvwxyz"
    with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=30) as http:
        while not stop.is_set():
            page = list(pick.choice(pages))
            for _ in range(2):
                page[pick.randrange(len(page))] = pick.choice(letters)
            answer = http.get(f"/v1/pages/{quote(''.join(page) + 'x', safe='')}/related")
            with counts.get_lock():
                counts[0 if answer.status_code == 404 else 1 if answer.status_code == 429 else 2] += 1


def _attack(base: str, token: str, pages: list[str], stop, counts, connections: int) -> None:
    threads = [
        threading.Thread(target=_probe, args=(base, token, pages, stop, counts, seed))
        for seed in range(connections)
    ]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    parser.add_argument("--honest", type=int, default=4, help="honest client threads")
    parser.add_argument("--attackers", type=int, default=19, help="attacker connections")
    parser.add_argument("--pages", type=int, default=None, help="an invented wiki of N pages (default: demo)")
    parser.add_argument("--rate-per-second", type=float, default=None, help="handed to rankrec serve")
    parser.add_argument("--rate-burst", type=int, default=None, help="handed to rankrec serve")
    args = parser.parse_args(argv)
    from api.settings import ServiceSettings

    defaults = ServiceSettings(index=Path("."), tokens=Path("."))
    rate = defaults.rate_per_second if args.rate_per_second is None else args.rate_per_second
    burst = defaults.rate_burst if args.rate_burst is None else args.rate_burst
    refill = 0.5 + (burst / rate if rate > 0 else 0.0)  # seconds for an empty bucket to fill

    from rankrec.tokens import add_token

    with tempfile.TemporaryDirectory(prefix="rankrec-attack-") as folder:
        workdir = Path(folder)
        wiki, index, pages = _prepare(workdir, args.pages)
        tokens = workdir / "tokens.json"
        honest_token = add_token(tokens, "frontend", "reader")
        attacker_token = add_token(tokens, "prober", "reader")
        port = free_port()
        base = f"http://127.0.0.1:{port}"
        log = workdir / "server.log"
        command = [sys.executable, "-m", "rankrec.cli", "serve", "--index", str(index), "--wiki", str(wiki)]
        command += ["--tokens", str(tokens), "--port", str(port), "--watch-seconds", "0"]
        command += ["--rate-per-second", str(rate), "--rate-burst", str(burst)]
        with open(log, "w") as output:
            server = subprocess.Popen(command, stdout=output, stderr=subprocess.STDOUT, cwd=PROJECT)
        try:
            wait_healthy(server, base, log=log)
            _honest(base, honest_token, pages, 1.0, args.honest)  # warm-up
            time.sleep(refill)
            alone, statuses_alone = _honest(base, honest_token, pages, args.seconds, args.honest)
            stop, counts = multiprocessing.Event(), multiprocessing.Array("l", 3)
            attacker = multiprocessing.Process(
                target=_attack, args=(base, attacker_token, pages, stop, counts, args.attackers)
            )
            attacker.start()
            time.sleep(refill)  # the attack under way, the honest bucket full again
            attacked, statuses_attacked = _honest(base, honest_token, pages, args.seconds, args.honest)
            stop.set()
            attacker.join(60)
        finally:
            server.terminate()
            server.wait(30)
    rate_alone, rate_attacked = alone / args.seconds, attacked / args.seconds
    print(f"wiki: {len(pages)} public pages; {args.honest} honest threads, ", end="")
    print(f"{args.attackers} attacker connections")
    print(f"each token's bucket: {rate:g} requests/s, burst {burst}")
    print(f"honest alone:          {rate_alone:8.1f} req/s  (statuses {dict(statuses_alone)})")
    print(f"honest under attack:   {rate_attacked:8.1f} req/s  (statuses {dict(statuses_attacked)})")
    print(f"ratio:                 {rate_attacked / rate_alone:8.1%}")
    print(f"attacker's answers:    404 {counts[0]}, 429 {counts[1]}, other {counts[2]}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
