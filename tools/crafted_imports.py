"""Crafted files against ``rankrec import``: each hostile input's import time, peak memory and outcome.

Each case is a small Markdown folder made in a temporary directory: a YAML alias bomb in front matter
(nine levels of nine aliases, a few hundred bytes), a page that is a symlink to /dev/zero, a FIFO named
like a page, ``![[a](`` repeated 100,000 times in one page (once quadratic), a symlink leaving the wiki
folder (to /etc/passwd), and a plain control folder of 100 pages. Each import runs in its own child
process (``rankrec import --wiki STORE FOLDER``), itself started by a small wrapper process so that the
wrapper's ``RUSAGE_CHILDREN`` maximum resident set is that one import's peak. A case fails when it runs
over ``--timeout`` seconds, takes more than ``--max-seconds`` or ``--max-mib``, or when the escaping
symlink's target becomes a page of the store. Exits 1 when any case fails.

Run: ``.venv/bin/python tools/crafted_imports.py [--timeout 60] [--max-seconds 10] [--max-mib 512]``
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from rankrec.store import Store

RANKREC = Path(sys.executable).with_name("rankrec")
_WRAPPER = (
    "import resource, subprocess, sys\n"
    "done = subprocess.run(sys.argv[1:], capture_output=True, text=True)\n"
    "sys.stderr.write(done.stderr)\n"
    "peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss\n"
    "print(done.returncode, peak)\n"
)


def _alias_bomb(folder: Path) -> None:
    lines = ['a: &a ["x","x","x","x","x","x","x","x","x"]']
    for level in "bcdefghi":
        previous = chr(ord(level) - 1)
        lines.append(f"{level}: &{level} [" + ",".join([f"*{previous}"] * 9) + "]")
    (folder / "bomb.md").write_text("---\n" + "\n".join(lines) + "\n---\n# Bomb\n\nsee [x](x.md)\n")
    (folder / "x.md").write_text("# X\n")


def _dev_zero(folder: Path) -> None:
    (folder / "ok.md").write_text("# Ok\n\n[z](z.md)\n")
    (folder / "z.md").symlink_to("/dev/zero")


def _fifo(folder: Path) -> None:
    (folder / "ok.md").write_text("# Ok\n\n[p](p.md)\n")
    os.mkfifo(folder / "p.md")


def _brackets(folder: Path) -> None:
    (folder / "brackets.md").write_text("# Brackets\n\n" + "![[a](" * 100_000 + "\n")


def _escape(folder: Path) -> None:
    (folder / "ok.md").write_text("# Ok\n\n[out](out.md)\n")
    (folder / "out.md").symlink_to("/etc/passwd")


def _control(folder: Path) -> None:
    for number in range(100):
        text = f"# Page {number}\n\nSee [next](p{(number + 1) % 100}.md) and [home](p0.md).\n"
        (folder / f"p{number}.md").write_text(text)


CASES = {
    "YAML alias bomb": _alias_bomb,
    "symlink to /dev/zero": _dev_zero,
    "FIFO named p.md": _fifo,
    "'![[a](' x 100,000": _brackets,
    "symlink out of the wiki": _escape,
    "control: 100 plain pages": _control,
}


def _run(store: Path, folder: Path, timeout: float) -> tuple[int | None, float, float, str]:
    """(exit status or None on timeout, seconds, peak MiB, first line of the error output)."""
    command = [sys.executable, "-c", _WRAPPER, str(RANKREC), "import", "--wiki", str(store), str(folder)]
    started = time.perf_counter()
    try:
        done = subprocess.run(command, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return None, time.perf_counter() - started, float("nan"), "timed out"
    seconds = time.perf_counter() - started
    status, peak = done.stdout.split()
    message = next((line for line in done.stderr.splitlines() if line.strip()), "")
    return int(status), seconds, int(peak) / 1024, message[:150]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--timeout", type=float, default=60.0, help="seconds before a case is stopped")
    parser.add_argument("--max-seconds", type=float, default=10.0, help="longest acceptable import")
    parser.add_argument("--max-mib", type=float, default=512.0, help="largest acceptable peak memory")
    args = parser.parse_args(argv)
    failures = 0
    with tempfile.TemporaryDirectory(prefix="crafted-imports-") as work:
        for number, (name, make) in enumerate(CASES.items()):
            folder = Path(work) / f"case{number}"
            folder.mkdir()
            make(folder)
            store = Path(work) / f"case{number}.db"
            status, seconds, peak, message = _run(store, folder, args.timeout)
            bad = status is None or seconds > args.max_seconds or not peak <= args.max_mib
            if name.startswith("symlink out") and store.exists():
                with Store(store, create=False) as opened:
                    pages = opened.present_pages()[1]
                    _, bodies, headings = opened.page_texts_by_row()
                texts = " ".join(bodies + headings)
                bad |= "root:" in texts or "out" in pages
                message += f" | pages stored: {', '.join(sorted(pages))}"
            failures += bad
            verdict = "FAIL" if bad else "ok"
            print(f"{verdict:4} {name:28} exit {status}, {seconds:6.2f} s, peak {peak:6.1f} MiB  {message}")
    print(f"{len(CASES) - failures} of {len(CASES)} cases within bounds")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
