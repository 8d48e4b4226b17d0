"""Sheet selections as people type them: ``"3,5,9-12"``."""

from __future__ import annotations

from tracedesk.errors import Unprocessable

MAX_SELECTED = 2000
MAX_ID = 2_147_483_647  # the database's integer range


def parse_sheet_ids(text: str | None) -> list[int] | None:
    """``"3,5,9-12"`` -> [3, 5, 9, 10, 11, 12]; None when nothing is given (meaning: all sheets)."""
    if not text or not text.strip():
        return None
    ids: list[int] = []
    try:
        for part in text.split(","):
            low, _, high = part.strip().partition("-")
            first, last = int(low), int(high) if high else int(low)
            if last - first >= MAX_SELECTED or not (1 <= first <= last <= MAX_ID):
                raise ValueError("not a range of sheet ids")
            ids += range(first, last + 1)
    except ValueError as error:
        raise Unprocessable(f"sheet ids: give at most {MAX_SELECTED} numbers and ranges like 3,5,9-12") from error
    if len(ids) > MAX_SELECTED:
        raise Unprocessable(f"sheet ids: at most {MAX_SELECTED} sheets at a time")
    return ids
