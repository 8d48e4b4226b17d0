"""The task state machine of the service against an independent model (Hypothesis stateful testing).

The model is written from issue 5, not from ``workflow/states.py``: open -> in progress -> submitted -> approved,
or submitted -> returned (with a reason) -> in progress; withdrawn with a reason; reopened with a reason after
approval or withdrawal (our addition, so mistakes can be corrected). Technicians start and submit their own
tasks; reviewers and admins return, approve (a password-confirmed signature), withdraw and reopen. Anyone else
gets 403; people who may not see the task get 404; a disallowed transition is 409; a missing reason 422.
"""

from __future__ import annotations

from hypothesis import HealthCheck, event, settings
from hypothesis import strategies as st
from hypothesis.stateful import (
    Bundle,
    RuleBasedStateMachine,
    initialize,
    invariant,
    rule,
    run_state_machine_as_test,
)

from tests.conftest import PASSWORD, People
from tests.workflow.workflow_rows import digitized_sheet, task_for, user_named
from tracedesk.db import transaction
from tracedesk.errors import AppError
from tracedesk.models import Sheet, Task
from tracedesk.web.state import AppState
from tracedesk.workflow.access import find_task
from tracedesk.workflow.signatures import sign_task
from tracedesk.workflow.tasks import take_action

ALLOWED = {
    ("open", "start"): "in_progress",
    ("returned", "start"): "in_progress",
    ("in_progress", "submit"): "submitted",
    ("submitted", "return"): "returned",
    ("submitted", "approve"): "approved",
    ("open", "withdraw"): "withdrawn",
    ("in_progress", "withdraw"): "withdrawn",
    ("submitted", "withdraw"): "withdrawn",
    ("returned", "withdraw"): "withdrawn",
    ("approved", "reopen"): "open",
    ("withdrawn", "reopen"): "open",
}
MAY_ACT = {
    "start": {"technician"},
    "submit": {"technician"},
    "return": {"reviewer", "admin"},
    "approve": {"reviewer", "admin"},
    "withdraw": {"reviewer", "admin"},
    "reopen": {"reviewer", "admin"},
}
NEEDS_REASON = {"return", "withdraw", "reopen"}
SEES_TASK = {"technician", "reviewer", "admin"}  # the task is assigned to the technician and the reviewer
SHEET_STATUS = {"in_progress": "in_progress", "returned": "in_progress", "submitted": "submitted"}
SHEET_STATUS |= {"approved": "approved", "withdrawn": "withdrawn", "open": "in_progress"}  # "open": work exists
FORWARD = {
    "open": ["start"],
    "in_progress": ["submit"],
    "submitted": ["approve", "return"],
    "returned": ["start"],
    "approved": ["reopen"],
    "withdrawn": ["reopen"],
}
ROLES = ["technician", "technician2", "reviewer", "admin", "viewer"]


def expected_outcome(state: str, action: str, who: str, *, reason: bool, password_ok: bool) -> str:
    if who not in SEES_TASK:
        return "404"
    if who not in MAY_ACT[action]:
        return "403"
    if (state, action) not in ALLOWED:
        return "409"
    if action in NEEDS_REASON and not reason:
        return "422"
    if action == "approve" and not password_ok:
        return "403"
    return "ok"


def run_machine(app_state: AppState, people: People) -> None:
    class TaskMachine(RuleBasedStateMachine):
        tasks = Bundle("tasks")

        def __init__(self) -> None:
            super().__init__()
            self.model: dict[int, str] = {}
            self.sheet_status: dict[int, str] = {}  # the rows are inserted "ready"; transitions keep it in step

        @initialize(target=tasks)
        def first_task(self) -> int:
            return self.new_task()

        @rule(target=tasks)
        def new_task(self) -> int:
            with transaction(app_state.writer) as session:
                technician = user_named(session, people.technician)
                sheet = digitized_sheet(session, technician=technician)
                task = task_for(session, sheet, technician=technician, reviewer=user_named(session, people.reviewer))
                task_id = task.id
            self.model[task_id] = "open"
            self.sheet_status[task_id] = "ready"
            return task_id

        def _attempt(self, task_id: int, action: str, who: str, *, reason: bool, password_ok: bool) -> str:
            try:
                with transaction(app_state.writer) as session:
                    user = user_named(session, getattr(people, who))
                    task = find_task(session, task_id, user, lock=True)
                    if action == "approve":
                        password = PASSWORD if password_ok else "wrong password"
                        sign_task(
                            session, task, signer=user, password=password, meaning="approved", hasher=app_state.hasher
                        )
                    else:
                        take_action(session, task, action, user=user, reason="checked" if reason else None)
            except AppError as error:
                return str(error.status_code)
            return "ok"

        @rule(
            task_id=tasks,
            action=st.sampled_from(sorted(MAY_ACT)),
            who=st.sampled_from(ROLES),
            reason=st.booleans(),
            password_ok=st.booleans(),
        )
        def act(self, task_id: int, action: str, who: str, reason: bool, password_ok: bool) -> None:
            self._check(task_id, action, who, reason=reason, password_ok=password_ok)

        @rule(task_id=tasks, action=st.sampled_from(sorted(MAY_ACT)), data=st.data())
        def act_in_role(self, task_id: int, action: str, data: st.DataObject) -> None:
            """Mostly well-formed attempts by someone whose role allows the action, so tasks travel far."""
            who = data.draw(st.sampled_from(sorted(MAY_ACT[action])))
            self._check(task_id, action, who, reason=True, password_ok=data.draw(st.booleans()) or action != "approve")

        @rule(task_id=tasks, choice=st.booleans(), password_ok=st.booleans())
        def step_forward(self, task_id: int, choice: bool, password_ok: bool) -> None:
            """The next step on the usual path (approve or return a submitted task, reopen a finished one)."""
            state = self.model[task_id]
            action = FORWARD[state][int(choice) % len(FORWARD[state])]
            who = "technician" if action in {"start", "submit"} else ("reviewer" if choice else "admin")
            self._check(task_id, action, who, reason=True, password_ok=password_ok)

        def _check(self, task_id: int, action: str, who: str, *, reason: bool, password_ok: bool) -> None:
            state = self.model[task_id]
            expected = expected_outcome(state, action, who, reason=reason, password_ok=password_ok)
            outcome = self._attempt(task_id, action, who, reason=reason, password_ok=password_ok)
            event(f"{action} -> {outcome}")
            assert outcome == expected, f"{who} {action} on a task that is {state}: {outcome}, expected {expected}"
            if outcome == "ok":
                self.model[task_id] = ALLOWED[(state, action)]
                self.sheet_status[task_id] = SHEET_STATUS[self.model[task_id]]

        @invariant()
        def stored_states_match_the_model(self) -> None:
            if not self.model:
                return
            with transaction(app_state.reader) as session:
                for task_id, expected in self.model.items():
                    task = session.get(Task, task_id)
                    assert task is not None and task.state == expected
                    sheet = session.get(Sheet, task.sheet_id)
                    assert sheet is not None and sheet.status == self.sheet_status[task_id]

    run_state_machine_as_test(
        TaskMachine,
        settings=settings(
            max_examples=8,
            stateful_step_count=25,
            deadline=None,
            suppress_health_check=[HealthCheck.too_slow],
        ),
    )


def test_task_state_machine_matches_the_model(state: AppState, people: People) -> None:
    run_machine(state, people)
