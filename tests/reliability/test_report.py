"""The README's reliability table is the one the campaign writes: same columns, one row per area, in order,
whole numbers in the figure columns; and the merging of figures counts a failed test as a failure."""

from __future__ import annotations

import json

from tests.reliability import report


def _title_of(cell: str) -> str:
    return cell.rsplit(" (", 1)[0]  # "Concurrency (postgresql, sqlite)" -> "Concurrency"


def test_readme_table_has_the_shape_of_the_campaign() -> None:
    header, rows = report.parse_readme_table(report.README.read_text("utf-8"))
    assert header == list(report.COLUMNS)
    assert [_title_of(row[0]) for row in rows] == [area.title for area in report.AREAS]
    for row in rows:
        assert len(row) == len(report.COLUMNS)
        assert all(cell.isdigit() for cell in row[2:]), row


def test_latest_run_has_the_shape_of_the_readme_table() -> None:
    """When a run left its figures (test-artifacts/reliability.json), they render to a table of the same shape."""
    if not report.RESULT_JSON.exists():
        return  # a fresh checkout: the README is checked above, and this run will write the file
    summary = json.loads(report.RESULT_JSON.read_text("utf-8"))
    assert summary["columns"] == list(report.COLUMNS)
    assert list(summary["areas"]) == list(report.AREA_KEYS)
    header, rows = report.parse_readme_table(report.readme_block(summary))
    _, readme_rows = report.parse_readme_table(report.README.read_text("utf-8"))
    assert header == list(report.COLUMNS)
    assert [_title_of(row[0]) for row in rows] == [_title_of(row[0]) for row in readme_rows]


def test_a_failed_test_counts_as_a_failure_even_without_figures() -> None:
    tests = {
        "tests/reliability/test_faults.py::a[sqlite]": report.RunFigures("faults", "sqlite", report.Counts(5, 0, 0)),
        "tests/reliability/test_faults.py::b[sqlite]": report.RunFigures("faults", "sqlite", failed=True),
        "tests/reliability/test_faults.py::c[postgresql]": report.RunFigures(
            "faults", "postgresql", report.Counts(3, 2, 1), failed=True
        ),
    }
    summary = report.summarise(tests)
    faults = summary["areas"]["faults"]  # type: ignore[index]
    assert (faults["cases"], faults["failures"], faults["data_lost"]) == (9, 3, 1)
    assert faults["databases"] == ["postgresql", "sqlite"]
    assert summary["complete"] is False  # the other areas did not run


def test_replacing_the_block_keeps_the_rest_of_the_readme() -> None:
    text = "# T\n\n## Reliability\n\nIntro.\n\n## Cautions\n\nBe careful.\n"
    summary = report.summarise({})
    once = report.replace_block(text, report.readme_block(summary))
    twice = report.replace_block(once, report.readme_block(summary))
    assert once == twice
    assert once.index("Intro.") < once.index(report.START_MARKER) < once.index("## Cautions")
    assert once.endswith("## Cautions\n\nBe careful.\n")
