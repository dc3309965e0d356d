"""Reading text files for the readers: regular files only, size caps, gzip, byte-order marks, encodings.

Every function here turns what can go wrong with a file (missing, empty, not a regular file,
too large, not in the expected encoding, a truncated gzip stream) into an :class:`InputError`
that names the file and line, so no reader needs its own try/except around I/O.

Only regular files are read (POSIX file types: a FIFO, a device, a socket or a folder is
refused before anything is read from it, and a FIFO is never waited on). A page file is read
up to :data:`~rankrec.sources.records.PAGE_FILE_BYTES` (decompressed, for gzip) and a line
of a line-oriented file up to :data:`~rankrec.sources.records.LINE_BYTES`, counted while
reading, so memory stays bounded whatever the file holds.
"""

from __future__ import annotations

import codecs
import errno
import gzip
import io
import itertools
import os
import stat
import zlib
from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError
from .records import LINE_BYTES, PAGE_FILE_BYTES, clip_utf8

_BOMS = (
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)
_GZIP_MAGIC = b"\x1f\x8b"
_CHUNK_BYTES = 1 << 16  # read at a time when splitting lines
# Opening a FIFO for reading blocks until a writer comes, unless non-blocking (POSIX open()).
_NONBLOCK = getattr(os, "O_NONBLOCK", 0)  # absent on Windows, which has no FIFOs of this kind
_OPEN_FLAGS = os.O_RDONLY | _NONBLOCK | getattr(os, "O_NOCTTY", 0)
_KINDS = (
    (stat.S_ISDIR, "a folder"),
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)


class FileRefused(OSError):
    """A file that is not read (not a regular file, or over a cap); ``strerror`` says why.

    An OSError, so code that reports OSErrors around a read reports this one too.
    """

    def __init__(self, reason: str, code: int = errno.EINVAL) -> None:
        super().__init__(code, reason)


def check_encoding(encoding: str) -> str:
    """Validate a reader's ``encoding`` argument eagerly (ValueError/TypeError naming it).

    >>> check_encoding("latin-1")
    'latin-1'
    """
    if not isinstance(encoding, str):
        raise TypeError(f"encoding must be a string, got {encoding!r}")
    try:
        codecs.lookup(encoding)
    except LookupError:
        raise ValueError(f"encoding {encoding!r} is not a known text encoding") from None
    return encoding


def file_type_problem(mode: int) -> str | None:
    """Why a file of ``st_mode`` ``mode`` is not read, or None for a regular file.

    >>> file_type_problem(stat.S_IFREG | 0o644) is None, file_type_problem(stat.S_IFIFO | 0o644)
    (True, 'not a regular file but a FIFO (named pipe); only regular files are read')
    """
    if stat.S_ISREG(mode):
        return None
    kind = next((name for test, name in _KINDS if test(mode)), "another kind of file")
    return f"not a regular file but {kind}; only regular files are read"


def size_text(size: int) -> str:
    """A byte count for messages: ``'8 MiB'`` when a whole number of MiB, else ``'1,000 bytes'``."""
    return f"{size >> 20} MiB" if size and size % (1 << 20) == 0 else f"{size:,} bytes"


def open_regular(path: str | Path) -> io.FileIO:
    """Open a regular file for reading (unbuffered); FileRefused for any other kind of file.

    The kind is checked before opening (a device is never opened) and again on what was
    opened (the name may have changed in between); a FIFO opened meanwhile does not block.
    """
    name = os.fspath(path)
    problem = file_type_problem(os.stat(name).st_mode)
    if problem is not None:
        raise FileRefused(problem)
    descriptor = os.open(name, _OPEN_FLAGS)
    try:
        problem = file_type_problem(os.fstat(descriptor).st_mode)
        if problem is not None:
            raise FileRefused(problem)
        if _NONBLOCK:
            os.set_blocking(descriptor, True)
        return io.FileIO(descriptor, "rb", closefd=True)
    except BaseException:
        os.close(descriptor)
        raise


def _open_binary(path: str | Path, limit: int | None = PAGE_FILE_BYTES) -> io.BufferedReader:
    """A regular file's bytes (decompressed if it starts with the gzip magic bytes).

    Reading more than ``limit`` bytes from it (None: no limit) raises FileRefused; at most
    ``limit + 1`` bytes are ever taken from the file or the decompressor.
    """
    raw = open_regular(path)
    try:
        magic = raw.read(2)
        raw.seek(0)
        inner: io.RawIOBase | gzip.GzipFile = gzip.GzipFile(fileobj=raw) if magic == _GZIP_MAGIC else raw
    except BaseException:
        raw.close()
        raise
    return io.BufferedReader(_Bounded(inner, raw, limit))


def read_page_bytes(path: str | Path, limit: int = PAGE_FILE_BYTES) -> bytes:
    """The bytes of a page file (gzip decompressed), or an InputError (raised) naming the file.

    Refused: a missing file, anything but a regular file, more than ``limit`` bytes, a
    damaged gzip stream. Memory stays a small multiple of ``limit`` whatever the file holds.
    """
    name = str(path)
    try:
        with _open_binary(Path(path), limit) as stream:
            return stream.read()
    except FileRefused as error:
        raise InputError(name, None, f"{error.strerror}; file skipped") from None
    except (EOFError, gzip.BadGzipFile, zlib.error) as error:  # BadGzipFile is an OSError: first
        raise InputError(name, None, f"compressed stream is damaged or truncated ({error})") from None
    except OSError as error:
        raise InputError(name, None, f"cannot read: {error.strerror or error}") from None


def _sniff_bom(head: bytes, encoding: str) -> tuple[str, int]:
    """Encoding to use and how many leading bytes to skip, from a byte-order mark if any."""
    for bom, name in _BOMS:
        if head.startswith(bom):
            return name, len(bom)
    return encoding, 0


def _decode_reason(error: UnicodeDecodeError, encoding: str) -> str:
    bad = error.object[error.start : error.start + 1]
    return (
        f"not valid {encoding}: byte 0x{bad.hex()} at column {error.start + 1}; "
        "re-save the file as UTF-8 or give its encoding (--encoding)"
    )


def iter_lines(path: str | Path, encoding: str = "utf-8") -> Iterator[tuple[int, str] | InputError]:
    """Yield ``(line_number, text)`` for each line (without its line ending), or InputErrors.

    A line that does not decode yields an InputError and reading goes on; an empty file, a
    missing file, a file that is not a regular file, a line longer than :data:`LINE_BYTES`
    or a truncated gzip stream yields one InputError and stops. ``.gz`` files (by their
    magic bytes, whatever their name) are read transparently. UTF-16/32 files with a
    byte-order mark are read as such. The lines are made a chunk of the file at a time
    (:func:`line_blocks`) and handed out one by one in C (``itertools.chain``).
    """
    return itertools.chain.from_iterable(line_blocks(path, encoding))


def line_blocks(path: str | Path, encoding: str = "utf-8") -> Iterator[list[tuple[int, str] | InputError]]:
    """What :func:`iter_lines` yields, in lists of the lines of about a chunk of the file each."""
    name = str(path)
    path = Path(path)
    try:
        stream = _open_binary(path, limit=None)
    except FileRefused as error:
        yield [InputError(name, None, f"{error.strerror}; file skipped")]
        return
    except OSError as error:
        yield [InputError(name, None, f"cannot open: {error.strerror or error}")]
        return
    number = 0
    too_long = f"line is longer than {size_text(LINE_BYTES)}; the rest of the file is not read"
    try:
        with stream:
            head = stream.read(4)
            encoding, skip = _sniff_bom(head, encoding)
            rest = io.BufferedReader(_Prefixed(head[skip:], stream))  # type: ignore[arg-type]
            if encoding.startswith(("utf-16", "utf-32")):
                text = io.TextIOWrapper(rest, encoding=encoding, newline=None)
                while line := text.readline(LINE_BYTES + 1):  # characters: a bound on memory all the same
                    number += 1
                    if len(line) > LINE_BYTES and not line.endswith("\n"):
                        yield [InputError(name, number, too_long)]
                        return
                    yield [(number, line.rstrip("\r\n"))]
            else:
                decoder_name = codecs.lookup(encoding).name
                for block in _split_lines(rest, LINE_BYTES):
                    if block is None:
                        yield [InputError(name, number + 1, too_long)]
                        return
                    lines, whole = _decoded(block, decoder_name)
                    numbers = range(number + 1, number + 1 + len(lines))
                    number += len(lines)
                    if whole:  # every line decoded: no line to check
                        yield list(zip(numbers, lines, strict=True))
                        continue
                    yield [
                        InputError(name, at, _decode_reason(line, encoding))
                        if isinstance(line, UnicodeDecodeError)
                        else (at, line.rstrip("\r\n"))
                        for at, line in zip(numbers, lines, strict=True)
                    ]
    except (EOFError, gzip.BadGzipFile, zlib.error) as error:
        yield [InputError(name, number + 1, f"compressed stream is damaged or truncated ({error})")]
        return
    except UnicodeDecodeError as error:
        yield [InputError(name, number + 1, _decode_reason(error, encoding))]
        return
    except OSError as error:
        yield [InputError(name, number + 1, f"read failed: {error}")]
        return
    if number == 0:
        yield [InputError(name, None, "file is empty")]


def read_text(path: str | Path, encoding: str = "utf-8", limit: int = PAGE_FILE_BYTES) -> str:
    """Text of a page file (at most ``limit`` bytes), raising InputError as :func:`read_page_bytes` does.

    A byte-order mark overrides ``encoding``; line endings become ``\\n``.
    """
    name = str(path)
    data = read_page_bytes(path, limit)
    encoding, skip = _sniff_bom(data[:4], encoding)
    data = data[skip:]
    try:
        text = data.decode(encoding)
    except UnicodeDecodeError as error:
        line = data.count(b"\n", 0, error.start) + 1
        column = error.start - (data.rfind(b"\n", 0, error.start) + 1)
        bad = data[error.start : error.start + 1].hex()
        raise InputError(
            name,
            line,
            f"not valid {encoding}: byte 0x{bad} at column {column + 1}; "
            "re-save the file as UTF-8 or give its encoding (--encoding)",
        ) from None
    return text.replace("\r\n", "\n").replace("\r", "\n")


def _split_lines(stream: io.BufferedIOBase, limit: int) -> Iterator[list[bytes] | None]:
    """The lines of ``stream`` (split at ``\\n``, which is dropped), read in chunks: a list of the lines
    each chunk completes.

    A line of more than ``limit`` bytes gives None and ends the lines: memory stays within
    ``limit`` and one chunk, and splitting runs in C (``bytes.split``), not a call per line.
    """
    held: list[bytes] = []  # the start of a line that continues in the next chunk
    size = 0
    while chunk := stream.read(_CHUNK_BYTES):
        lines = chunk.split(b"\n")
        if len(lines) > 1:
            if held:
                lines[0] = b"".join([*held, lines[0]])
                held, size = [], 0
            complete = lines[:-1]
            if max(map(len, complete)) > limit:
                yield list(itertools.takewhile(lambda line: len(line) <= limit, complete))
                yield None
                return
            yield complete
        if lines[-1]:
            held.append(lines[-1])
            size += len(lines[-1])
            if size > limit:
                yield None
                return
    if held:
        yield [b"".join(held)]


def _decoded(lines: list[bytes], encoding: str) -> tuple[list[str | UnicodeDecodeError], bool]:
    """Each line decoded, or the error of a line that does not, and whether all of them decoded. A block
    that decodes at once (an ASCII-compatible ``encoding``, whose ``\\n`` is the byte 0x0a) is split in
    C, its line endings (``\\r``) already dropped; else each line is decoded alone (ends not dropped)."""
    try:
        text = b"\n".join(lines).decode(encoding)
    except UnicodeDecodeError:
        pass
    else:
        if "\r" in text:
            return [line.rstrip("\r") for line in text.split("\n")], True
        return text.split("\n"), True
    decoded: list[str | UnicodeDecodeError] = []
    for line in lines:
        try:
            decoded.append(line.decode(encoding))
        except UnicodeDecodeError as error:
            decoded.append(error)
    return decoded, False


class CappedText:
    """Pieces of text, each with its whitespace collapsed, joined into at most ``limit`` bytes of UTF-8.

    Pieces past the limit are not kept, so memory stays bounded by the limit and the work
    by the size of the pieces offered (one pass over each). Empty pieces are skipped.

    >>> gathered = CappedText(12)
    >>> for piece in ("  Alpha    beta ", "", "gamma delta"):
    ...     gathered.add(piece)
    >>> gathered.text()
    'Alpha beta g'
    """

    def __init__(self, limit: int, separator: str = " ") -> None:
        self._limit = limit
        self._separator = separator
        self._parts: list[str] = []
        self._size = 0  # characters kept, separators included (never more than the bytes they take)

    @property
    def full(self) -> bool:
        """True once more than ``limit`` characters are held: later pieces would be cut anyway."""
        return self._size > self._limit

    def add(self, piece: str) -> None:
        if self._size > self._limit:
            return
        collapsed = " ".join(piece.split())
        if collapsed:
            self._parts.append(collapsed)
            self._size += len(collapsed) + len(self._separator)

    def text(self) -> str:
        return clip_utf8(self._separator.join(self._parts), self._limit)


class _Prefixed(io.RawIOBase):
    """A raw stream that first returns ``prefix`` and then the rest of ``stream``."""

    def __init__(self, prefix: bytes, stream: io.BufferedIOBase) -> None:
        self._prefix = prefix
        self._stream = stream

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[override]
        if self._prefix:
            size = min(len(buffer), len(self._prefix))
            buffer[:size] = self._prefix[:size]
            self._prefix = self._prefix[size:]
            return size
        data = self._stream.read(len(buffer))
        buffer[: len(data)] = data
        return len(data)


class _Bounded(io.RawIOBase):
    """A raw stream over ``stream`` that refuses (FileRefused) to give more than ``limit`` bytes.

    Closing it closes ``stream`` and the file ``raw`` below it (a GzipFile given a file object
    leaves that file open).
    """

    def __init__(self, stream, raw: io.FileIO, limit: int | None) -> None:
        self._stream = stream
        self._raw = raw
        self._limit = limit
        self._count = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[override]
        wanted = len(buffer)
        if self._limit is not None:
            wanted = min(wanted, self._limit + 1 - self._count)  # one byte past the cap tells
        data = self._stream.read(wanted)
        size = len(data)
        buffer[:size] = data
        self._count += size
        if self._limit is not None and self._count > self._limit:
            raise FileRefused(
                f"file holds more than {size_text(self._limit)} (decompressed, if gzip), "
                "the cap for one page file",
                errno.EFBIG,
            )
        return size

    def close(self) -> None:
        if not self.closed:
            try:
                self._stream.close()
            finally:
                self._raw.close()
                super().close()
