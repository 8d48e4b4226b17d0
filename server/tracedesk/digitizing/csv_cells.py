"""Moved to :mod:`tracedesk.exports.csv_cells` (shared by every CSV the service writes); kept as an alias so code
written against the old path keeps working. Import from the new place."""

from tracedesk.exports.csv_cells import (
    FORMULA_TRIGGERS,
    Cell,
    number_cell,
    text_cell,
    unit_label,
    write_csv,
    write_csv_rows,
)

__all__ = ["FORMULA_TRIGGERS", "Cell", "number_cell", "text_cell", "unit_label", "write_csv", "write_csv_rows"]
