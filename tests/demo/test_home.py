"""The home page: a first-run checklist ticked from the team's own data, and the demo tour beside it."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from tracedesk.demo.loader import load_demo
from tracedesk.web.state import AppState


def _done_steps(html: str) -> set[str]:
    return set(re.findall(r'class="checklist-step done" data-step="(\w+)"', html))


def test_checklist_ticks_steps_from_the_data(signed_in: dict[str, TestClient]) -> None:
    admin, tech = signed_in["admin"], signed_in["technician"]
    page = admin.get("/")
    assert page.status_code == 200
    assert "Getting started" in page.text and "No demo archive is loaded" in page.text
    assert _done_steps(page.text) == {"people"}  # the test accounts exist; nothing else yet
    assert 'data-step="people"' not in tech.get("/").text  # adding people is an admin's step
    collection = tech.post("/api/v1/collections", json={"name": "Pump house, box 2"}).json()
    assert _done_steps(admin.get("/").text) == {"people", "collection"}
    assert f'href="/collections/{collection["id"]}"' in admin.get("/").text  # the next step points at it


def test_demo_shows_a_tour_and_truth_but_does_not_tick_the_checklist(
    state: AppState, signed_in: dict[str, TestClient]
) -> None:
    load_demo(state, dpi=40.0, only={"level-w10", "level-w11"})
    page = signed_in["viewer"].get("/")
    assert page.status_code == 200
    assert _done_steps(page.text) == set()
    assert "Demo - Tollwick Reservoir level charts, 1987" in page.text
    assert "tollwick-level-1987-week10.jpg" in page.text and "returned by the reviewer" in page.text
    table = page.text.split("Digitized values beside the known truth")[1]
    rows = re.findall(r"<td>(auto|manual)</td>", table)
    assert sorted(rows) == ["auto", "manual"]
    assert "% of full scale" in table and "sin(2π t/24" in table
