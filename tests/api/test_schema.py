"""Schemathesis against the service's own OpenAPI schema: no 5xx, no answer that breaks the schema.

Runs on a demo store of its own (the generated cases include views POSTs and erasures).
Bounded: at most 30 generated cases per operation, with a reader token and, for admin-only
operations, an admin token.
"""

from __future__ import annotations

import shutil
import tempfile
from collections import Counter
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from api.app import create_app
from api.settings import ServiceSettings
from rankrec.build import build_index
from rankrec.demo import import_demo
from rankrec.store import Store
from rankrec.tokens import add_token

CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
]
ADMIN_ONLY = {"POST /v1/index/reload", "DELETE /v1/users/{user}/views", "POST /v1/admin/retention"}
CASES: Counter = Counter()


def _service():
    """The demo wiki indexed in a folder of this module's own (schemathesis loads the schema at import)."""
    folder = Path(tempfile.mkdtemp(prefix="rankrec-schema-"))
    wiki = import_demo(folder)
    with Store(wiki, create=False) as store:
        build_index(store, folder / "index")
    tokens = {role: add_token(folder / "tokens.json", f"schema-{role}", role) for role in ("reader", "admin")}
    settings = ServiceSettings(index=folder / "index", tokens=folder / "tokens.json", watch_seconds=0)
    return folder, create_app(settings), tokens


FOLDER, APP, TOKENS = _service()
schema = schemathesis.openapi.from_asgi("/openapi.json", APP)


@pytest.fixture(scope="module", autouse=True)
def _cleanup():
    yield
    APP.state.service.close()
    shutil.rmtree(FOLDER, ignore_errors=True)


@schema.parametrize()
@settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=list(HealthCheck))
def test_no_server_error_and_no_schema_violation(case):
    label = f"{case.method.upper()} {case.path}"
    CASES[label] += 1
    token = TOKENS["admin" if label in ADMIN_ONLY else "reader"]
    case.call_and_validate(
        headers={**(case.headers or {}), "Authorization": f"Bearer {token}"}, checks=CHECKS
    )


def test_cases_ran():
    """Reports the number of generated cases (run with -s to see them); fails if too few ran."""
    documented = {
        f"{method.upper()} {path}" for path, item in APP.openapi()["paths"].items() for method in item
    }
    ran = {label: count for label, count in CASES.items() if label in documented}
    others = sum(count for label, count in CASES.items() if label not in documented)
    print(
        f"\nschemathesis: {sum(ran.values())} cases over {len(ran)} documented operations "
        f"{dict(sorted(ran.items()))} and {others} with undocumented methods"
    )
    assert set(ran) == documented and all(count >= 3 for count in ran.values())
