"""Reading files for the readers: only regular files, size caps counted while reading, gzip bombs."""

from __future__ import annotations

import contextlib
import gzip
import io
import os
import socket
import threading
import tracemalloc
import zlib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rankrec.errors import InputError
from rankrec.sources import _text
from rankrec.sources._text import iter_lines, read_page_bytes, read_text
from rankrec.sources.records import LINE_BYTES, PAGE_FILE_BYTES

posix_only = pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="FIFOs and /dev/zero are POSIX")


def gzip_bomb(path: Path, decompressed: int, byte: bytes = b"\0") -> Path:
    """A gzip file of ``decompressed`` equal bytes: about 1/1000 of that on disk (the DEFLATE limit)."""
    compressor = zlib.compressobj(9, zlib.DEFLATED, 31)  # wbits 31: a gzip header and trailer
    chunk = byte * (1 << 20)
    with open(path, "wb") as out:
        for _ in range(decompressed >> 20):
            out.write(compressor.compress(chunk))
        out.write(compressor.flush())
    return path


def peak_bytes(function) -> int:
    tracemalloc.start()
    try:
        function()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def finishes(function, seconds: float = 10.0, unblock=None):
    """Run ``function`` in a thread; assert it ends within ``seconds`` (then ``unblock()`` frees it)."""
    outcome: list = []
    thread = threading.Thread(target=lambda: outcome.append(_call(function)), daemon=True)
    thread.start()
    thread.join(seconds)
    if thread.is_alive() and unblock is not None:
        unblock()
        thread.join(seconds)
    assert outcome, f"still blocked after {seconds} s"
    return outcome[0]


def _call(function):
    try:
        return function()
    except InputError as error:
        return error


def release_fifo(path: Path) -> None:
    """Open a FIFO for writing and close it: a reader blocked in open() then sees end of file."""
    with contextlib.suppress(OSError):  # no reader waiting: nothing to free
        os.close(os.open(path, os.O_WRONLY | os.O_NONBLOCK))


# ------------------------------------------------------------------- regular files only
# POSIX (IEEE Std 1003.1, <sys/stat.h>) file types: regular, directory, FIFO, character and
# block special, socket, symbolic link. Opening a FIFO for reading blocks until a writer opens
# it (POSIX open(), O_NONBLOCK); reading /dev/zero never ends.


@posix_only
def test_a_fifo_is_refused_without_waiting_for_a_writer(tmp_path):
    fifo = tmp_path / "p.md"
    os.mkfifo(fifo)
    error = finishes(lambda: read_text(fifo), unblock=lambda: release_fifo(fifo))
    assert isinstance(error, InputError)
    assert error.file == str(fifo) and error.line is None
    assert "not a regular file but a FIFO" in error.reason and error.reason.endswith("file skipped")


@posix_only
def test_iter_lines_refuses_a_fifo_with_one_error(tmp_path):
    fifo = tmp_path / "edges.tsv"
    os.mkfifo(fifo)
    items = finishes(lambda: list(iter_lines(fifo)), unblock=lambda: release_fifo(fifo))
    assert len(items) == 1 and isinstance(items[0], InputError)
    assert "FIFO" in items[0].reason


@posix_only
@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_a_device_is_refused_before_reading(tmp_path):
    # A symbolic link to /dev/zero read directly (the folder walk refuses it earlier, as a link
    # leaving the folder): the file it names is a character device, never read.
    link = tmp_path / "zero.md"
    link.symlink_to("/dev/zero")
    used = peak_bytes(lambda: pytest.raises(InputError, read_text, link))
    with pytest.raises(InputError, match="not a regular file but a character device"):
        read_text(link)
    items = list(iter_lines(link))
    assert len(items) == 1 and "character device" in items[0].reason
    assert used < 1 << 20


def test_a_folder_and_a_socket_are_refused(tmp_path):
    with pytest.raises(InputError, match="not a regular file but a folder"):
        read_page_bytes(tmp_path)
    if not hasattr(socket, "AF_UNIX"):
        return
    path = tmp_path / "s.md"
    with socket.socket(socket.AF_UNIX) as server:
        try:
            server.bind(str(path))
        except OSError:  # a path too long for a socket address
            pytest.skip("cannot bind a Unix socket under tmp_path")
        with pytest.raises(InputError, match="not a regular file but a socket"):
            read_text(path)


def test_a_missing_file_says_so(tmp_path):
    with pytest.raises(InputError, match="cannot read: No such file"):
        read_text(tmp_path / "absent.md")
    assert "cannot open" in next(iter_lines(tmp_path / "absent.tsv")).reason


# ----------------------------------------------------------------------------- size caps
# The cap is counted on the bytes read, not taken from st_size: /proc files report size 0
# (proc(5)), and a gzip file's size on disk says nothing of what it decompresses to.


def test_the_page_cap_is_exact(tmp_path):
    exact = tmp_path / "exact.md"
    exact.write_bytes(b"a" * 1000)
    over = tmp_path / "over.md"
    over.write_bytes(b"a" * 1001)
    assert read_page_bytes(exact, limit=1000) == b"a" * 1000
    with pytest.raises(InputError, match="more than 1,000 bytes") as caught:
        read_page_bytes(over, limit=1000)
    assert caught.value.file == str(over) and caught.value.reason.endswith("file skipped")


def test_the_default_cap_is_8_mib_and_read_text_applies_it(tmp_path):
    assert PAGE_FILE_BYTES == 8 << 20  # the documented cap (rankrec.sources.records)
    big = tmp_path / "big.md"
    with open(big, "wb") as out:
        out.truncate(PAGE_FILE_BYTES + 1)  # a sparse file: cheap on disk
    with pytest.raises(InputError, match="more than 8 MiB"):
        read_text(big)


def test_the_cap_does_not_trust_the_size_the_file_system_reports(monkeypatch, tmp_path):
    # As a /proc file would: st_size says 0, the file holds more.
    page = tmp_path / "proc-like.md"
    page.write_bytes(b"b" * 5000)
    real_fstat = os.fstat

    def zero_size(descriptor):
        result = real_fstat(descriptor)
        return os.stat_result((*result[:6], 0, *result[7:10]))

    monkeypatch.setattr(_text.os, "fstat", zero_size)
    with pytest.raises(InputError, match="more than 4,096 bytes"):
        read_page_bytes(page, limit=4096)


def test_a_gzip_bomb_is_capped_by_its_decompressed_size(tmp_path):
    # A "zip bomb" (OWASP: uncontrolled resource consumption, CWE-409): 64 MiB of zeros in about
    # 64 KiB of gzip (DEFLATE's best ratio is about 1032:1, from memory). With a 1 MiB cap,
    # reading stops after 1 MiB + 1 byte: memory stays near the cap, not the decompressed size.
    bomb = gzip_bomb(tmp_path / "bomb.md", 64 << 20)
    assert bomb.stat().st_size < 1 << 20
    used = peak_bytes(lambda: pytest.raises(InputError, read_page_bytes, bomb, limit=1 << 20))
    with pytest.raises(InputError, match=r"more than 1 MiB \(decompressed, if gzip\)"):
        read_page_bytes(bomb, limit=1 << 20)
    assert used < 4 << 20


def test_a_small_gzip_page_is_still_read(tmp_path):
    page = tmp_path / "a.md.gz"
    page.write_bytes(gzip.compress("# Título\n".encode()))
    assert read_text(page) == "# Título\n"


def test_a_damaged_gzip_page_is_an_input_error(tmp_path):
    page = tmp_path / "a.md"
    page.write_bytes(gzip.compress(b"# A page\n" * 100)[:-6])  # the trailer cut short
    with pytest.raises(InputError, match="compressed stream is damaged or truncated"):
        read_text(page)


def test_a_line_longer_than_the_line_cap_ends_the_file(monkeypatch, tmp_path):
    assert LINE_BYTES == PAGE_FILE_BYTES  # a page export's line holds one page
    monkeypatch.setattr(_text, "LINE_BYTES", 100)
    path = tmp_path / "edges.tsv"
    path.write_bytes(b"a\tb\n" + b"x" * 100 + b"\n" + b"y" * 101 + b"\nc\td\n")
    items = list(iter_lines(path))
    assert items[:2] == [(1, "a\tb"), (2, "x" * 100)]  # 100 bytes and its newline: within the cap
    assert isinstance(items[2], InputError) and items[2].line == 3
    assert "longer than 100 bytes" in items[2].reason and len(items) == 3


def test_a_gzip_bomb_of_one_endless_line_stays_within_the_line_cap(monkeypatch, tmp_path):
    # The same bomb as a line-oriented file: no newline in 64 MiB. Without a line cap, reading
    # one line would hold all of it.
    monkeypatch.setattr(_text, "LINE_BYTES", 1 << 20)
    bomb = gzip_bomb(tmp_path / "views.csv.gz", 64 << 20, b"z")
    items: list = []
    used = peak_bytes(lambda: items.extend(iter_lines(bomb)))
    assert len(items) == 1 and "longer than 1 MiB" in items[0].reason
    assert used < 6 << 20


def test_utf16_lines_are_capped_too(monkeypatch, tmp_path):
    monkeypatch.setattr(_text, "LINE_BYTES", 10)
    path = tmp_path / "views.csv"
    path.write_bytes("\ufeffshort\n".encode("utf-16-le") + ("w" * 50 + "\n").encode("utf-16-le"))
    items = list(iter_lines(path))
    assert items[0] == (1, "short") and isinstance(items[1], InputError) and items[1].line == 2


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    content=st.lists(st.sampled_from([b"a", b"bc", b"\n", b"\r\n", b"\r", "é".encode()]), max_size=60).map(
        b"".join
    ),
    chunk=st.integers(1, 7),
)
def test_lines_split_across_chunks_come_out_whole(monkeypatch, tmp_path, content, chunk):
    # Reference: Python's own line iteration over a binary file (io.BufferedReader: lines end at
    # b"\n"), line endings then dropped as iter_lines documents. Tiny chunks put every line
    # ending, and every two-byte character, across a chunk boundary somewhere.
    monkeypatch.setattr(_text, "_CHUNK_BYTES", chunk)
    path = tmp_path / "lines.txt"
    path.write_bytes(b"x" + content)  # never empty (an empty file is an error of its own)
    expected = [line.decode().rstrip("\r\n") for line in io.BytesIO(b"x" + content)]
    assert [item[1] for item in iter_lines(path)] == expected
