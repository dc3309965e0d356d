"""Formatting for the command line: mappings and lists of rows as table, JSON, CSV or Markdown."""

from __future__ import annotations

import csv
import json
import sys
from collections.abc import Mapping, Sequence
from typing import TextIO

EXPORT_FORMATS = ("json", "jsonl", "csv")
"""What `rankrec export` writes (here, not in :mod:`rankrec.export`, so that the command line starts
without the index's imports)."""


def _cell(value) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, int) and not isinstance(value, bool):
        return f"{value:,}"
    if value is None:
        return "-"
    return str(value)


def print_mapping(mapping: Mapping, format: str, out: TextIO | None = None) -> None:
    """A flat or nested mapping: JSON as one object, or an indented two-column table."""
    out = out or sys.stdout
    if format == "json":
        json.dump(mapping, out, indent=2, ensure_ascii=False)
        out.write("\n")
        return
    width = max((len(str(key)) for key in mapping), default=0)
    for key, value in mapping.items():
        label = str(key).replace("_", " ")
        if isinstance(value, Mapping):
            inner = ", ".join(f"{k} {_cell(v)}" for k, v in value.items())
            out.write(f"{label:<{width}}  {inner}\n")
        elif isinstance(value, list):
            out.write(f"{label}:\n" if value else f"{label:<{width}}  none\n")
            for item in value:
                text = (
                    "  ".join(_cell(v) for v in item.values()) if isinstance(item, Mapping) else _cell(item)
                )
                out.write(f"  {text}\n")
        else:
            out.write(f"{label:<{width}}  {_cell(value)}\n")


def print_rows(rows: Sequence[Mapping], format: str, out: TextIO | None = None) -> None:
    """Rows (all with the same keys) as an aligned table, a JSON list, CSV, or a Markdown table."""
    out = out or sys.stdout
    if format == "json":
        json.dump(list(rows), out, indent=2, ensure_ascii=False)
        out.write("\n")
        return
    columns = list(rows[0]) if rows else []
    if format == "csv":
        writer = csv.DictWriter(out, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
        return
    cells = [[_cell(row[column]) for column in columns] for row in rows]
    if format == "md":
        out.write("| " + " | ".join(columns) + " |\n")
        out.write("|" + "|".join("---" for _ in columns) + "|\n")
        for line in cells:
            out.write("| " + " | ".join(text.replace("|", "\\|") for text in line) + " |\n")
        return
    widths = [max(len(column), *(len(line[i]) for line in cells)) for i, column in enumerate(columns)]
    out.write("  ".join(column.ljust(width) for column, width in zip(columns, widths, strict=True)).rstrip())
    out.write("\n")
    for line in cells:
        out.write("  ".join(text.ljust(width) for text, width in zip(line, widths, strict=True)).rstrip())
        out.write("\n")
