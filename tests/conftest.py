"""Shared test helpers. Outside data under ../shared/data is optional: tests skip without it."""

from __future__ import annotations

import io
from pathlib import Path

import pytest

PROJECT = Path(__file__).resolve().parent.parent
SHARED_DATA = PROJECT.parent / "shared" / "data"


def require_shared(*parts: str) -> Path:
    """Path of a file or folder under ../shared/data, or skip the test saying what is missing."""
    path = SHARED_DATA.joinpath(*parts)
    if not path.exists():
        pytest.skip(f"outside data not available: {path.relative_to(PROJECT.parent)} is absent")
    return path


@pytest.fixture
def shared_data():
    """The ``require_shared`` function, as a fixture."""
    return require_shared


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory) -> tuple[Path, str]:
    """One run of `rankrec demo` (its work folder and what it printed), shared by the tests that read it:
    a run imports, evaluates, builds and exports the demo wiki, about a minute."""
    from rankrec.demo import run_demo

    folder = tmp_path_factory.mktemp("demo")
    out = io.StringIO()
    run_demo(folder, out=out)
    return folder, out.getvalue()


def write_files(folder: Path, files: dict[str, str | bytes]) -> Path:
    """Write ``files`` (relative name -> text, UTF-8, or bytes) below ``folder``; return ``folder``."""
    for name, content in files.items():
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
    return folder
