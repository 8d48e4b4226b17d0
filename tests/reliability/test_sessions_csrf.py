"""Browser sessions, CSRF and sign-in as an attacker would probe them (OWASP Session Management and CSRF
Prevention cheat sheets; OWASP ASVS 5.0 V7; RELIABILITY.md, "Authentication and authorization").

Time is frozen and moved by hand (the accounts service's clock), so idle and absolute timeouts are tested
without waiting for them.
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta
from http.cookies import SimpleCookie
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import select

from tests.conftest import PASSWORD
from tests.reliability.campaign import Campaign, audit_head, row_counts, stored_files
from tests.reliability.conftest import Figures
from tests.reliability.routes import SAFE, app_routes, concrete_url
from tests.reliability.world import World
from tracedesk.accounts import service as accounts_service
from tracedesk.app import build_state, create_app
from tracedesk.db import transaction
from tracedesk.models import ApiToken, AuditEvent, Base, WebSession
from tracedesk.models.base import utcnow
from tracedesk.web.deps import SESSION_COOKIE

# Sign-in routes work without a session, so they have no session CSRF token (the form has its own).
LOGIN_ROUTES = {("POST", "/api/v1/session"), ("POST", "/login")}
# Columns a read may legitimately touch: when a session or token was last used.
VOLATILE_COLUMNS = {"last_seen_at", "last_used_at"}
AUDIT_TABLES = {"audit_events", "audit_chain_head"}


class FrozenClock:
    """The accounts service's ``utcnow``, standing still until moved."""

    def __init__(self) -> None:
        self.now = utcnow()

    def __call__(self) -> datetime:
        return self.now

    def advance(self, seconds: float) -> None:
        self.now += timedelta(seconds=seconds)


@pytest.fixture
def clock(monkeypatch: pytest.MonkeyPatch) -> FrozenClock:
    frozen = FrozenClock()
    monkeypatch.setattr(accounts_service, "utcnow", frozen)
    return frozen


def _sign_in(campaign: Campaign, role: str, client: TestClient | None = None) -> TestClient:
    client = client or TestClient(campaign.app)
    response = client.post("/api/v1/session", json={"username": campaign.members[role].username, "password": PASSWORD})
    assert response.status_code == 200, response.text
    client.headers["X-CSRF-Token"] = response.json()["csrf_token"]
    campaign._clients.append(client)
    return client


def _session_cookie(client: TestClient) -> str:
    """The session id the server set last (read from the jar's entries, whatever their domain)."""
    values = [cookie.value for cookie in client.cookies.jar if cookie.name == SESSION_COOKIE and cookie.domain]
    return str(values[-1]) if values else ""


def _replay(campaign: Campaign, cookie: str) -> int:
    with TestClient(campaign.app) as replay:
        replay.cookies.set(SESSION_COOKIE, cookie)
        return replay.get("/api/v1/me").status_code


def test_session_id_is_new_at_each_login_and_a_planted_id_is_never_adopted(
    campaign: Campaign, figures: Figures
) -> None:
    client = TestClient(campaign.app)
    client.cookies.set(SESSION_COOKIE, "attacker-chosen-session-id")
    first = _session_cookie(_sign_in(campaign, "technician", client))
    first_csrf = client.headers["X-CSRF-Token"]
    second = _session_cookie(_sign_in(campaign, "technician", client))
    outcomes = {
        "planted id replaced": first != "attacker-chosen-session-id",
        "planted id refused": _replay(campaign, "attacker-chosen-session-id") == 401,
        "new id at second login": bool(first and second and first != second),
        "new CSRF token at second login": client.headers["X-CSRF-Token"] != first_csrf,
        "id has >= 128 bits": len(second or "") >= 22,  # URL-safe base64: 6 bits per character
    }
    figures.add(cases=len(outcomes), failures=sum(not ok for ok in outcomes.values()))
    assert all(outcomes.values()), outcomes


@pytest.mark.parametrize("how", ["api", "form"])
def test_session_is_refused_after_logout(campaign: Campaign, figures: Figures, how: str) -> None:
    client = _sign_in(campaign, "viewer")
    cookie = _session_cookie(client)
    if how == "api":
        answer = client.delete("/api/v1/session")
    else:
        answer = client.post("/logout", data={"csrf_token": client.headers["X-CSRF-Token"]}, follow_redirects=False)
    cleared = "max-age=0" in answer.headers.get("set-cookie", "").lower()
    replayed = _replay(campaign, cookie)
    figures.add(cases=3, failures=int(answer.status_code not in {204, 303}) + int(not cleared) + int(replayed != 401))
    assert answer.status_code in {204, 303} and cleared
    assert replayed == 401


def test_idle_session_is_refused(campaign: Campaign, figures: Figures, clock: FrozenClock) -> None:
    client = _sign_in(campaign, "viewer")
    idle = campaign.settings.session_idle_timeout
    clock.advance(idle - 5)
    just_in_time = client.get("/api/v1/me").status_code
    clock.advance(idle + 1)
    too_late = client.get("/api/v1/me").status_code
    figures.add(cases=2, failures=int(just_in_time != 200) + int(too_late != 401))
    assert (just_in_time, too_late) == (200, 401)


def test_busy_session_still_ends_at_the_absolute_timeout(
    campaign: Campaign, figures: Figures, clock: FrozenClock
) -> None:
    client = _sign_in(campaign, "viewer")
    step = campaign.settings.session_idle_timeout - 120  # never idle long enough to expire that way
    absolute = campaign.settings.session_absolute_timeout
    statuses = []
    elapsed = 0
    while elapsed <= absolute + step:
        clock.advance(step)
        elapsed += step
        statuses.append((elapsed, client.get("/api/v1/me").status_code))
    wrong = [(t, s) for t, s in statuses if s != (200 if t < absolute - 5 else 401)]
    figures.add(cases=len(statuses), failures=len(wrong))
    assert not wrong, wrong


def _cookie_attributes(header: str) -> dict[str, str]:
    parsed = SimpleCookie()
    parsed.load(header)
    morsel = parsed[SESSION_COOKIE]
    lowered = header.lower()
    return {
        "httponly": str("httponly" in lowered),
        "secure": str("secure" in lowered),
        "samesite": str(morsel["samesite"]).lower(),
        "path": str(morsel["path"]),
        "max-age": str(morsel["max-age"]),
    }


def test_session_cookie_flags_over_http_and_https(campaign: Campaign, figures: Figures) -> None:
    body = {"username": campaign.members["viewer"].username, "password": PASSWORD}
    with TestClient(campaign.app) as plain:
        over_http = _cookie_attributes(plain.post("/api/v1/session", json=body).headers["set-cookie"])
    https_settings = campaign.settings.model_copy(update={"base_url": "https://tracedesk.example"})
    https_state = build_state(https_settings, migrate=False)
    try:
        with TestClient(create_app(https_settings, state=https_state), base_url="https://testserver") as secure:
            over_https = _cookie_attributes(secure.post("/api/v1/session", json=body).headers["set-cookie"])
    finally:
        https_state.engine.dispose()
    common = {"httponly": "True", "samesite": "lax", "path": "/"}
    common["max-age"] = str(campaign.settings.session_absolute_timeout)
    expected_http, expected_https = {**common, "secure": "False"}, {**common, "secure": "True"}
    failures = sum(over_http[k] != v for k, v in expected_http.items())
    failures += sum(over_https[k] != v for k, v in expected_https.items())
    figures.add(cases=len(expected_http) * 2, failures=failures)
    assert over_http == expected_http
    assert over_https == expected_https


def test_credentials_are_stored_only_as_hashes(campaign: Campaign, figures: Figures) -> None:
    client = _sign_in(campaign, "viewer")
    cookie = _session_cookie(client)
    token = campaign.members["viewer"].token
    with transaction(campaign.state.reader) as session:
        sessions = list(session.scalars(select(WebSession.token_hash)))
        tokens = list(session.scalars(select(ApiToken.token_hash)))
    digest = hashlib.sha256  # the stored form: SHA-256 of a 256-bit random value (tracedesk/accounts/service.py)
    outcomes = {
        "cookie hashed": digest(cookie.encode()).hexdigest() in sessions and cookie not in sessions,
        "token hashed": digest(token.encode()).hexdigest() in tokens and token not in tokens,
    }
    figures.add(cases=2, failures=sum(not ok for ok in outcomes.values()))
    assert all(outcomes.values()), outcomes


def test_role_change_and_disabling_end_sessions_and_tokens(campaign: Campaign, figures: Figures) -> None:
    admin = campaign.client("admin")
    created = admin.post(
        "/api/v1/users", json={"username": "short-lived", "role": "technician", "password": "a long enough secret"}
    )
    assert created.status_code == 201, created.text
    user = created.json()
    outcomes = {}
    for change in ({"role": "viewer"}, {"is_active": False}):
        browser = TestClient(campaign.app)
        login = browser.post("/api/v1/session", json={"username": "short-lived", "password": "a long enough secret"})
        token = browser.post(
            "/api/v1/tokens", json={"name": "t"}, headers={"X-CSRF-Token": login.json()["csrf_token"]}
        ).json()["token"]
        etag = f'"user-{user["id"]}-v{user["version"]}"'
        changed = admin.patch(f"/api/v1/users/{user['id']}", json=change, headers={"If-Match": etag})
        user = changed.json()
        with TestClient(campaign.app) as script:
            script.headers["Authorization"] = f"Bearer {token}"
            outcomes[f"{change}: session"] = browser.get("/api/v1/me").status_code
            outcomes[f"{change}: token"] = script.get("/api/v1/me").status_code
        browser.close()
    figures.add(cases=len(outcomes), failures=sum(status != 401 for status in outcomes.values()))
    assert set(outcomes.values()) == {401}, outcomes


def _unsafe_requests(campaign: Campaign, world: World) -> list[tuple[str, str, str]]:
    routes = [r for r in app_routes(campaign.app) if r.method not in SAFE | {"MOUNT"} and r.key not in LOGIN_ROUTES]
    return [(route.method, route.path, concrete_url(route, world.values)) for route in routes]


def _snapshot(campaign: Campaign) -> tuple[dict[str, int], int]:
    return row_counts(campaign.state), audit_head(campaign.state)


@pytest.mark.parametrize("token", ["missing", "foreign", "form field of another session"])
def test_every_unsafe_route_refuses_a_missing_or_foreign_csrf_token(
    campaign: Campaign, world: World, figures: Figures, token: str
) -> None:
    """Signed in by cookie as an admin (who may do anything), without this session's CSRF token: 403, no change."""
    client = _sign_in(campaign, "admin")
    foreign = _sign_in(campaign, "admin").headers["X-CSRF-Token"]  # valid, but another session's
    client.headers.pop("X-CSRF-Token")
    if token == "foreign":
        client.headers["X-CSRF-Token"] = foreign
    before = _snapshot(campaign)
    problems = []
    requests = _unsafe_requests(campaign, world)
    for method, path, url in requests:
        if token == "form field of another session":
            status = client.request(method, url, data={"csrf_token": foreign}, headers={"Accept": "application/json"})
        else:
            status = client.request(method, url, json={}, headers={"Accept": "application/json"})
        if status.status_code != 403:
            problems.append(f"{method} {path}: {status.status_code}")
    after = _snapshot(campaign)
    if after != before:
        problems.append(f"state changed: audit head {before[1]} -> {after[1]}")
    figures.add(cases=len(requests), failures=len(problems))
    assert not problems, "\n".join(problems)


def test_the_right_csrf_token_is_accepted_from_header_and_form(campaign: Campaign, figures: Figures) -> None:
    client = _sign_in(campaign, "technician")
    by_header = client.post("/api/v1/collections", json={"name": "CSRF header box"}).status_code
    form_token = client.headers.pop("X-CSRF-Token")
    by_form = client.post(
        "/collections", data={"name": "CSRF form box", "csrf_token": form_token}, follow_redirects=False
    ).status_code
    figures.add(cases=2, failures=int(by_header != 201) + int(by_form != 303))
    assert (by_header, by_form) == (201, 303)


def _table_digest(campaign: Campaign) -> dict[str, str]:
    """A hash of every table's content, leaving out when sessions and tokens were last used."""
    digests = {}
    with campaign.state.engine.connect() as connection:
        for table in Base.metadata.sorted_tables:
            columns = [column for column in table.columns if column.name not in VOLATILE_COLUMNS]
            rows = connection.execute(select(*columns).order_by(*table.primary_key.columns)).all()
            digests[table.name] = hashlib.sha256(repr([tuple(row) for row in rows]).encode()).hexdigest()
    return digests


def _new_audit_actions(campaign: Campaign, after_seq: int) -> list[str]:
    with transaction(campaign.state.reader) as session:
        return list(session.scalars(select(AuditEvent.action).where(AuditEvent.seq > after_seq)))


def test_no_get_request_changes_anything(campaign: Campaign, world: World, figures: Figures) -> None:
    """Every GET route, by cookie and by token, as an admin and anonymously: tables and files unchanged.

    The one thing a GET may add is an "export" audit event: downloads are recorded (who exported what), which
    is an access log entry, not a change of any record.
    """
    callers: dict[str, TestClient] = {
        "cookie": _sign_in(campaign, "admin"),
        "token": campaign.client("admin", raise_errors=False),
        "anonymous": campaign.client(None, raise_errors=False),
    }
    routes = [route for route in app_routes(campaign.app) if route.method == "GET"]
    head_before = audit_head(campaign.state)
    before = (_table_digest(campaign), stored_files(campaign.state))
    server_errors = []
    for route in routes:
        url = concrete_url(route, world.values)
        for name, client in callers.items():
            for method in ("GET", "HEAD"):
                status = client.request(method, url, headers={"Accept": "application/json"}).status_code
                if status >= 500:
                    server_errors.append(f"{name} {method} {url}: {status}")
    after = (_table_digest(campaign), stored_files(campaign.state))
    changed = [table for table, digest in after[0].items() if before[0][table] != digest and table not in AUDIT_TABLES]
    not_exports = [action for action in _new_audit_actions(campaign, head_before) if action != "export"]
    failures = len(changed) + len(not_exports) + int(after[1] != before[1]) + len(server_errors)
    figures.add(cases=len(routes) * len(callers) * 2, failures=failures)
    assert not changed, f"GET requests changed tables {changed}"
    assert not not_exports, f"GET requests wrote audit events {not_exports}"
    assert after[1] == before[1], "GET requests changed stored files"
    assert not server_errors, server_errors


def _login(client: TestClient, username: str, password: str) -> tuple[int, Any]:
    response = client.post("/api/v1/session", json={"username": username, "password": password})
    return response.status_code, response.json()


def test_login_is_throttled_per_account(campaign: Campaign, figures: Figures) -> None:
    admin = campaign.client("admin")
    body = {"username": "throttled-one", "role": "viewer", "password": "a long enough secret"}
    assert admin.post("/api/v1/users", json=body).status_code == 201
    limit = campaign.settings.login_max_failures_per_account
    with TestClient(campaign.app, client=("198.51.100.7", 40000)) as client:
        failures = [_login(client, "throttled-one", f"wrong guess {n}")[0] for n in range(limit)]
        right_password = _login(client, "throttled-one", "a long enough secret")[0]
    figures.add(cases=limit + 1, failures=sum(s != 401 for s in failures) + int(right_password != 429))
    assert failures == [401] * limit
    assert right_password == 429


def test_login_is_throttled_per_address(campaign: Campaign, figures: Figures) -> None:
    """Guessing across many accounts from one address stops at the per-address limit (default settings)."""
    settings = campaign.settings.model_copy(update={"login_max_failures_per_address": 20})
    state = build_state(settings, migrate=False)
    try:
        with TestClient(create_app(settings, state=state), client=("198.51.100.8", 40000)) as client:
            guesses = [_login(client, f"nobody-{n}", "a guess at random")[0] for n in range(20)]
            real = _login(client, campaign.members["viewer"].username, PASSWORD)[0]
        with TestClient(create_app(settings, state=state), client=("198.51.100.9", 40000)) as elsewhere:
            other_address = _login(elsewhere, campaign.members["viewer"].username, PASSWORD)[0]
    finally:
        state.engine.dispose()
    figures.add(cases=22, failures=sum(s != 401 for s in guesses) + int(real != 429) + int(other_address != 200))
    assert guesses == [401] * 20
    assert (real, other_address) == (429, 200)


def test_unknown_known_and_disabled_accounts_get_the_same_answer(campaign: Campaign, figures: Figures) -> None:
    admin = campaign.client("admin")
    created = admin.post(
        "/api/v1/users", json={"username": "gone-away", "role": "viewer", "password": "a long enough secret"}
    ).json()
    admin.patch(
        f"/api/v1/users/{created['id']}",
        json={"is_active": False},
        headers={"If-Match": f'"user-{created["id"]}-v{created["version"]}"'},
    )
    with TestClient(campaign.app, client=("198.51.100.10", 40000)) as client:
        answers = {
            "known, wrong password": _login(client, campaign.members["viewer"].username, "not the password"),
            "unknown user": _login(client, "no-such-person", "not the password"),
            "disabled, right password": _login(client, "gone-away", "a long enough secret"),
        }
        pages = {}
        for label, name, password in (
            ("known", campaign.members["viewer"].username, "nope nope"),
            ("unknown", "no-such-person-2", "nope nope"),
        ):
            form = client.get("/login")
            csrf = form.text.split('name="login_csrf" value="', 1)[1].split('"', 1)[0]
            page = client.post("/login", data={"username": name, "password": password, "login_csrf": csrf})
            pages[label] = (page.status_code, page.text.replace(csrf, ""))
    distinct = {repr(answer) for answer in answers.values()}
    same_pages = pages["known"][0] == pages["unknown"][0] == 401 and _page_message(pages["known"][1]) == (
        _page_message(pages["unknown"][1])
    )
    figures.add(cases=len(answers) + 2, failures=len(distinct) - 1 + int(not same_pages))
    assert len(distinct) == 1, answers
    assert same_pages


def _page_message(html: str) -> str:
    return html.split("Wrong user name", 1)[1][:80] if "Wrong user name" in html else html[-200:]
