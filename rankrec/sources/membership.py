"""Reader for team and access-group membership: CSV rows ``user,team`` or ``user,group``."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

from ..errors import InputError
from ._fields import FieldError, column_count_reason, iter_rows, parse_id
from ._text import check_encoding
from .records import MembershipRecord, Origin

KINDS = ("team", "group")


def read_memberships(
    path: str | Path, kind: str, *, encoding: str = "utf-8"
) -> Iterator[MembershipRecord | InputError]:
    """Yield a MembershipRecord per ``user,<kind>`` row, or InputErrors for bad rows.

    ``kind`` is ``"team"`` (rows ``user,team``) or ``"group"`` (rows ``user,group``). A first
    row ``user,<kind>`` (case-insensitive) is a header and skipped; a first row naming the
    other kind is an InputError (the wrong file). A repeated ``(user, name)`` pair is yielded
    once. Tab-separated files are read too (a tab in the first data line).

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.NamedTemporaryFile("w", suffix=".csv", delete=False) as f:
    ...     _ = f.write("user,team\\nines,platform\\n")
    >>> [(r.user, r.name, r.kind) for r in read_memberships(f.name, "team")]
    [('ines', 'platform', 'team')]
    >>> os.unlink(f.name)
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {', '.join(map(repr, KINDS))}, got {kind!r}")
    check_encoding(encoding)
    return _read(path, kind, encoding)


def _read(path: str | Path, kind: str, encoding: str) -> Iterator[MembershipRecord | InputError]:
    name = str(path)
    other = KINDS[1 - KINDS.index(kind)]
    seen: set[tuple[str, str]] = set()
    first = True
    for item in iter_rows(path, encoding):
        if isinstance(item, InputError):
            yield item
            continue
        number, fields = item
        if first:
            first = False
            names = [field.strip().lower() for field in fields]
            if names == ["user", kind]:
                continue
            if names == ["user", other]:
                yield InputError(
                    name, number, f"header says user,{other} but {kind} membership was asked for"
                )
                return
        if len(fields) != 2:
            yield InputError(name, number, column_count_reason(len(fields), f"2 (user,{kind})"))
            continue
        try:
            user = parse_id(fields[0], "user id")
            member_of = parse_id(fields[1], f"{kind} name")
        except FieldError as error:
            yield InputError(name, number, str(error))
            continue
        if (user, member_of) in seen:
            continue
        seen.add((user, member_of))
        yield MembershipRecord(user, member_of, kind, Origin(name, number))
