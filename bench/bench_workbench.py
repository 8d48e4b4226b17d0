"""Workbench overlay redraw time in a real browser (Debian's Chromium), as measured by the browser test.

The browser test tests/browser/test_workbench_editing.py::test_redraw_of_a_20000_vertex_trace_is_measured opens the
workbench at 1280 x 800 with a selected trace of 2,000 and one of 20,000 vertices (move tool on, so vertex handles
are drawn too), times 31 full overlay redraws of each with performance.now() and writes the medians to
test-artifacts/workbench-redraw.json. This script runs that test when the file is missing (or with --measure) and
prints the figures, with the 2,000-vertex redraw of the same run as the reference. Target: <= 50 ms for 20,000.

    .venv/bin/python bench/bench_workbench.py [--measure]
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
REPORT = ROOT / "test-artifacts" / "workbench-redraw.json"
TEST = "tests/browser/test_workbench_editing.py::test_redraw_of_a_20000_vertex_trace_is_measured"


def measure() -> None:
    command = [sys.executable, "-m", "pytest", TEST, "-q", "-p", "no:xdist", "-p", "no:cacheprovider"]
    subprocess.run(command, cwd=ROOT, check=True)


def main() -> None:
    if "--measure" in sys.argv or not REPORT.exists():
        measure()
    report = json.loads(REPORT.read_text(encoding="utf-8"))
    redraw = report["redraw_ms"]
    worst = report["max_ms"]
    reference = float(redraw["2000"])
    print(f"workbench overlay redraw, Chromium {report['browser']} ({report['what']})")
    print(f"{'vertices':>9} {'median ms':>10} {'max ms':>8} {'x 2,000':>8} {'target ms':>10}")
    for count in ("2000", "20000"):
        ratio = float(redraw[count]) / reference if reference > 0 else float("nan")
        target = f"{report['target_ms']:>10}" if count == "20000" else f"{'':>10}"
        print(f"{int(count):>9,} {float(redraw[count]):>10.1f} {float(worst[count]):>8.1f} {ratio:>8.1f} {target}")
    print("(performance.now() is coarsened to 0.1 ms in the browser; medians of 31 redraws)")


if __name__ == "__main__":
    main()
