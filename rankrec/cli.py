"""The `rankrec` command: parses arguments, calls the library, formats what it returns.

Each command lives in a module beside the code it runs, with ``register(commands)``; this module
builds the parser from them and maps errors to exit statuses, in one place.

Exit status: 0 success, 2 bad input or usage (a one-line message, no traceback), 130 when
interrupted (Ctrl-C) and 143 when terminated (SIGTERM): either way nothing is half-written (imports roll
back, staging files are removed, worker processes are stopped). `rankrec serve` leaves SIGTERM to uvicorn,
which shuts down gracefully and then ends by the signal, as service managers expect. Set RANKREC_DEBUG=1
to see tracebacks of unexpected errors.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
import threading
from collections.abc import Sequence
from importlib import import_module

from . import __version__
from .errors import RankrecError

EXIT_INPUT = 2

# In the order `rankrec --help` lists them; each module has ``register(commands)``.
_COMMAND_MODULES = (
    "rankrec.import_command",  # import, stats
    "rankrec.rank_command",  # rank
    "rankrec.lists_command",  # build, related, recommend, landing
    "rankrec.export_command",  # export
    "rankrec.synth_command",  # synth
    "rankrec.demo",  # demo
    "rankrec.evaluate.command",  # evaluate
    "rankrec.serve_command",  # serve, token
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="rankrec",
        description="Recommend pages of an internal wiki with personalised PageRank.",
        epilog="Run `rankrec COMMAND --help` for each command's options.",
    )
    parser.add_argument("--version", action="version", version=f"rankrec {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for name in _COMMAND_MODULES:
        import_module(name).register(commands)
    return parser


class _Terminated(KeyboardInterrupt):
    """SIGTERM, raised wherever the command is, so that it unwinds as after Ctrl-C."""


def _terminated(signum, frame) -> None:
    raise _Terminated


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    catch = threading.current_thread() is threading.main_thread() and not getattr(args, "own_signals", False)
    previous = signal.signal(signal.SIGTERM, _terminated) if catch else None
    try:
        return args.run(args)
    except RankrecError as error:
        print(f"rankrec {args.command}: {error}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt as stop:
        print(f"rankrec {args.command}: interrupted; nothing was written", file=sys.stderr)
        return 143 if isinstance(stop, _Terminated) else 130
    except BrokenPipeError:
        return 0
    except Exception as error:  # the last guard: a message, not a traceback
        if os.environ.get("RANKREC_DEBUG"):
            raise
        print(
            f"rankrec {args.command}: unexpected error: {type(error).__name__}: {error} "
            "(set RANKREC_DEBUG=1 for a traceback)",
            file=sys.stderr,
        )
        return 1
    finally:
        if previous is not None:  # None: not set from Python, or not in the main thread
            signal.signal(signal.SIGTERM, previous)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
