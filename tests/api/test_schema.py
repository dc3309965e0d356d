"""Schemathesis against the service's own OpenAPI schema: no 5xx, no answer that breaks the schema.

Runs on a demo store of its own (the generated cases include views POSTs and erasures).
Bounded: at most 30 generated cases per operation (valid and invalid ones, the schema's two generation
modes), with a reader token and, for admin-only operations, an admin token.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from schemathesis import GenerationMode
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
# every documented operation, one test each: explicit ids, so that pytest-xdist (make test runs two
# workers) sees distinct tests; schema.parametrize() gives every operation the same node id, and xdist
# keeps one test per node id
OPERATIONS = sorted(
    f"{method.upper()} {path}" for path, item in APP.openapi()["paths"].items() for method in item
)
MODES = (GenerationMode.POSITIVE, GenerationMode.NEGATIVE)  # the schema's configured modes (checked below)


@pytest.fixture(scope="module", autouse=True)
def _cleanup():
    yield
    APP.state.service.close()
    shutil.rmtree(FOLDER, ignore_errors=True)


@pytest.mark.parametrize("label", OPERATIONS)
def test_no_server_error_and_no_schema_violation(label):
    method, path = label.split(" ", 1)
    operation = schema[path][method]
    token = TOKENS["admin" if label in ADMIN_ONLY else "reader"]
    ran = []

    @given(case=st.one_of(*(operation.as_strategy(generation_mode=mode) for mode in MODES)))
    @settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=list(HealthCheck))
    def run(case):
        ran.append(case)
        case.call_and_validate(
            headers={**(case.headers or {}), "Authorization": f"Bearer {token}"}, checks=CHECKS
        )

    run()
    # an operation without parameters has one distinct request, which hypothesis asks once
    wanted = 3 if any(True for _ in operation.iter_parameters()) else 1
    assert len(ran) >= wanted, f"only {len(ran)} cases were generated for {label}"


def test_every_documented_operation_is_tested_in_the_schema_s_own_modes():
    operations = {result.ok().label for result in schema.get_all_operations()}
    assert operations == set(OPERATIONS) and len(OPERATIONS) >= 10
    assert set(schema.config.generation.modes) == set(MODES)
