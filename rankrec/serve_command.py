"""The ``rankrec serve`` and ``rankrec token`` commands.

``rankrec`` never imports the ``api`` package: ``serve`` puts its settings in ``RANKREC_SERVE_*``
environment variables and hands uvicorn the dotted name of the app factory, so the service is
loaded only in the server process.

``--workdir DIR`` is the demo layout (``rankrec demo --workdir DIR``): ``DIR/wiki.db``,
``DIR/index`` and ``DIR/tokens.json``. When the index is missing there, the demo wiki is imported
and indexed first; when the tokens file is missing, one is made with an admin token, printed once.
"""

from __future__ import annotations

import argparse
import copy
import os
import sys
from pathlib import Path

from .errors import UsageError

FACTORY = "api.app:app_from_environment"
DEMO_TOKEN_NAME = "demo-admin"


def register(commands) -> None:
    """Add the ``serve`` and ``token`` sub-commands to an ``argparse`` sub-parsers object."""
    serve = commands.add_parser(
        "serve",
        help="serve related pages, personal lists and landing orderings over HTTP",
        description=(
            "Serve the published index over HTTP (JSON under /v1, a preview page at /preview). "
            "A newly published index is picked up while serving. Either --workdir (the demo layout) "
            "or --index and --tokens."
        ),
    )
    serve.add_argument("--index", metavar="DIR", help="the index folder (written by `rankrec build`)")
    serve.add_argument("--wiki", metavar="WIKI.db", help="the wiki store (default: the index's own)")
    serve.add_argument("--tokens", metavar="FILE", help="the tokens file (`rankrec token add`)")
    serve.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    serve.add_argument("--port", type=int, default=8000, help="port to listen on (default 8000)")
    serve.add_argument(
        "--workdir", metavar="DIR", help="demo layout: DIR/wiki.db, DIR/index, DIR/tokens.json"
    )
    serve.add_argument(
        "--pseudonym-key",
        metavar="FILE",
        help="store and look up users by keyed pseudonyms (made if missing)",
    )
    serve.add_argument(
        "--retention-days", type=int, metavar="N", help="delete views older than N days (daily)"
    )
    serve.add_argument(
        "--watch-seconds",
        type=float,
        default=2.0,
        metavar="S",
        help="look for a newly published index every S seconds (0: only on POST /v1/index/reload)",
    )
    serve.add_argument("--max-k", type=int, default=100, metavar="K", help="longest list served (100)")
    serve.add_argument(
        "--rate-per-second",
        type=float,
        metavar="R",
        help="list and search requests per second and token, refilled into a bucket (1000; 0: no limit)",
    )
    serve.add_argument("--rate-burst", type=int, metavar="N", help="the bucket's size (2000)")
    serve.add_argument(
        "--max-concurrent-per-token",
        type=int,
        metavar="N",
        help="list and search requests of one token running at once (8; 32 in all)",
    )
    # uvicorn shuts down gracefully on SIGTERM and then lets the signal end the process, which service
    # managers count as a clean stop: the command keeps Python's own SIGTERM handling (see rankrec.cli)
    serve.set_defaults(run=_cmd_serve, own_signals=True)

    token = commands.add_parser("token", help="manage the service's bearer tokens")
    actions = token.add_subparsers(dest="action", required=True, metavar="ACTION")
    add = actions.add_parser(
        "add",
        help="make a token, print it once and store only its hash",
        description="The token is printed once; the file keeps only its SHA-256 hash (mode 0600).",
    )
    add.add_argument("name", metavar="NAME", help="who the token is for (letters, digits, . _ -)")
    add.add_argument("--role", required=True, choices=("reader", "admin"), help="what the token may do")
    add.add_argument("--tokens", required=True, metavar="FILE", help="the tokens file (created if missing)")
    add.add_argument(
        "--viewer-key",
        action="store_true",
        help="also make a viewer key (printed once, on a second line): only its holder can name the "
        "viewer of a list, in signed X-Rankrec-Viewer assertions",
    )
    add.set_defaults(run=_cmd_token_add)
    sign = actions.add_parser(
        "assert",
        help="print a signed viewer assertion (the X-Rankrec-Viewer header) for trying the service",
        description="Print USER.EXPIRY.MAC, the value of the X-Rankrec-Viewer header that names USER as "
        "the viewer of the token NAME's requests, signed with that token's viewer key. A front end makes "
        "these itself with rankrec.tokens.viewer_assertion; this command is for trying the service.",
    )
    sign.add_argument("name", metavar="NAME", help="the token the assertion travels with")
    sign.add_argument("user", metavar="USER", help="the viewer (user id)")
    sign.add_argument("--tokens", required=True, metavar="FILE", help="the tokens file")
    sign.add_argument(
        "--ttl",
        type=float,
        default=60.0,
        metavar="S",
        help="seconds the assertion is valid (60; the "
        "service accepts at most its viewer_max_ttl, 300 by default)",
    )
    sign.set_defaults(run=_cmd_token_assert)
    revoke = actions.add_parser(
        "revoke",
        help="remove a token: a running service refuses it within seconds",
        description="Remove the token of NAME from the file; a running service re-reads the file "
        "and refuses the token within a few seconds, without a restart.",
    )
    revoke.add_argument("name", metavar="NAME", help="whose token to remove")
    revoke.add_argument("--tokens", required=True, metavar="FILE", help="the tokens file")
    revoke.set_defaults(run=_cmd_token_revoke)


def _cmd_token_add(args: argparse.Namespace) -> int:
    from .tokens import add_token

    try:
        token = add_token(Path(args.tokens), args.name, args.role)
    except ValueError as error:  # a bad or taken name
        raise UsageError(str(error)) from None
    print(token)
    if not args.viewer_key:
        print(f"(shown once; {args.tokens} keeps only its hash)", file=sys.stderr)
        return 0
    from .tokens import add_viewer_key

    print(add_viewer_key(Path(args.tokens), args.name))
    print(
        f"(shown once: the token, then its viewer key; {args.tokens} keeps the token's hash and the key, "
        "which the service needs to check assertions)",
        file=sys.stderr,
    )
    return 0


def _cmd_token_assert(args: argparse.Namespace) -> int:
    from .tokens import viewer_assertion, viewer_key_of

    try:
        key = viewer_key_of(Path(args.tokens), args.name)
        print(viewer_assertion(key, args.name, args.user, args.ttl))
    except (ValueError, TypeError) as error:  # no such token, no key, a bad user id or ttl
        raise UsageError(str(error)) from None
    return 0


def _cmd_token_revoke(args: argparse.Namespace) -> int:
    from .tokens import revoke_token

    try:
        entry = revoke_token(Path(args.tokens), args.name)
    except ValueError as error:  # no token of that name
        raise UsageError(str(error)) from None
    print(f"revoked the {entry.role} token of {entry.name} (a running service refuses it within seconds)")
    return 0


def _demo_layout(workdir: Path) -> tuple[Path, Path, Path]:
    """The demo's store, index and tokens; imports and indexes the demo wiki when its index is missing."""
    wiki, index, tokens = workdir / "wiki.db", workdir / "index", workdir / "tokens.json"
    if not (index / "manifest.json").is_file():
        from .build import build_index
        from .demo import import_demo
        from .store import Store

        print(f"no index in {workdir}: importing and indexing the demo wiki first", file=sys.stderr)
        wiki = import_demo(workdir)
        with Store(wiki, create=False) as store:
            build_index(store, index)
    if not tokens.exists():
        from .tokens import add_token

        token = add_token(tokens, DEMO_TOKEN_NAME, "admin")
        print(f"made {tokens} with an admin token (shown once):\n{token}")
    return wiki, index, tokens


def serve_settings(args: argparse.Namespace) -> dict[str, str]:
    """The ``RANKREC_SERVE_*`` variables for these arguments (UsageError for a bad combination)."""
    if args.workdir is not None:
        wiki, index, tokens = _demo_layout(Path(args.workdir))
        wiki = Path(args.wiki) if args.wiki else wiki
        index = Path(args.index) if args.index else index
        tokens = Path(args.tokens) if args.tokens else tokens
    elif args.index is None or args.tokens is None:
        raise UsageError("give --index and --tokens, or --workdir")
    else:
        wiki, index, tokens = (args.wiki and Path(args.wiki)), Path(args.index), Path(args.tokens)
    if not tokens.is_file():
        raise UsageError(
            f"no tokens file {str(tokens)!r}; make one with `rankrec token add NAME --role admin`"
        )
    key = None
    if args.pseudonym_key is not None:
        key = Path(args.pseudonym_key)
        if not key.exists():
            from .privacy import new_key

            new_key(key)
            print(f"made a new pseudonym key in {key}; keep it apart from the store", file=sys.stderr)
    if args.retention_days is not None and args.retention_days < 1:
        raise UsageError(f"--retention-days must be at least 1; got {args.retention_days!r}")
    if args.watch_seconds < 0:
        raise UsageError(f"--watch-seconds must not be negative; got {args.watch_seconds!r}")
    values = {
        "index": _absolute(index),  # the link itself, not its target: swaps must stay visible
        "wiki": _absolute(wiki),
        "tokens": _absolute(tokens),
        "pseudonym_key": _absolute(key),
        "retention_days": args.retention_days,
        "watch_seconds": args.watch_seconds,
        "max_k": args.max_k,
    }
    for name in ("rate_per_second", "rate_burst", "max_concurrent_per_token"):
        if getattr(args, name, None) is not None:  # else the setting's default (or the environment's)
            values[name] = getattr(args, name)
    return {
        f"RANKREC_SERVE_{name.upper()}": "" if value is None else str(value) for name, value in values.items()
    }


def _absolute(path: Path | None) -> Path | None:
    return None if path is None else Path(os.path.abspath(path))


def _cmd_serve(args: argparse.Namespace) -> int:
    import uvicorn

    environment = serve_settings(args)
    os.environ.update(environment)
    print(f"serving on http://{args.host}:{args.port}/ (preview: /preview, API: /docs)", file=sys.stderr)
    uvicorn.run(FACTORY, **uvicorn_options(args.host, args.port))
    return 0


def uvicorn_options(host: str, port: int) -> dict:
    """What ``rankrec serve`` hands ``uvicorn.run`` besides the factory's name.

    uvicorn's access log is off: it writes the raw request line, whose path and query hold page and
    user ids (who read what), outside pseudonymisation, retention and erasure. The service logs each
    request itself by route template (logger ``rankrec.api.access``); its ``rankrec.api`` loggers
    are given uvicorn's console handler.
    """
    from uvicorn.config import LOGGING_CONFIG

    config = copy.deepcopy(LOGGING_CONFIG)
    config["loggers"]["rankrec.api"] = {"handlers": ["default"], "level": "INFO", "propagate": False}
    return {
        "factory": True,
        "host": host,
        "port": port,
        "log_level": "info",
        "access_log": False,
        "log_config": config,
    }
