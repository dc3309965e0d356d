"""YAML front matter of a Markdown page: title, space, tags, groups, archived.

The front matter is the block between a first line ``---`` and the next ``---`` or ``...``
line; it is read with PyYAML's safe loader (the C one when present), and a bad field names
its line in the file (line 1 is the opening ``---``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import yaml

from ..errors import InputError

_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


class _FieldError(Exception):
    def __init__(self, key: str, reason: str) -> None:
        self.key = key
        self.reason = reason


def split_front_matter(text: str) -> tuple[str | None, int]:
    """YAML text of the front matter and the number of lines it takes (0 if none).

    Raises ValueError if the front matter is opened but never closed.
    """
    if not (text.startswith("---\n") or text == "---"):
        return None, 0
    lines = text.split("\n")
    for number in range(1, len(lines)):
        if lines[number].rstrip() in ("---", "..."):
            return "\n".join(lines[1:number]), number + 1
    raise ValueError("front matter opened by '---' on line 1 is never closed by '---' or '...'")


def _key_line(yaml_text: str, key: str) -> int | None:
    """0-based line of ``key`` in the front matter mapping, if it can be found."""
    try:
        node = yaml.compose(yaml_text, Loader=_LOADER)
    except Exception:  # only used to place an error; the error itself is already known
        return None
    for key_node, _value in getattr(node, "value", ()):
        if getattr(key_node, "value", None) == key:
            return key_node.start_mark.line
    return None


def _string(meta: dict[Any, Any], key: str) -> str | None:
    value = meta.get(key)
    if value is None or isinstance(value, str):
        return value
    raise _FieldError(key, f"{key} must be a string, got {type(value).__name__} {value!r}")


def _strings(meta: dict[Any, Any], key: str) -> tuple[str, ...]:
    value = meta.get(key)
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list) and all(isinstance(item, str) for item in value):
        return tuple(value)
    raise _FieldError(
        key, f"{key} must be a list of strings (or one string), got {type(value).__name__} {value!r}"
    )


def _boolean(meta: dict[Any, Any], key: str) -> bool:
    value = meta.get(key)
    if value is None or isinstance(value, bool):
        return bool(value)
    raise _FieldError(key, f"{key} must be true or false, got {type(value).__name__} {value!r}")


@dataclass(slots=True)
class Meta:
    title: str | None = None
    space: str | None = None
    tags: tuple[str, ...] = ()
    groups: tuple[str, ...] = ()
    archived: bool = False


def read_front_matter(yaml_text: str, file: str) -> Meta | InputError:
    try:
        meta = yaml.load(yaml_text, Loader=_LOADER)
    except yaml.MarkedYAMLError as error:
        mark = error.problem_mark or error.context_mark
        line = None if mark is None else mark.line + 2  # line 1 is the opening '---'
        reason = " ".join(part for part in (error.context, error.problem) if part) or "not valid YAML"
        return InputError(file, line, f"front matter is not valid YAML: {reason}; page skipped")
    except Exception as error:  # e.g. ValueError for a date like 2026-13-45, RecursionError
        return InputError(file, 2, f"front matter is not valid YAML: {error}; page skipped")
    if meta is None:
        return Meta()
    if not isinstance(meta, dict):
        return InputError(file, 2, f"front matter must be a mapping, got {type(meta).__name__}; page skipped")
    try:
        title = _string(meta, "title")
        return Meta(
            title=title.strip() if title else None,
            space=_string(meta, "space"),
            tags=_strings(meta, "tags"),
            groups=_strings(meta, "groups"),
            archived=_boolean(meta, "archived"),
        )
    except _FieldError as error:
        line = _key_line(yaml_text, error.key)
        line = None if line is None else line + 2
        return InputError(file, line, f"front matter: {error.reason}; page skipped")
