"""50 reviewers' approvals of one task at the same moment (threads, one session each, against the service):
exactly one signature and one approval are recorded, the other 49 get 409 (RELIABILITY.md, lost update)."""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor

from sqlalchemy import func, select

from tests.conftest import PASSWORD, People
from tests.workflow.workflow_rows import digitized_sheet, task_for, user_named
from tracedesk.audit.service import verify_chain
from tracedesk.db import transaction
from tracedesk.errors import AppError
from tracedesk.models import AuditEvent, Signature
from tracedesk.web.state import AppState
from tracedesk.workflow.access import find_task
from tracedesk.workflow.signatures import sign_task
from tracedesk.workflow.tasks import take_action

ATTEMPTS = 50


def _submitted_task(state: AppState, people: People) -> int:
    with transaction(state.writer) as session:
        technician = user_named(session, people.technician)
        task = task_for(session, digitized_sheet(session, technician=technician), technician=technician, reviewer=None)
        take_action(session, task, "start", user=technician)
        take_action(session, task, "submit", user=technician)
        return task.id


def test_fifty_parallel_approvals_give_exactly_one_success(state: AppState, people: People) -> None:
    task_id = _submitted_task(state, people)
    start = threading.Barrier(ATTEMPTS)
    signers = [people.reviewer, people.admin]

    def approve(index: int) -> str:
        start.wait()
        try:
            with transaction(state.writer) as session:
                user = user_named(session, signers[index % 2])
                task = find_task(session, task_id, user, lock=True)
                sign_task(session, task, signer=user, password=PASSWORD, meaning="approved", hasher=state.hasher)
        except AppError as error:
            return str(error.status_code)
        return "ok"

    with ThreadPoolExecutor(max_workers=ATTEMPTS) as pool:
        outcomes = list(pool.map(approve, range(ATTEMPTS)))
    assert outcomes.count("ok") == 1
    assert outcomes.count("409") == ATTEMPTS - 1
    with transaction(state.reader) as session:
        assert session.scalar(select(func.count()).select_from(Signature)) == 1
        approvals = select(func.count()).select_from(AuditEvent).where(AuditEvent.action == "approve")
        assert session.scalar(approvals) == 1
        assert verify_chain(session).ok
