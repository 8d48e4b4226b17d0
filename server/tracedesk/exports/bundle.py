"""The collection bundle: one ZIP with, per sheet, each trace's raw vertices, resampled series and period
summaries, a PNG of the traces and fitted curves over the scan, plus the fitted equations of every sheet and a
provenance JSON.

The ZIP is written entry by entry into a temporary file (never held in memory) and handed back as a path; the
caller streams or stores it and removes it. Small selections are built while the request waits (``api.py``),
large ones by a background job that reports ``progress`` and stores the file (``bundle_jobs.py``).
"""

from __future__ import annotations

import io
import json
import os
import tempfile
import zipfile
from collections.abc import Callable, Iterable, Sequence
from dataclasses import asdict, dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import calibration_of
from tracedesk.digitizing.series import resample, resampled_csv
from tracedesk.digitizing.traces import traces_of_sheet
from tracedesk.errors import AppError
from tracedesk.exports.approvals import approvals_of_sheets
from tracedesk.exports.csv_cells import Cell, write_csv_rows
from tracedesk.exports.fit_table import fit_rows, fit_table
from tracedesk.exports.overlay import render_sheet_overlay
from tracedesk.exports.periods import has_time_axis, periods_table
from tracedesk.exports.provenance import bundle_header, json_safe, sheet_provenance
from tracedesk.exports.recording import file_sha256
from tracedesk.exports.vertices import vertices_table
from tracedesk.models import Collection, Sheet, Trace
from tracedesk.models.base import utcnow
from tracedesk.science.errors import ScienceInputError
from tracedesk.storage import FileStore

ProgressCallback = Callable[[float, str], None]
MAX_DEFAULT_POINTS = 10_000
# zlib level of the overlay PNGs. On a noisy 4000 x 2857 px scan, level 3 took 3.4 s for 10.9 MB where Pillow's
# default 6 took 8.8 s for 10.6 MB (level 1: 2.8 s, 12.2 MB); the encoder was most of a bundle's time per sheet.
PNG_COMPRESS_LEVEL = 3
README = """Tracedesk export bundle

provenance.json            where every number comes from: scan SHA-256, calibration version and residuals, trace
                           and fit versions, who digitized and who approved (and whether that signature still holds)
fits.csv                   fitted equations, one row per fit (coefficients with standard errors, domain, statistics)
sheet-<id>/overlay.png     the traces (and fitted curves, green) drawn over the lightened scan, for a visual check
sheet-<id>/trace-<id>-vertices.csv    raw vertices: pixel coordinates (origin at the image's top-left corner) and
                                      chart coordinates with standard uncertainty
sheet-<id>/trace-<id>-resampled.csv   the trace on a uniform grid (linear interpolation; gaps and rows outside the
                                      trace are empty)
sheet-<id>/trace-<id>-periods.csv     per-period summaries (time axes only)

CSV files: RFC 4180, UTF-8, comma separated, CRLF line ends, units in brackets in the header row, times ISO 8601.
Text cells that a spreadsheet could run as a formula start with an apostrophe.
"""


@dataclass(frozen=True)
class BundleOptions:
    """``step``: resampling step (x units; default: as many points as the trace has vertices, at most 10,000);
    ``period_hours``: length of the summary periods; ``max_image_side``: longer side of each PNG (px)."""

    step: float | None = None
    period_hours: float = 24.0
    max_image_side: int = 4000


@dataclass
class BundleResult:
    path: Path
    sha256: str = ""
    size: int = 0
    files: list[str] = field(default_factory=list)
    sheet_ids: list[int] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)


class _Writer:
    """Adds entries to the open ZIP, stamped with the bundle's time, and remembers their names."""

    def __init__(self, archive: zipfile.ZipFile, moment: datetime, result: BundleResult) -> None:
        self.archive, self.result = archive, result
        self.stamp = (moment.year, moment.month, moment.day, moment.hour, moment.minute, moment.second)

    def _info(self, name: str) -> zipfile.ZipInfo:
        info = zipfile.ZipInfo(name, date_time=self.stamp)
        info.compress_type = zipfile.ZIP_DEFLATED
        self.result.files.append(name)
        return info

    def csv(self, name: str, header: list[str], rows: Iterable[Sequence[Cell]]) -> None:
        with self.archive.open(self._info(name), "w") as raw, io.TextIOWrapper(raw, "utf-8", newline="") as text:
            write_csv_rows(text, header, rows)

    def text(self, name: str, content: str) -> None:
        with self.archive.open(self._info(name), "w") as raw:
            raw.write(content.encode("utf-8"))

    def png(self, name: str, picture: Any) -> None:
        info = self._info(name)
        info.compress_type = zipfile.ZIP_STORED  # PNG is compressed already: deflating it again only costs time
        with self.archive.open(info, "w") as raw:
            picture.save(raw, format="PNG", compress_level=PNG_COMPRESS_LEVEL)


def _trace_files(writer: _Writer, session: Session, trace: Trace, folder: str, options: BundleOptions) -> None:
    header, rows = vertices_table(session, trace)
    writer.csv(f"{folder}/trace-{trace.id}-vertices.csv", header, rows)
    if calibration_of(session, trace.sheet_id) is None:
        return
    try:
        count = None if options.step else min(max(2, len(json.loads(trace.vertices))), MAX_DEFAULT_POINTS)
        series = resample(
            session,
            trace,
            step=options.step,
            count=count,
            start=None,
            stop=None,
            method="linear",
            fit_id=None,
            max_gap=None,
        )
        writer.text(f"{folder}/trace-{trace.id}-resampled.csv", resampled_csv(session, trace, series))
        if has_time_axis(session, trace):
            header, rows = periods_table(session, trace, period_hours=options.period_hours)
            writer.csv(f"{folder}/trace-{trace.id}-periods.csv", header, list(rows))
    except (AppError, ScienceInputError) as error:
        writer.result.skipped.append(f"trace {trace.id}: {error}")


def _sheet_files(
    writer: _Writer, session: Session, store: FileStore, sheet: Sheet, options: BundleOptions
) -> list[str]:
    first = len(writer.result.files)
    folder = f"sheet-{sheet.id}"
    for trace in traces_of_sheet(session, sheet.id):
        _trace_files(writer, session, trace, folder, options)
    writer.png(f"{folder}/overlay.png", render_sheet_overlay(session, store, sheet, max_side=options.max_image_side))
    return writer.result.files[first:]


def build_bundle(
    session: Session,
    store: FileStore,
    collection: Collection,
    sheets: list[Sheet],
    *,
    generated_by: str,
    options: BundleOptions,
    progress: ProgressCallback | None = None,
    folder: Path | None = None,
    job: dict[str, int] | None = None,
) -> BundleResult:
    """Write the bundle of ``sheets`` into a new temporary file in ``folder`` (default: the system's temporary
    folder); the caller removes ``result.path`` when done. Nothing is left behind if this raises.

    ``progress(fraction, message)`` is called before each sheet (fraction 0-1) and once at the end. ``job`` (the
    background job's id and attempt) is written into provenance.json, which also makes each job's file unique.
    """
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
    handle, name = tempfile.mkstemp(prefix="tracedesk-bundle-", suffix=".zip", dir=folder)
    os.close(handle)
    result = BundleResult(path=Path(name), sheet_ids=[sheet.id for sheet in sheets])
    moment = utcnow()
    try:
        with zipfile.ZipFile(result.path, "w") as archive:
            writer = _Writer(archive, moment, result)
            approvals = approvals_of_sheets(session, result.sheet_ids)
            provenance = bundle_header(
                collection, generated_by=generated_by, generated_at=moment, options=asdict(options), job=job
            )
            provenance["sheets"] = []
            for index, sheet in enumerate(sheets):
                if progress is not None:
                    progress(index / max(len(sheets), 1), f"sheet {sheet.id} ({index + 1} of {len(sheets)})")
                files = _sheet_files(writer, session, store, sheet, options)
                provenance["sheets"].append(sheet_provenance(session, sheet, approvals[sheet.id], files))
            header, rows = fit_table(fit_rows(session, result.sheet_ids, approvals=approvals))
            writer.csv("fits.csv", header, rows)
            provenance["skipped"] = result.skipped
            writer.text(
                "provenance.json", json.dumps(json_safe(provenance), indent=2, ensure_ascii=False, allow_nan=False)
            )
            writer.text("README.txt", README)
        result.size = result.path.stat().st_size
        result.sha256 = file_sha256(result.path)
    except BaseException:
        result.path.unlink(missing_ok=True)
        raise
    if progress is not None:
        progress(1.0, "done")
    return result
