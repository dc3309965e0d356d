"""Builds under live ingestion: does ``rankrec build`` succeed while reading history arrives?

Imports the bundled demo wiki into a fresh store in a temporary folder, then runs ``--builds``
successive ``rankrec build`` processes while a writer thread appends views to the same store the way
``POST /v1/views`` does (:meth:`rankrec.store.Store.append_views`, one durable transaction per batch),
half of them by readers the store has never seen (a reader who appears between a build's reads of users
and of views once made builds fail). Prints each build's exit status and seconds, the views added, and
"builds succeeded N of N"; exits 1 when any build failed (its error output shown).

Run: ``.venv/bin/python tools/ingestion_builds.py [--builds 5] [--batch 20] [--pause 0.05]``
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from types import SimpleNamespace

from rankrec.demo import import_demo
from rankrec.store import Store

RANKREC = Path(sys.executable).with_name("rankrec")


def _writer(store_path: Path, stop: threading.Event, batch: int, pause: float, added: list[int]) -> None:
    with Store(store_path, create=False) as store:
        pages = store.present_pages()[1][:200]
        known = store.users()[1]
        step, stamp = 0, 2.0e9
        while not stop.is_set():
            views = []
            for offset in range(batch):
                number = step * batch + offset
                user = f"live-{number:07d}" if number % 2 else known[number % len(known)]
                views.append(SimpleNamespace(user=user, page=pages[number % len(pages)], timestamp=stamp))
                stamp += 1.0
            added[0] += store.append_views(views)
            step += 1
            time.sleep(pause)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--builds", type=int, default=5, help="successive builds (default 5)")
    parser.add_argument("--batch", type=int, default=20, help="views per write transaction (default 20)")
    parser.add_argument("--pause", type=float, default=0.05, help="seconds between writes (default 0.05)")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="ingestion-builds-") as folder:
        work = Path(folder)
        store_path = import_demo(work)
        stop, added = threading.Event(), [0]
        writer = threading.Thread(target=_writer, args=(store_path, stop, args.batch, args.pause, added))
        writer.start()
        failed = 0
        try:
            for number in range(args.builds):
                started = time.perf_counter()
                index = str(work / f"i{number}")
                command = [str(RANKREC), "build", "--wiki", str(store_path), "--index", index]
                done = subprocess.run(command, capture_output=True, text=True, timeout=600)
                seconds = time.perf_counter() - started
                status = f"exit {done.returncode}, {seconds:.1f} s"
                print(f"build {number + 1}: {status}, views so far {added[0]:,}")
                if done.returncode != 0:
                    failed += 1
                    print("  " + "\n  ".join(done.stderr.strip().splitlines()[-5:]))
        finally:
            stop.set()
            writer.join()
    print(f"views added during the builds: {added[0]:,}")
    print(f"builds succeeded {args.builds - failed} of {args.builds}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
