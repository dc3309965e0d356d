"""Reading text files for the readers: gzip, byte-order marks, encodings, provenance.

Every function here turns what can go wrong with a file (missing, empty, not in the
expected encoding, a truncated gzip stream) into an :class:`InputError` that names the
file and line, so no reader needs its own try/except around I/O.
"""

from __future__ import annotations

import codecs
import gzip
import io
import zlib
from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError
from .records import clip_utf8

_BOMS = (
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)


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


def _open_binary(path: Path) -> io.BufferedIOBase:
    with open(path, "rb") as probe:
        magic = probe.read(2)
    if magic == b"\x1f\x8b":
        return gzip.open(path, "rb")  # type: ignore[return-value]
    return open(path, "rb")


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

    A line that does not decode yields an InputError and reading goes on; an empty
    file, a missing file or a truncated gzip stream yields one InputError and stops.
    ``.gz`` files (by their magic bytes, whatever their name) are read transparently.
    UTF-16/32 files with a byte-order mark are read as such.
    """
    name = str(path)
    path = Path(path)
    try:
        stream = _open_binary(path)
    except OSError as error:
        yield InputError(name, None, f"cannot open: {error.strerror or error}")
        return
    number = 0
    try:
        with stream:
            head = stream.read(4)
            encoding, skip = _sniff_bom(head, encoding)
            rest = io.BufferedReader(_Prefixed(head[skip:], stream))  # type: ignore[arg-type]
            if encoding.startswith(("utf-16", "utf-32")):
                text = io.TextIOWrapper(rest, encoding=encoding, newline=None)
                for number, line in enumerate(text, 1):
                    yield number, line.rstrip("\r\n")
            else:
                decoder_name = codecs.lookup(encoding).name
                for number, raw in enumerate(rest, 1):
                    try:
                        line = raw.decode(decoder_name)
                    except UnicodeDecodeError as error:
                        yield InputError(name, number, _decode_reason(error, encoding))
                        continue
                    yield number, line.rstrip("\r\n")
    except (EOFError, gzip.BadGzipFile, zlib.error) as error:
        yield InputError(name, number + 1, f"compressed stream is damaged or truncated ({error})")
        return
    except UnicodeDecodeError as error:
        yield InputError(name, number + 1, _decode_reason(error, encoding))
        return
    except OSError as error:
        yield InputError(name, number + 1, f"read failed: {error}")
        return
    if number == 0:
        yield InputError(name, None, "file is empty")


def read_text(path: str | Path, encoding: str = "utf-8") -> str:
    """Read a whole (small) text file, raising InputError for what `iter_lines` reports."""
    name = str(path)
    try:
        with _open_binary(Path(path)) as stream:
            data = stream.read()
    except OSError as error:
        raise InputError(name, None, f"cannot read: {error.strerror or error}") from None
    except (EOFError, gzip.BadGzipFile, zlib.error) as error:
        raise InputError(name, None, f"compressed stream is damaged or truncated ({error})") from None
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
