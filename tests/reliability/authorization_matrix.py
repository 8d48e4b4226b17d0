"""Who may call what: one entry per route the app serves, kept as data (RELIABILITY.md, "A role x endpoint
matrix, kept as data, drives an authorization test over every route").

``access`` is PUBLIC (no credentials), SIGNED_IN (any active account) or the Permission a role must hold
(tracedesk/accounts/permissions.py says which roles hold which). ``owner`` names an object-level check on the
path's id on top of the role: tokens and jobs are their owner's (jobs: and admins'), tasks and their comments are
visible to their assignees and to reviewers and admins; anyone else gets 404, so ids reveal nothing.
A route missing here fails the authorization test: add it, deciding who may call it.
"""

from __future__ import annotations

from dataclasses import dataclass

from tracedesk.accounts.permissions import Permission

PUBLIC = "public"
SIGNED_IN = "signed in"
P = Permission


@dataclass(frozen=True)
class Rule:
    access: Permission | str
    owner: str | None = None
    note: str = ""


MATRIX: dict[tuple[str, str], Rule] = {
    # service, documentation, static files, sign-in
    ("GET", "/api/v1/health"): Rule(PUBLIC),
    ("GET", "/api/v1/ready"): Rule(PUBLIC),
    ("GET", "/api/v1/openapi.json"): Rule(PUBLIC),
    ("GET", "/docs"): Rule(PUBLIC),
    ("GET", "/docs/oauth2-redirect"): Rule(PUBLIC),
    ("GET", "/favicon.ico"): Rule(PUBLIC),
    ("MOUNT", "/static"): Rule(PUBLIC),
    ("GET", "/login"): Rule(PUBLIC),
    ("POST", "/login"): Rule(PUBLIC, note="guarded by its own login-form token instead"),
    ("POST", "/api/v1/session"): Rule(PUBLIC),
    ("DELETE", "/api/v1/session"): Rule(SIGNED_IN),
    ("POST", "/logout"): Rule(SIGNED_IN),
    ("GET", "/api/v1/me"): Rule(SIGNED_IN),
    # accounts
    ("GET", "/api/v1/users"): Rule(P.MANAGE_USERS),
    ("POST", "/api/v1/users"): Rule(P.MANAGE_USERS),
    ("PATCH", "/api/v1/users/{user_id}"): Rule(P.MANAGE_USERS),
    ("GET", "/admin/users"): Rule(P.MANAGE_USERS),
    ("POST", "/admin/users"): Rule(P.MANAGE_USERS),
    ("POST", "/admin/users/{user_id}"): Rule(P.MANAGE_USERS),
    ("GET", "/api/v1/tokens"): Rule(SIGNED_IN, note="lists the caller's own tokens only"),
    ("POST", "/api/v1/tokens"): Rule(SIGNED_IN),
    ("DELETE", "/api/v1/tokens/{token_id}"): Rule(SIGNED_IN, owner="token"),
    # archive
    ("GET", "/"): Rule(P.READ),
    ("GET", "/collections"): Rule(P.READ),
    ("POST", "/collections"): Rule(P.EDIT_ARCHIVE),
    ("GET", "/collections/{collection_id}"): Rule(P.READ),
    ("GET", "/sheets/{sheet_id}"): Rule(P.READ),
    ("POST", "/sheets/{sheet_id}/metadata"): Rule(P.EDIT_ARCHIVE),
    ("GET", "/api/v1/collections"): Rule(P.READ),
    ("POST", "/api/v1/collections"): Rule(P.EDIT_ARCHIVE),
    ("GET", "/api/v1/collections/{collection_id}"): Rule(P.READ),
    ("PATCH", "/api/v1/collections/{collection_id}"): Rule(P.MANAGE_COLLECTIONS),
    ("POST", "/api/v1/collections/{collection_id}/sheets"): Rule(P.UPLOAD),
    ("GET", "/api/v1/sheets"): Rule(P.READ),
    ("GET", "/api/v1/sheets/{sheet_id}"): Rule(P.READ),
    ("PATCH", "/api/v1/sheets/{sheet_id}"): Rule(P.EDIT_ARCHIVE),
    ("GET", "/api/v1/sheets/{sheet_id}/original"): Rule(P.READ),
    ("GET", "/api/v1/sheets/{sheet_id}/thumbnail"): Rule(P.READ),
    ("GET", "/api/v1/sheets/{sheet_id}/tiles/{tile_path:path}"): Rule(P.READ),
    # audit
    ("GET", "/history/{entity_type}/{entity_id}"): Rule(P.READ),
    ("GET", "/admin/audit"): Rule(P.VERIFY_AUDIT),
    ("GET", "/api/v1/audit/history/{entity_type}/{entity_id}"): Rule(P.READ),
    ("GET", "/api/v1/audit/events"): Rule(P.VERIFY_AUDIT),
    ("GET", "/api/v1/audit/verify"): Rule(P.VERIFY_AUDIT),
    # digitizing
    ("GET", "/sheets/{sheet_id}/workbench"): Rule(P.READ),
    ("GET", "/api/v1/sheets/{sheet_id}/calibration"): Rule(P.READ),
    ("PUT", "/api/v1/sheets/{sheet_id}/calibration"): Rule(P.DIGITIZE),
    ("POST", "/api/v1/sheets/{sheet_id}/calibration/preview"): Rule(P.READ, note="computes, stores nothing"),
    ("POST", "/api/v1/sheets/{sheet_id}/calibration/map"): Rule(P.READ, note="computes, stores nothing"),
    ("GET", "/api/v1/sheets/{sheet_id}/calibration-templates"): Rule(P.READ),
    ("GET", "/api/v1/sheets/{sheet_id}/colour"): Rule(P.READ),
    ("POST", "/api/v1/geometry/circle"): Rule(P.READ, note="computes, stores nothing"),
    ("GET", "/api/v1/sheets/{sheet_id}/traces"): Rule(P.READ),
    ("POST", "/api/v1/sheets/{sheet_id}/traces"): Rule(P.DIGITIZE),
    ("POST", "/api/v1/sheets/{sheet_id}/traces/auto"): Rule(P.DIGITIZE),
    ("GET", "/api/v1/traces/{trace_id}"): Rule(P.READ),
    ("PATCH", "/api/v1/traces/{trace_id}"): Rule(P.DIGITIZE),
    ("DELETE", "/api/v1/traces/{trace_id}"): Rule(P.DIGITIZE),
    ("GET", "/api/v1/traces/{trace_id}/fits"): Rule(P.READ),
    ("POST", "/api/v1/traces/{trace_id}/fits"): Rule(P.DIGITIZE),
    ("POST", "/api/v1/traces/{trace_id}/fits/suggest"): Rule(P.READ, note="computes, stores nothing"),
    ("GET", "/api/v1/fits/{fit_id}"): Rule(P.READ),
    ("GET", "/api/v1/fits/{fit_id}/curve"): Rule(P.READ),
    ("GET", "/api/v1/traces/{trace_id}/resampled.csv"): Rule(P.READ),
    ("GET", "/api/v1/traces/{trace_id}/summary"): Rule(P.READ),
    ("POST", "/api/v1/sheets/{sheet_id}/calibration/detect"): Rule(P.DIGITIZE),
    ("GET", "/api/v1/chart-specs"): Rule(P.READ),
    ("POST", "/api/v1/chart-specs"): Rule(P.DIGITIZE),
    ("GET", "/api/v1/chart-specs/{spec_id}"): Rule(P.READ),
    ("PATCH", "/api/v1/chart-specs/{spec_id}"): Rule(P.DIGITIZE),
    ("POST", "/api/v1/collections/{collection_id}/batch-runs"): Rule(P.MANAGE_COLLECTIONS),
    ("GET", "/api/v1/collections/{collection_id}/batch-runs"): Rule(P.READ),
    ("GET", "/api/v1/batch-runs/{run_id}"): Rule(P.READ),
    ("POST", "/api/v1/batch-runs/{run_id}/resume"): Rule(P.MANAGE_COLLECTIONS),
    ("GET", "/batch-runs/{run_id}"): Rule(P.READ),
    ("POST", "/batch-runs/{run_id}/resume"): Rule(P.MANAGE_COLLECTIONS),
    ("GET", "/collections/{collection_id}/batch-runs"): Rule(P.READ),
    ("GET", "/collections/{collection_id}/chart-specs"): Rule(P.READ),
    # jobs
    ("GET", "/api/v1/jobs"): Rule(P.READ, note="lists the caller's own jobs (admins: all)"),
    ("GET", "/api/v1/jobs/{job_id}"): Rule(P.READ, owner="job"),
    # exports
    ("GET", "/api/v1/traces/{trace_id}/vertices.csv"): Rule(P.EXPORT),
    ("GET", "/api/v1/traces/{trace_id}/periods.csv"): Rule(P.EXPORT),
    ("GET", "/api/v1/fits/{fit_id}/equation.csv"): Rule(P.EXPORT),
    ("GET", "/api/v1/collections/{collection_id}/fits.csv"): Rule(P.EXPORT),
    ("GET", "/api/v1/collections/{collection_id}/bundle.zip"): Rule(P.EXPORT),
    ("POST", "/api/v1/collections/{collection_id}/bundles"): Rule(P.EXPORT),
    ("GET", "/api/v1/bundles/{job_id}/bundle.zip"): Rule(P.EXPORT, owner="job"),
    ("GET", "/collections/{collection_id}/bundle"): Rule(P.EXPORT),
    ("POST", "/collections/{collection_id}/bundle"): Rule(P.EXPORT),
    ("GET", "/bundles/{job_id}"): Rule(P.EXPORT, owner="job"),
    ("GET", "/api/v1/sheets/{sheet_id}/overlay.png"): Rule(P.EXPORT),
    ("GET", "/api/v1/audit/export.csv"): Rule(P.VERIFY_AUDIT),
    ("GET", "/admin/audit/log"): Rule(P.VERIFY_AUDIT),
    # workflow
    ("POST", "/api/v1/collections/{collection_id}/tasks"): Rule(P.MANAGE_TASKS),
    ("GET", "/api/v1/collections/{collection_id}/board"): Rule(P.READ),
    ("GET", "/api/v1/collections/{collection_id}/workflow"): Rule(P.READ),
    ("PUT", "/api/v1/collections/{collection_id}/workflow"): Rule(P.MANAGE_TASKS),
    ("GET", "/api/v1/tasks"): Rule(P.READ, note="lists the tasks the caller may see"),
    ("GET", "/api/v1/tasks/{task_id}"): Rule(P.READ, owner="task"),
    ("PATCH", "/api/v1/tasks/{task_id}"): Rule(P.MANAGE_TASKS, owner="task"),
    ("POST", "/api/v1/tasks/{task_id}/actions/{action}"): Rule(P.READ, owner="task", note="the state machine decides"),
    ("GET", "/api/v1/tasks/{task_id}/agreement"): Rule(P.READ, owner="task"),
    ("GET", "/api/v1/tasks/{task_id}/changes"): Rule(P.READ, owner="task"),
    ("GET", "/api/v1/tasks/{task_id}/comments"): Rule(P.READ, owner="task"),
    ("POST", "/api/v1/tasks/{task_id}/comments"): Rule(P.READ, owner="task"),
    ("POST", "/api/v1/tasks/{task_id}/keep"): Rule(P.REVIEW, owner="task"),
    ("GET", "/api/v1/tasks/{task_id}/signatures"): Rule(P.READ, owner="task"),
    ("POST", "/api/v1/tasks/{task_id}/signatures"): Rule(P.READ, owner="task", note="the signing rules decide"),
    ("PATCH", "/api/v1/comments/{comment_id}"): Rule(P.READ, owner="comment"),
    ("GET", "/api/v1/sheets/{sheet_id}/task"): Rule(P.READ, owner="task"),
    ("GET", "/api/v1/sheets/{sheet_id}/record"): Rule(P.READ),
    ("GET", "/api/v1/me/work"): Rule(P.READ),
    ("GET", "/api/v1/people/assignable"): Rule(P.MANAGE_TASKS),
    ("GET", "/api/v1/notices"): Rule(P.READ, note="the caller's own notices"),
    ("POST", "/api/v1/notices/read"): Rule(P.READ),
    ("POST", "/api/v1/notices/{notice_id}/read"): Rule(P.READ, owner="notice"),
    # workflow pages
    ("GET", "/work"): Rule(P.READ),
    ("POST", "/notices/read"): Rule(P.READ),
    ("GET", "/collections/{collection_id}/tasks"): Rule(P.READ),
    ("POST", "/collections/{collection_id}/tasks"): Rule(P.MANAGE_TASKS),
    ("POST", "/collections/{collection_id}/workflow"): Rule(P.MANAGE_TASKS),
    ("GET", "/tasks/{task_id}"): Rule(P.READ, owner="task"),
    ("GET", "/tasks/{task_id}/overlay.png"): Rule(P.READ, owner="task"),
    ("POST", "/tasks/{task_id}/action"): Rule(P.READ, owner="task", note="the state machine decides"),
    ("POST", "/tasks/{task_id}/sign"): Rule(P.READ, owner="task", note="the signing rules decide"),
    ("POST", "/tasks/{task_id}/comments"): Rule(P.READ, owner="task"),
    ("POST", "/tasks/{task_id}/comments/{comment_id}/resolve"): Rule(P.READ, owner="comment"),
    ("POST", "/tasks/{task_id}/assign"): Rule(P.MANAGE_TASKS, owner="task"),
    ("POST", "/tasks/{task_id}/keep"): Rule(P.READ, owner="task", note="the page checks the reviewer role itself"),
}
