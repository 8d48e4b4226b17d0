"""The files a newcomer or operator relies on stay consistent with the code: docker-compose, README, CI, layering."""

from __future__ import annotations

import pkgutil
import re
import tomllib
from pathlib import Path

import yaml

import tracedesk
from tracedesk.config import Settings

ROOT = Path(__file__).resolve().parents[1]


def test_compose_runs_web_worker_database_and_redis_with_health_checks() -> None:
    compose = yaml.safe_load((ROOT / "docker-compose.yml").read_text())
    services = compose["services"]
    assert {"web", "worker", "db", "redis", "migrate"} <= set(services)
    for name in ("web", "worker", "db", "redis"):
        assert "healthcheck" in services[name], name
    assert "--workers" in services["web"]["command"]
    environment = services["migrate"]["environment"]
    fields = {f"TRACEDESK_{name.upper()}" for name in Settings.model_fields}
    unknown = {key for key in environment if key.startswith("TRACEDESK_")} - fields
    assert not unknown, f"compose sets variables Settings does not read: {unknown}"


def test_readme_gives_exactly_two_setup_commands_and_ci_runs_the_test_one() -> None:
    readme = (ROOT / "README.md").read_text()
    setup = readme.split("## Set up", 1)[1].split("\n## ", 1)[0]
    commands = re.findall(r"^(make \w+)", setup, flags=re.MULTILINE)
    assert commands == ["make run", "make test"]
    assert "make test" in (ROOT / ".ci" / "run").read_text()
    first_paragraph = readme.split("\n\n", 2)[1]
    assert "paper chart" in first_paragraph


def test_science_layer_contract_covers_every_other_package() -> None:
    """The import-linter contract must forbid every sibling package of tracedesk.science (new ones included)."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())
    contract = config["tool"]["importlinter"]["contracts"][0]
    forbidden = set(contract["forbidden_modules"])
    packages = {f"tracedesk.{info.name}" for info in pkgutil.iter_modules(tracedesk.__path__) if info.ispkg}
    missing = packages - forbidden - {"tracedesk.science"}
    assert not missing, f"add {sorted(missing)} to the science contract's forbidden_modules"


def test_every_picture_the_readme_shows_exists_and_the_tour_stays_small() -> None:
    """Relative image links resolve to files; the demo tour's pictures keep under 250 KB each (their budget)."""
    readme = (ROOT / "README.md").read_text()
    pictures = re.findall(r"!\[[^\]]*\]\(([^)\s]+)\)", readme)
    tour = [path for path in pictures if path.startswith("docs/tour/")]
    assert tour, "the README shows no picture of the demo tour"
    missing = [path for path in pictures if not (ROOT / path).is_file()]
    assert not missing, f"the README links pictures that do not exist: {missing}"
    large = [path for path in tour if (ROOT / path).stat().st_size >= 250_000]
    assert not large, f"regenerate these smaller (tests/browser/test_demo_tour.py): {large}"
