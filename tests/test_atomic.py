"""Publishing a folder: owner-only permissions, and staging folders of dead builds removed at the next
publish while a live build's folder is left alone."""

from __future__ import annotations

import os
import stat
import subprocess
import sys
from pathlib import Path

import pytest

from rankrec._atomic import publish_folder
from rankrec.build import build_index
from rankrec.store import Store
from tests.test_index import make_wiki


@pytest.fixture
def open_umask():
    """The common default umask 022 (files 0644, folders 0755) while the test runs."""
    previous = os.umask(0o022)
    yield
    os.umask(previous)


def _modes(folder: Path) -> dict[str, int]:
    return {
        str(path.relative_to(folder)): stat.S_IMODE(path.lstat().st_mode)
        for path in [folder, *folder.rglob("*")]
        if not path.is_symlink()
    }


def _write_some(staging: Path) -> None:
    (staging / "manifest.json").write_text("{}\n")
    (staging / "nested").mkdir()
    (staging / "nested" / "table.bin").write_bytes(b"\0" * 64)


def test_a_published_folder_and_its_files_are_owner_only(tmp_path, open_umask):
    # issue finding: the index was 0755 with 0644 files, though it holds restricted titles and lists
    # drawn from reading history (POSIX permission bits, as stat(2) reports them: 0700 = rwx------)
    folder = publish_folder(tmp_path / "out", _write_some)
    modes = _modes(folder)
    assert modes == {".": 0o700, "manifest.json": 0o600, "nested": 0o700, "nested/table.bin": 0o600}


def test_a_built_index_is_owner_only(tmp_path, open_umask):
    wiki = make_wiki(tmp_path / "wiki.db", pages=30, seed=6)
    with Store(wiki) as store:
        folder = build_index(store, tmp_path / "index", hubs=2)
    modes = _modes(folder)
    assert len(modes) > 20 and modes["."] == 0o700
    assert {mode for name, mode in modes.items() if (folder / name).is_file()} == {0o600}
    assert {mode for name, mode in modes.items() if (folder / name).is_dir()} == {0o700}


# a build that dies while writing (SIGKILL: no clean-up code runs), or one that keeps writing until
# told to stop; both print their staging folder first
_WRITER = """
import os, sys, time
from pathlib import Path
from rankrec._atomic import publish_folder
def write(staging):
    (staging / "part.npy").write_bytes(b"half")
    print(staging, flush=True)
    if sys.argv[2] == "die":
        os.kill(os.getpid(), 9)
    while not Path(sys.argv[3]).exists():
        time.sleep(0.02)
publish_folder(Path(sys.argv[1]), write)
"""


def _writer(target: Path, how: str, stop: Path | None = None) -> tuple[subprocess.Popen, Path]:
    process = subprocess.Popen(
        [sys.executable, "-c", _WRITER, str(target), how, str(stop)], stdout=subprocess.PIPE, text=True
    )
    staging = Path(process.stdout.readline().strip())
    process.stdout.close()  # it prints nothing more
    assert staging.parent == target.parent and staging.name.startswith(f".{target.name}.")
    return process, staging


def test_a_killed_builds_staging_folder_goes_at_the_next_publish(tmp_path):
    # issue finding: a killed build's staging folder stayed for an hour (its age was the only test)
    target = tmp_path / "index"
    publish_folder(target, _write_some)
    process, staging = _writer(target, "die")
    assert process.wait(timeout=30) == -9 and staging.is_dir()
    published = publish_folder(target, _write_some)
    assert not staging.exists()
    assert sorted(path.name for path in tmp_path.iterdir()) == sorted([published.name, "index"])


def test_a_live_builds_staging_folder_is_left_alone(tmp_path):
    # two builds publishing to one target: the last swap wins, neither deletes the other's folder
    target, stop = tmp_path / "index", tmp_path / "stop"
    process, staging = _writer(target, "wait", stop)
    try:
        first = publish_folder(target, _write_some)  # while the other build is writing
        assert staging.is_dir() and (staging / "part.npy").read_bytes() == b"half"
        stop.touch()
        assert process.wait(timeout=30) == 0
    finally:
        stop.touch()
        process.wait(timeout=30)
    assert target.resolve() == staging.resolve()  # the other build's swap came last
    assert not first.exists()  # the folder it replaced went
    published = publish_folder(target, _write_some)
    assert sorted(path.name for path in tmp_path.iterdir()) == sorted([published.name, "index", "stop"])


def test_a_failed_write_leaves_nothing_behind(tmp_path):
    target = tmp_path / "index"
    publish_folder(target, _write_some)
    before = sorted(path.name for path in tmp_path.iterdir())

    def broken(staging: Path) -> None:
        (staging / "part.npy").write_bytes(b"x")
        raise OSError("disk full (simulated)")

    with pytest.raises(OSError, match="simulated"):
        publish_folder(target, broken)
    assert sorted(path.name for path in tmp_path.iterdir()) == before
