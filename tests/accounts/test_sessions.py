"""Sign-in, sessions, CSRF and API tokens as a browser or a script sees them (OWASP session and CSRF
cheat sheets, RELIABILITY.md)."""

from __future__ import annotations

from fastapi import FastAPI
from fastapi.testclient import TestClient

from tests.conftest import PASSWORD, People, log_in


def test_login_sets_a_hardened_cookie_and_returns_a_csrf_token(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        response = client.post("/api/v1/session", json={"username": people.technician, "password": PASSWORD})
        assert response.status_code == 200
        cookie = response.headers["set-cookie"].lower()
        assert "httponly" in cookie and "samesite=lax" in cookie
        assert len(response.json()["csrf_token"]) >= 32
        assert client.get("/api/v1/me").json()["username"] == people.technician


def test_unknown_and_known_users_get_the_same_refusal(client: TestClient, people: People) -> None:
    wrong_password = client.post("/api/v1/session", json={"username": people.technician, "password": "nope-nope"})
    unknown_user = client.post("/api/v1/session", json={"username": "nobody", "password": "nope-nope"})
    assert wrong_password.status_code == unknown_user.status_code == 401
    assert wrong_password.json() == unknown_user.json()


def test_login_is_throttled_per_account(client: TestClient, people: People) -> None:
    for _ in range(5):
        assert (
            client.post("/api/v1/session", json={"username": people.viewer, "password": "bad-pass-1"}).status_code
            == 401
        )
    response = client.post("/api/v1/session", json={"username": people.viewer, "password": PASSWORD})
    assert response.status_code == 429


def test_session_id_changes_at_each_login_and_dies_at_logout(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        log_in(client, people.technician)
        first = client.cookies.get("tracedesk_session")
        log_in(client, people.technician)
        second = client.cookies.get("tracedesk_session")
        assert first and second and first != second
        assert client.delete("/api/v1/session").status_code == 204
    with TestClient(app) as replay:
        replay.cookies.set("tracedesk_session", second)
        assert replay.get("/api/v1/me").status_code == 401


def test_state_change_without_csrf_token_is_refused(app: FastAPI, people: People) -> None:
    with TestClient(app) as client:
        log_in(client, people.admin)
        token = client.headers.pop("X-CSRF-Token")
        assert client.post("/api/v1/collections", json={"name": "Box A"}).status_code == 403
        client.headers["X-CSRF-Token"] = "forged" + token[6:]
        assert client.post("/api/v1/collections", json={"name": "Box A"}).status_code == 403
        client.headers["X-CSRF-Token"] = token
        assert client.post("/api/v1/collections", json={"name": "Box A"}).status_code == 201


def test_api_token_works_once_shown_and_stops_when_revoked(app: FastAPI, signed_in: dict[str, TestClient]) -> None:
    created = signed_in["technician"].post("/api/v1/tokens", json={"name": "nightly script"})
    assert created.status_code == 201
    raw = created.json()["token"]
    with TestClient(app) as script:
        script.headers["Authorization"] = f"Bearer {raw}"
        assert script.get("/api/v1/me").json()["role"] == "technician"
        # tokens are not subject to CSRF (no cookie is involved)
        assert script.post("/api/v1/collections", json={"name": "By script"}).status_code in {201, 403}
        listed = signed_in["technician"].get("/api/v1/tokens").json()
        assert all("token" not in item for item in listed)
        assert signed_in["technician"].delete(f"/api/v1/tokens/{created.json()['id']}").status_code == 204
        assert script.get("/api/v1/me").status_code == 401


def test_disabled_account_loses_its_sessions(app: FastAPI, signed_in: dict[str, TestClient]) -> None:
    admin = signed_in["admin"]
    users = {user["username"]: user for user in admin.get("/api/v1/users").json()}
    tom = users["tom"]
    etag = f'"user-{tom["id"]}-v{tom["version"]}"'
    response = admin.patch(f"/api/v1/users/{tom['id']}", json={"is_active": False}, headers={"If-Match": etag})
    assert response.status_code == 200
    assert signed_in["technician"].get("/api/v1/me").status_code == 401


def test_only_admins_manage_users(signed_in: dict[str, TestClient]) -> None:
    body = {"username": "newbie", "role": "viewer", "password": "a long enough secret"}
    assert signed_in["reviewer"].post("/api/v1/users", json=body).status_code == 403
    assert signed_in["admin"].post("/api/v1/users", json=body).status_code == 201
    common = {"username": "newbie2", "role": "viewer", "password": "password123"}
    assert signed_in["admin"].post("/api/v1/users", json=common).status_code == 422
