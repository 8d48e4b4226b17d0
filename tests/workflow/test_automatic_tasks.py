"""Tasks of automatic digitization (issue 9): a batch run submits a task for review or flags it for a person, always
through the state machine (workflow/states.py). Rows are written straight into the database (workflow_rows.py)."""

from __future__ import annotations

import pytest
from sqlalchemy import delete

from tests.conftest import People
from tests.workflow.workflow_rows import digitized_sheet, task_for, user_named
from tracedesk.audit.service import Actor
from tracedesk.db import transaction
from tracedesk.errors import Conflict, Unprocessable
from tracedesk.models import Calibration, Sheet, Trace
from tracedesk.web.state import AppState
from tracedesk.workflow.tasks import flag_for_attention, submit_automatic, take_action

BATCH = Actor(id=None, name="batch run 7 (automatic)")


def test_submit_automatic_goes_through_start_and_submit(state: AppState, people: People) -> None:
    with transaction(state.writer) as session:
        tom = user_named(session, people.technician)
        sheet = digitized_sheet(session, technician=tom)
        task = task_for(session, sheet, technician=tom, reviewer=None)
        submit_automatic(session, task, actor=BATCH, reason="batch run 7, automatic")
        assert (task.state, task.technician_submitted, task.version) == ("submitted", True, 3)
        assert session.get(Sheet, sheet.id).status == "submitted"  # type: ignore[union-attr]
        with pytest.raises(Conflict, match="submitted cannot be started"):
            submit_automatic(session, task, actor=BATCH, reason="again")
        with pytest.raises(Conflict, match="only an open or returned task waits for a person"):
            flag_for_attention(session, task, actor=BATCH, reason="late")


def test_submit_automatic_refuses_double_digitization_and_empty_sheets(state: AppState, people: People) -> None:
    with transaction(state.writer) as session:
        tom = user_named(session, people.technician)
        sheet = digitized_sheet(session, technician=tom)
        task = task_for(session, sheet, technician=tom, reviewer=None)
        task.double_digitization = True
        with pytest.raises(Conflict, match="double digitization"):
            submit_automatic(session, task, actor=BATCH, reason="r")
        task.double_digitization = False
        session.execute(delete(Trace).where(Trace.sheet_id == sheet.id))
        session.execute(delete(Calibration).where(Calibration.sheet_id == sheet.id))
        with pytest.raises(Unprocessable, match="needs a calibration and traces"):
            submit_automatic(session, task, actor=BATCH, reason="r")
        assert task.state == "open"


def test_flag_records_the_reason_once_and_a_returned_task_can_be_flagged(state: AppState, people: People) -> None:
    with transaction(state.writer) as session:
        tom, rita = user_named(session, people.technician), user_named(session, people.reviewer)
        task = task_for(session, digitized_sheet(session, technician=tom), technician=tom, reviewer=rita)
        flag_for_attention(session, task, actor=BATCH, reason="pen blue: coverage 0.41 is below 0.9")
        flag_for_attention(session, task, actor=BATCH, reason="pen blue: coverage 0.41 is below 0.9")
        assert (task.reason, task.version) == ("pen blue: coverage 0.41 is below 0.9", 2)
        take_action(session, task, "start", user=tom)
        take_action(session, task, "submit", user=tom)
        take_action(session, task, "return", user=rita, reason="redo the pen")
        flag_for_attention(session, task, actor=BATCH, reason="a second look")
        assert task.state == "returned" and task.reason == "a second look"
