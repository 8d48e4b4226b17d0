"""Fixtures of the reliability campaign and the hooks that turn its figures into the README table.

``figures`` records what a test tried (cases, failures, data lost); the hooks below note failed tests, write
each pytest process's part at the end of the run and let the last process merge them (tests/reliability/report.py).
The campaign's databases are module-scoped (one migrated database and app per module and database kind), so the
many cases of a module share one setup; tests therefore compare counts before and after, never absolute counts.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.conftest import database_kinds
from tests.reliability import report as figures_report
from tests.reliability.campaign import Campaign, build_campaign, fresh_database_url
from tests.reliability.world import World, build_world

_TESTS: dict[str, figures_report.RunFigures] = {}
_RUN: dict[str, object] = {"id": uuid.uuid4().hex, "workers": 1, "worker": "main", "controller": False}


class Figures:
    """A test's handle for recording its cases: ``figures.add(cases=12, failures=0, data_lost=0)``."""

    def __init__(self, entry: figures_report.RunFigures) -> None:
        self._entry = entry

    def add(self, *, cases: int, failures: int = 0, data_lost: int = 0) -> None:
        self._entry.counts.add(figures_report.Counts(cases, failures, data_lost))

    def on_database(self, database: str) -> None:
        """Name the database a test ran on when it does not take the campaign's parametrised one."""
        self._entry.database = database


def _entry(nodeid: str) -> figures_report.RunFigures | None:
    area = figures_report.area_of_nodeid(nodeid)
    if area is None:
        return None
    return _TESTS.setdefault(
        nodeid, figures_report.RunFigures(area=area, database=figures_report.database_of_nodeid(nodeid))
    )


@pytest.fixture
def figures(request: pytest.FixtureRequest) -> Figures:
    entry = _entry(request.node.nodeid)
    assert entry is not None, f"{request.node.nodeid}: add its module to report.MODULE_AREAS"
    return Figures(entry)


def pytest_configure(config: pytest.Config) -> None:
    worker_input = getattr(config, "workerinput", None)
    if worker_input is not None:
        _RUN.update(id=worker_input["testrunuid"], workers=worker_input["workercount"], worker=worker_input["workerid"])
    elif getattr(config.option, "dist", "no") != "no":
        _RUN["controller"] = True  # pytest-xdist's controller: the workers record and merge the figures


def pytest_runtest_logreport(report: pytest.TestReport) -> None:
    entry = None if _RUN["controller"] else _entry(report.nodeid)
    if entry is not None and report.failed:
        entry.failed = True


def pytest_sessionfinish(session: pytest.Session) -> None:
    if session.config.option.collectonly or _RUN["controller"]:
        return
    figures_report.write_part(str(_RUN["id"]), str(_RUN["worker"]), _TESTS)
    figures_report.finish_run(str(_RUN["id"]), int(_RUN["workers"]))


@pytest.fixture(scope="module", params=database_kinds())
def campaign_url(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A fresh database per module and kind: a SQLite file, or a new PostgreSQL schema (dropped afterwards)."""
    with fresh_database_url(str(request.param), tmp_path_factory.mktemp("db")) as url:
        yield url


@pytest.fixture(scope="module")
def campaign(campaign_url: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Campaign]:
    """One migrated database, app, file store and signed-up cast (with API tokens) shared by a module's tests."""
    built = build_campaign(campaign_url, Path(tmp_path_factory.mktemp("data")))
    yield built
    built.close()


@pytest.fixture(scope="module")
def world(campaign: Campaign) -> World:
    """Records of every kind, made once per module, for calling any route with real ids."""
    return build_world(campaign)
