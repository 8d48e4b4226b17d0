"""The reliability campaign's figures: what each area records, how runs are merged, the README table.

Each test module of this folder belongs to one area (``MODULE_AREAS``). Tests record how many cases they tried,
how many failed and how many acknowledged records or files were lost; a test that fails without recording a
failure counts as one failed case. At the end of a run every pytest process writes its part, and the last one
merges them into ``test-artifacts/reliability.json`` and ``test-artifacts/reliability.md``; when every area ran,
the table between the markers of README.md's "Reliability" section is replaced as well.

Run ``.venv/bin/python -m tests.reliability.report`` to rewrite the README table from the latest JSON by hand.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import re
import tempfile
from collections.abc import Iterator
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "test-artifacts"
PARTS = ARTIFACTS / "reliability-parts"
RESULT_JSON = ARTIFACTS / "reliability.json"
RESULT_MD = ARTIFACTS / "reliability.md"
README = ROOT / "README.md"
START_MARKER = "<!-- reliability:start -->"
END_MARKER = "<!-- reliability:end -->"
COLUMNS = ("Area", "What is checked", "Cases tried", "Failures", "Data lost")


@dataclass(frozen=True)
class Area:
    key: str
    title: str
    checks: str


AREAS = (
    Area(
        "uploads",
        "Hostile uploads (HTTP)",
        "polyglots, wrong magic, `../`/NUL names, empty, truncated, pixel/frame/page bombs, EPS/SVG/HTML: "
        "4xx with a reason, no row, no file, bounded memory",
    ),
    Area(
        "authorization",
        "Authorization matrix and IDOR",
        "every route x role (+ anonymous) against the matrix; other users' ids; protected fields in bodies",
    ),
    Area(
        "sessions",
        "Sessions, CSRF, login",
        "id rotation, logout/idle/absolute expiry (frozen clock), cookie flags, missing/foreign CSRF on every "
        "unsafe route, no change on GET, throttling, same answer for unknown users",
    ),
    Area(
        "concurrency",
        "Concurrency",
        "lost updates (412) on sheets, traces, calibrations, collections, users; parallel duplicate uploads; "
        "50 simultaneous approvals",
    ),
    Area(
        "load",
        "Bounded load",
        "concurrent technicians saving their traces on a loopback server, count-limited: 0 errors, each read "
        "shows its save, versions and audit rows = acknowledged saves, chain verifies",
    ),
    Area(
        "faults",
        "Fault injection",
        "a failure at each step of the upload and edit pipelines, disk full (507): all or nothing, chain intact",
    ),
    Area(
        "crash",
        "SIGKILL during writes",
        "server killed mid-write: integrity check, acknowledged writes present, chain verifies, sweep cleans",
    ),
    Area(
        "audit",
        "Audit tamper and guards",
        "flipped byte per field, deleted/swapped/inserted rows, cut tail; triggers; `audit verify` exit codes",
    ),
    Area(
        "fuzzing",
        "API fuzzing (Schemathesis)",
        "generated requests for every operation: no 5xx, responses conform to the OpenAPI schema",
    ),
)
AREA_KEYS = tuple(area.key for area in AREAS)
MODULE_AREAS = {
    "test_hostile_uploads": "uploads",
    "test_authorization": "authorization",
    "test_sessions_csrf": "sessions",
    "test_concurrency": "concurrency",
    "test_bounded_load": "load",
    "test_faults": "faults",
    "test_crash_recovery": "crash",
    "test_audit_tamper": "audit",
    "test_schemathesis": "fuzzing",
}


@dataclass
class Counts:
    cases: int = 0
    failures: int = 0
    data_lost: int = 0

    def add(self, other: Counts) -> None:
        self.cases += other.cases
        self.failures += other.failures
        self.data_lost += other.data_lost


@dataclass
class RunFigures:
    """What one test recorded, and whether pytest saw it fail."""

    area: str
    database: str
    counts: Counts = field(default_factory=Counts)
    failed: bool = False

    def effective(self) -> Counts:
        counts = Counts(self.counts.cases, self.counts.failures, self.counts.data_lost)
        if self.failed and counts.failures == 0:
            counts.failures = 1  # failed without saying how many cases: count the test itself
            counts.cases = max(counts.cases, 1)
        return counts


def area_of_nodeid(nodeid: str) -> str | None:
    stem = Path(nodeid.split("::", 1)[0]).stem
    return MODULE_AREAS.get(stem)


def database_of_nodeid(nodeid: str) -> str:
    if "postgresql" in nodeid:
        return "postgresql"
    if "sqlite" in nodeid:
        return "sqlite"
    return "none"


def part_path(run_id: str, worker: str) -> Path:
    return PARTS / f"{run_id}--{worker}.json"


def write_part(run_id: str, worker: str, tests: dict[str, RunFigures]) -> None:
    PARTS.mkdir(parents=True, exist_ok=True)
    payload = {nodeid: asdict(figures) for nodeid, figures in tests.items()}
    _write_atomically(part_path(run_id, worker), json.dumps(payload, indent=1))


@contextlib.contextmanager
def parts_lock() -> Iterator[None]:
    PARTS.mkdir(parents=True, exist_ok=True)
    with (PARTS / ".lock").open("w") as handle:
        fcntl.flock(handle, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def run_parts(run_id: str) -> list[Path]:
    return sorted(PARTS.glob(f"{run_id}--*.json"))


def merge_parts(paths: list[Path]) -> dict[str, RunFigures]:
    merged: dict[str, RunFigures] = {}
    for path in paths:
        for nodeid, raw in json.loads(path.read_text("utf-8")).items():
            merged[nodeid] = RunFigures(
                area=raw["area"], database=raw["database"], counts=Counts(**raw["counts"]), failed=raw["failed"]
            )
    return merged


def summarise(tests: dict[str, RunFigures]) -> dict[str, object]:
    """Per area: cases, failures, data lost, tests run, databases; plus the run's totals."""
    areas: dict[str, dict[str, object]] = {}
    for key in AREA_KEYS:
        chosen = [figures for figures in tests.values() if figures.area == key]
        total = Counts()
        for figures in chosen:
            total.add(figures.effective())
        databases = sorted({figures.database for figures in chosen} - {"none"})
        areas[key] = {**asdict(total), "tests": len(chosen), "databases": databases}
    complete = all(int(str(areas[key]["tests"])) > 0 for key in AREA_KEYS)
    return {
        "generated_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "complete": complete,
        "columns": list(COLUMNS),
        "areas": areas,
    }


def render_table(summary: dict[str, object]) -> str:
    areas = summary["areas"]
    assert isinstance(areas, dict)
    lines = ["| " + " | ".join(COLUMNS) + " |", "|" + "---|" * len(COLUMNS)]
    for area in AREAS:
        row = areas[area.key]
        databases = ", ".join(row["databases"]) or "-"
        title = f"{area.title} ({databases})"
        cells = [title, area.checks, str(row["cases"]), str(row["failures"]), str(row["data_lost"])]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def readme_block(summary: dict[str, object]) -> str:
    stamp = str(summary["generated_at"])
    note = f"Figures of the test run of {stamp} (written by `tests/reliability`, `make test`)."
    return f"{START_MARKER}\n{note}\n\n{render_table(summary)}\n{END_MARKER}"


def replace_block(text: str, block: str) -> str:
    pattern = re.compile(re.escape(START_MARKER) + r".*?" + re.escape(END_MARKER), re.DOTALL)
    if pattern.search(text):
        return pattern.sub(lambda _match: block, text, count=1)
    heading = re.search(r"^## Reliability\n(?:.*\n)*?(?=^## |\Z)", text, re.MULTILINE)
    if heading is None:
        return text.rstrip("\n") + "\n\n## Reliability\n\n" + block + "\n"
    section = heading.group(0).rstrip("\n") + "\n\n" + block + "\n\n"
    return text[: heading.start()] + section + text[heading.end() :]


def update_readme(summary: dict[str, object], readme: Path = README) -> None:
    text = readme.read_text("utf-8")
    updated = replace_block(text, readme_block(summary))
    if updated != text:
        _write_atomically(readme, updated)


def parse_readme_table(text: str) -> tuple[list[str], list[list[str]]]:
    """The header cells and body rows of the table between the markers (ValueError when absent)."""
    start, end = text.find(START_MARKER), text.find(END_MARKER)
    if start < 0 or end < start:
        raise ValueError("README.md has no reliability markers")
    rows = [line for line in text[start:end].splitlines() if line.startswith("|")]
    cells = [[cell.strip() for cell in line.strip("|").split(" | ")] for line in rows]
    if len(cells) < 2:
        raise ValueError("the reliability block holds no table")
    return cells[0], cells[2:]


def finish_run(run_id: str, worker_count: int) -> dict[str, object] | None:
    """Merge the parts of a run once every process wrote its own; the last one writes the results."""
    with parts_lock():
        paths = run_parts(run_id)
        if len(paths) < worker_count:
            return None
        tests = merge_parts(paths)
        summary = summarise(tests)
        summary["tests"] = {nodeid: asdict(figures) for nodeid, figures in sorted(tests.items())}
        if tests:
            _write_atomically(RESULT_JSON, json.dumps(summary, indent=1))
            _write_atomically(RESULT_MD, render_table(summary) + "\n")
            if summary["complete"]:
                update_readme(summary)
        for path in paths:
            path.unlink(missing_ok=True)
        return summary


def _write_atomically(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    mode = path.stat().st_mode & 0o777 if path.exists() else 0o644
    handle, temp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.")
    with os.fdopen(handle, "w", encoding="utf-8") as stream:
        stream.write(text)
    os.chmod(temp, mode)
    os.replace(temp, path)


def main() -> None:
    summary = json.loads(RESULT_JSON.read_text("utf-8"))
    update_readme(summary)
    print(render_table(summary))


if __name__ == "__main__":
    main()
