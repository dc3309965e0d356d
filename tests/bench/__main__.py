"""Run every benchmark module of tests/bench in turn: `python -m tests.bench [NAME ...]`."""

from __future__ import annotations

import importlib
import pkgutil
import sys
import time
from pathlib import Path


def main(argv: list[str]) -> int:
    here = Path(__file__).parent
    names = sorted(info.name for info in pkgutil.iter_modules([str(here)]) if info.name.startswith("bench_"))
    chosen = [name for name in names if not argv or any(word in name for word in argv)]
    failed = 0
    for name in chosen:
        print(f"\n=== {name} ===", flush=True)
        started = time.perf_counter()
        module = importlib.import_module(f"tests.bench.{name}")
        try:
            module.main([])
        except Exception as error:  # keep going: one broken benchmark should not hide the others
            failed += 1
            print(f"{name} failed: {type(error).__name__}: {error}", flush=True)
        print(f"=== {name}: {time.perf_counter() - started:.1f} s ===", flush=True)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
