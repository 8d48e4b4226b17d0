"""RFC 4180 CSV writing with spreadsheet-formula neutralisation of text cells (OWASP "CSV injection").

Shared by every CSV the service writes (digitizing's resampled series, the exports, the audit export).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Sequence
from typing import TextIO

FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")
Cell = str | float | int | None


def text_cell(value: str) -> str:
    """Text that a spreadsheet would run as a formula gets a leading apostrophe; numbers are never passed here."""
    return "'" + value if value.startswith(FORMULA_TRIGGERS) else value


def number_cell(value: float | None, *, digits: int = 10) -> str:
    """A number as text with ``digits`` significant digits; empty for missing (NaN) values, never invented."""
    if value is None or not math.isfinite(value):
        return ""
    return f"{value:.{digits}g}"


def write_csv_rows(stream: TextIO, header: Sequence[str], rows: Iterable[Sequence[Cell]]) -> int:
    """Write CSV to an open text stream (CRLF line ends, RFC 4180); returns the number of data rows."""
    writer = csv.writer(stream, lineterminator="\r\n")
    writer.writerow([text_cell(name) for name in header])
    count = 0
    for row in rows:
        writer.writerow([_cell(value) for value in row])
        count += 1
    return count


def write_csv(header: Sequence[str], rows: Iterable[Sequence[Cell]]) -> str:
    """CSV text with CRLF line ends (RFC 4180); strings are neutralised, floats formatted, None left empty."""
    buffer = io.StringIO()
    write_csv_rows(buffer, header, rows)
    return buffer.getvalue()


def _cell(value: Cell) -> str:
    if value is None:
        return ""
    if isinstance(value, str):
        return text_cell(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    return number_cell(value)


def unit_label(name: str, unit: str) -> str:
    """A header with its unit in brackets, e.g. ``level [m]`` (ARCHITECTURE.md)."""
    return f"{name} [{unit}]" if unit else name
