"""Authorization over every route: the role x route matrix (authorization_matrix.py), object-level checks with
other people's ids (IDOR), and fields that no request body may set (OWASP ASVS 5.0 V8, "deny by default";
RELIABILITY.md, "Authentication and authorization")."""

from __future__ import annotations

from typing import Any

from fastapi.testclient import TestClient

from tests.reliability.authorization_matrix import MATRIX, PUBLIC, SIGNED_IN, Rule
from tests.reliability.campaign import Campaign
from tests.reliability.conftest import Figures
from tests.reliability.records import CALIBRATION, Records
from tests.reliability.routes import SAFE, RouteInfo, app_routes, concrete_url
from tests.reliability.world import MISSING_ID, World
from tracedesk.accounts.permissions import role_allows
from tracedesk.db import transaction
from tracedesk.models import Calibration, Fit, Sheet

CALLERS: tuple[str | None, ...] = (None, "admin", "reviewer", "technician", "viewer")
JSON = {"Accept": "application/json"}
PROTECTED_FIELDS = (
    "id",
    "status",
    "state",
    "version",
    "author",
    "author_id",
    "approver",
    "approver_id",
    "approved_by_id",
    "created_by_id",
    "updated_by_id",
    "signer_id",
    "signed_by_id",
    "sha256",
)
# Request schemas that accept unknown fields, and why that is safe (checked below: nothing lands on the record).
EXTRA_ALLOWED = {
    "CalibrationIn": "the science core validates the calibration description; the row's fields are set by the server",
    "FitRequest": "fit options are passed to the fitting code, which refuses unknown ones; reserved names are refused",
    "Body_suggest_fit_api_v1_traces__trace_id__fits_suggest_post": "read-only ranking of fits; reads `period` only",
}
# Query parameters a read route requires besides its path ids (so a missing id, not a missing query, is probed).
REQUIRED_QUERY = {
    "/api/v1/sheets/{sheet_id}/colour": {"u": 10, "v": 10},
    "/api/v1/traces/{trace_id}/resampled.csv": {"step": 1},
}
# Protected names a request schema may legitimately declare, with the reason.
DECLARED_OK: dict[tuple[str, str], str] = {}


def _url(route: RouteInfo, world: World) -> str:
    if route.method == "MOUNT":
        return route.path + "/favicon.svg"
    return concrete_url(route, world.values)


def _call(client: TestClient, route: RouteInfo, url: str) -> int:
    method = "GET" if route.method == "MOUNT" else route.method
    body = None if method in SAFE else {}
    return client.request(method, url, json=body, headers=JSON, follow_redirects=False).status_code


def _verdict(rule: Rule, caller: str | None, status: int) -> str | None:
    """None when the answer fits the matrix, else what is wrong."""
    if status >= 500:
        return f"server error {status}"
    if rule.access == PUBLIC:
        return "a public route asked for credentials" if status == 401 else None
    if caller is None:
        return None if status == 401 else f"anonymous got {status}, expected 401"
    allowed = rule.access == SIGNED_IN or role_allows(caller, rule.access)  # type: ignore[arg-type]
    if allowed:
        return f"{caller} was refused ({status})" if status in {401, 403} else None
    return None if status == 403 else f"{caller} got {status}, expected 403"


def test_every_route_has_a_matrix_entry_and_every_entry_a_route(campaign: Campaign, figures: Figures) -> None:
    served = {route.key for route in app_routes(campaign.app)}
    unlisted = sorted(served - set(MATRIX))
    stale = sorted(set(MATRIX) - served)
    figures.add(cases=len(served | set(MATRIX)), failures=len(unlisted) + len(stale))
    assert not unlisted, f"routes without an authorization entry (add them to authorization_matrix.py): {unlisted}"
    assert not stale, f"matrix entries for routes that no longer exist: {stale}"


def test_every_route_answers_every_role_as_the_matrix_says(campaign: Campaign, world: World, figures: Figures) -> None:
    clients = {caller: campaign.client(caller, raise_errors=False) for caller in CALLERS}
    problems = []
    cases = 0
    for route in app_routes(campaign.app):
        rule = MATRIX.get(route.key)
        if rule is None:
            continue  # reported by the test above
        url = _url(route, world)
        for caller in CALLERS:
            cases += 1
            problem = _verdict(rule, caller, _call(clients[caller], route, url))
            if problem:
                problems.append(f"{route.method} {url}: {problem}")
    figures.add(cases=cases, failures=len(problems))
    assert not problems, "\n".join(problems)


def test_tokens_of_other_people_cannot_be_revoked(campaign: Campaign, figures: Figures) -> None:
    owner, other = campaign.client("technician"), campaign.client("technician2")
    token = owner.post("/api/v1/tokens", json={"name": "idor target"}).json()
    with TestClient(campaign.app) as script:
        script.headers["Authorization"] = f"Bearer {token['token']}"
        outcomes = {
            "other revokes": other.delete(f"/api/v1/tokens/{token['id']}").status_code,
            "token still works": script.get("/api/v1/me").status_code,
            "other lists it": int(any(item["id"] == token["id"] for item in other.get("/api/v1/tokens").json())),
            "owner revokes": owner.delete(f"/api/v1/tokens/{token['id']}").status_code,
            "token refused": script.get("/api/v1/me").status_code,
        }
    expected = {"other revokes": 404, "token still works": 200, "other lists it": 0, "owner revokes": 204}
    expected["token refused"] = 401
    figures.add(cases=len(expected), failures=sum(outcomes[k] != v for k, v in expected.items()))
    assert outcomes == expected


def test_jobs_are_seen_by_their_owner_and_admins_only(campaign: Campaign, world: World, figures: Figures) -> None:
    expected = {"technician": 200, "admin": 200, "technician2": 404, "reviewer": 404, "viewer": 404}
    seen = {role: campaign.client(role).get(f"/api/v1/jobs/{world.job_id}").status_code for role in expected}
    listed = {
        role: any(job["id"] == world.job_id for job in campaign.client(role).get("/api/v1/jobs").json())
        for role in expected
    }
    expected_listed = {role: status == 200 for role, status in expected.items()}
    failures = sum(seen[r] != s for r, s in expected.items()) + sum(listed[r] != v for r, v in expected_listed.items())
    figures.add(cases=2 * len(expected), failures=failures)
    assert seen == expected
    assert listed == expected_listed


TASK_READS = (
    "/api/v1/tasks/{task_id}",
    "/api/v1/tasks/{task_id}/comments",
    "/api/v1/tasks/{task_id}/signatures",
    "/api/v1/tasks/{task_id}/changes",
    "/api/v1/sheets/{sheet_id}/task",
)


def test_tasks_are_seen_by_their_assignees_reviewers_and_admins_only(
    campaign: Campaign, world: World, figures: Figures
) -> None:
    expected = {"technician": 200, "reviewer": 200, "admin": 200, "technician2": 404, "viewer": 404}
    problems = []
    for template in TASK_READS:
        url = template.format(task_id=world.task_id, sheet_id=world.records.sheet_id)
        for role, status in expected.items():
            got = campaign.client(role).get(url).status_code
            if got != status:
                problems.append(f"{role} GET {url}: {got}, expected {status}")
    for role in ("technician2", "viewer"):
        acted = campaign.client(role).post(f"/api/v1/tasks/{world.task_id}/actions/start", json={}).status_code
        listed = any(task["id"] == world.task_id for task in campaign.client(role).get("/api/v1/tasks").json())
        if acted != 404 or listed:
            problems.append(f"{role} could act on ({acted}) or list ({listed}) another person's task")
    figures.add(cases=len(TASK_READS) * len(expected) + 4, failures=len(problems))
    assert not problems, "\n".join(problems)


def test_missing_ids_get_404_on_every_read_route(campaign: Campaign, world: World, figures: Figures) -> None:
    admin = campaign.client("admin", raise_errors=False)
    problems, cases = [], 0
    id_params = {"collection_id", "sheet_id", "trace_id", "fit_id", "user_id", "job_id", "task_id", "comment_id"}
    id_params |= {"spec_id", "run_id"}
    for route in app_routes(campaign.app):
        chosen = set(route.params) & id_params
        if route.method != "GET" or not chosen:
            continue
        values = {**world.values, **dict.fromkeys(chosen, MISSING_ID)}
        url = concrete_url(route, values)
        cases += 1
        status = admin.get(url, params=REQUIRED_QUERY.get(route.path), headers=JSON).status_code
        if status != 404:
            problems.append(f"GET {url}: {status}, expected 404")
    figures.add(cases=cases, failures=len(problems))
    assert not problems, "\n".join(problems)


def _request_schemas(campaign: Campaign) -> list[tuple[str, str, str, dict[str, Any]]]:
    """(method, path, schema name, schema) of every JSON request body in the OpenAPI document."""
    document = campaign.client("admin").get("/api/v1/openapi.json").json()
    components = document["components"]["schemas"]
    found = []
    for path, operations in document["paths"].items():
        for method, operation in operations.items():
            content = (operation.get("requestBody") or {}).get("content", {})
            schema = content.get("application/json", {}).get("schema")
            if schema and "$ref" in schema:
                name = schema["$ref"].rsplit("/", 1)[-1]
                found.append((method.upper(), path, name, components[name]))
    return found


def test_request_schemas_refuse_unknown_fields_and_declare_no_protected_field(
    campaign: Campaign, figures: Figures
) -> None:
    problems = []
    schemas = _request_schemas(campaign)
    for method, path, name, schema in schemas:
        if schema.get("additionalProperties") is not False and name not in EXTRA_ALLOWED:
            problems.append(f"{method} {path}: {name} accepts unknown fields (set extra='forbid')")
        declared = set(schema.get("properties", {})) & set(PROTECTED_FIELDS)
        problems += [f"{name} declares {field!r}" for field in sorted(declared) if (name, field) not in DECLARED_OK]
    figures.add(cases=len(schemas), failures=len(problems))
    assert not problems, "\n".join(problems)


def _role_for(rule: Rule) -> str:
    for role in ("technician", "reviewer", "admin"):
        if rule.access in {PUBLIC, SIGNED_IN} or role_allows(role, rule.access):  # type: ignore[arg-type]
            return role
    return "admin"


def test_protected_fields_in_bodies_are_refused_by_name(campaign: Campaign, world: World, figures: Figures) -> None:
    """Each JSON body with status/author/approver/version... added is refused (422) naming each such field."""
    problems, cases = [], 0
    injected = dict.fromkeys(PROTECTED_FIELDS, 1)
    for method, path, name, _schema in _request_schemas(campaign):
        if name in EXTRA_ALLOWED:
            continue
        route = RouteInfo(method, path, name)
        client = campaign.client(_role_for(MATRIX[route.key]), raise_errors=False)
        url = concrete_url(route, world.values)
        response = client.request(method, url, json=injected, headers={"If-Match": "*"})
        cases += 1
        errors = response.json().get("detail") if response.status_code == 422 else None
        named = (
            {e["loc"][-1] for e in errors if isinstance(e, dict) and e.get("type") == "extra_forbidden"}
            if (isinstance(errors, list))
            else set()
        )
        if response.status_code != 422 or named != set(PROTECTED_FIELDS):
            problems.append(f"{method} {url}: {response.status_code}, refused fields {sorted(named)}")
    figures.add(cases=cases, failures=len(problems))
    assert not problems, "\n".join(problems)


def _row_snapshot(campaign: Campaign, records: Records) -> dict[str, object]:
    with transaction(campaign.state.reader) as session:
        sheet = session.get(Sheet, records.sheet_id)
        calibration = session.query(Calibration).filter_by(sheet_id=records.sheet_id).one()
        assert sheet is not None
        return {
            "sheet": (sheet.status, sheet.created_by_id, sheet.version),
            "calibration by": calibration.updated_by_id,
            "calibration version": calibration.version,
        }


def test_extra_fields_in_open_bodies_never_reach_the_record(campaign: Campaign, world: World, figures: Figures) -> None:
    """Calibration and fit requests accept unknown keys; status/author/version sent there change nothing."""
    technician = campaign.client("technician")
    records, tech_id = world.records, campaign.members["technician"].user_id
    before = _row_snapshot(campaign, records)
    hostile = {"status": "approved", "created_by_id": 1, "updated_by_id": 1, "version": 99, "approved_by_id": 1}
    url = f"/api/v1/sheets/{records.sheet_id}/calibration"
    etag = technician.get(url).headers["etag"]
    calibrated = technician.put(url, json={**CALIBRATION, **hostile, "reason": "probe"}, headers={"If-Match": etag})
    after = _row_snapshot(campaign, records)
    fit = technician.post(
        f"/api/v1/traces/{records.trace_id}/fits", json={"family": "polynomial", "degree": 1, **hostile}
    )
    problems = []
    if calibrated.status_code == 200:
        if after["sheet"] != before["sheet"] or after["calibration by"] != tech_id:
            problems.append(f"calibration body changed the record: {before} -> {after}")
        if after["calibration version"] != int(str(before["calibration version"])) + 1:
            problems.append("the calibration version was not the server's")
    elif calibrated.status_code != 422:
        problems.append(f"calibration with extra fields: {calibrated.status_code}")
    if fit.status_code == 201:
        with transaction(campaign.state.reader) as session:
            row = session.get(Fit, fit.json()["id"])
            assert row is not None
            if (row.created_by_id, row.version) != (tech_id, 1):
                problems.append("fit body set the author or version")
    elif fit.status_code != 422:
        problems.append(f"fit with extra fields: {fit.status_code} {fit.text[:200]}")
    figures.add(cases=2, failures=len(problems))
    assert not problems, problems
