"""The server-rendered pages as a browser without JavaScript sees them: login form, CSRF on forms, admin page."""

from __future__ import annotations

import re

from fastapi import FastAPI
from fastapi.testclient import TestClient

from tests.conftest import PASSWORD, People


def _form_token(html: str, field: str) -> str:
    match = re.search(rf'name="{field}" value="([^"]+)"', html)
    assert match, f"no {field} in the page"
    return match.group(1)


def _browser_login(client: TestClient, username: str) -> str:
    page = client.get("/login")
    token = _form_token(page.text, "login_csrf")
    response = client.post(
        "/login",
        data={"username": username, "password": PASSWORD, "login_csrf": token, "next": "/collections"},
        follow_redirects=False,
    )
    assert response.status_code == 303 and response.headers["location"] == "/collections"
    return _form_token(client.get("/collections").text, "csrf_token")


def test_pages_redirect_to_login_then_back(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        response = client.get("/collections", headers={"accept": "text/html"}, follow_redirects=False)
        assert response.status_code == 303 and response.headers["location"].startswith("/login?next=")
        _browser_login(client, people.technician)
        assert "Collections" in client.get("/collections").text


def test_login_form_without_its_token_is_refused(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        response = client.post(
            "/login", data={"username": people.technician, "password": PASSWORD}, headers={"accept": "text/html"}
        )
        assert response.status_code == 403


def test_open_redirect_is_neutralised(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        token = _form_token(client.get("/login").text, "login_csrf")
        response = client.post(
            "/login",
            data={"username": people.viewer, "password": PASSWORD, "login_csrf": token, "next": "//evil.example/"},
            follow_redirects=False,
        )
        assert response.headers["location"] == "/"


def test_form_posts_need_the_session_csrf_token(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        csrf = _browser_login(client, people.technician)
        refused = client.post("/collections", data={"name": "Forged"}, headers={"accept": "text/html"})
        assert refused.status_code == 403
        created = client.post("/collections", data={"name": "Real", "csrf_token": csrf}, follow_redirects=False)
        assert created.status_code == 303
        collection_page = client.get(created.headers["location"])
        assert "Real" in collection_page.text and "data-upload-zone" in collection_page.text


def test_admin_adds_a_person_from_the_page(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        csrf = _browser_login(client, people.admin)
        response = client.post(
            "/admin/users",
            data={
                "username": "nina",
                "role": "reviewer",
                "password": "river stone 42",
                "display_name": "Nina Reed",
                "csrf_token": csrf,
            },
            follow_redirects=False,
        )
        assert response.status_code == 303
        assert "Nina Reed" in client.get("/admin/users").text
    with TestClient(app) as other:
        _browser_login(other, people.technician)
        assert other.get("/admin/users", headers={"accept": "text/html"}).status_code == 403


def test_sheet_page_shows_viewer_and_history(app: FastAPI, signed_in: dict[str, TestClient]) -> None:
    from tests.archive.scans import png_bytes

    tech = signed_in["technician"]
    collection_id = tech.post("/api/v1/collections", json={"name": "Box"}).json()["id"]
    sheet = tech.post(
        f"/api/v1/collections/{collection_id}/sheets", files=[("files", ("s.png", png_bytes(), "image/png"))]
    ).json()["sheets"][0]
    page = tech.get(f"/sheets/{sheet['id']}")
    assert page.status_code == 200
    assert f'data-tiles="/api/v1/sheets/{sheet["id"]}/tiles/sheet.dzi"' in page.text
    history = tech.get(f"/history/sheet/{sheet['id']}")
    assert "create" in history.text and "Tom" in history.text
    assert tech.get("/favicon.ico").status_code == 200
