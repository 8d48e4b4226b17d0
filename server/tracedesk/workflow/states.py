"""The task state machine, kept as data: which action moves a task from which states to which, who may take it,
and whether it needs a reason. The service enforces it; a test checks the service against this table."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from tracedesk.errors import Conflict

Who = Literal["assignee", "reviewer", "manager"]


@dataclass(frozen=True)
class Transition:
    """``action`` moves a task from any of ``sources`` to ``target``; ``who`` may take it."""

    action: str
    sources: frozenset[str]
    target: str
    who: Who
    needs_reason: bool
    past_tense: str


TRANSITIONS: dict[str, Transition] = {
    t.action: t
    for t in (
        Transition("start", frozenset({"open", "returned"}), "in_progress", "assignee", False, "started"),
        Transition("submit", frozenset({"in_progress"}), "submitted", "assignee", False, "submitted"),
        Transition("return", frozenset({"submitted"}), "returned", "reviewer", True, "returned"),
        Transition("approve", frozenset({"submitted"}), "approved", "reviewer", False, "approved"),
        Transition(
            "withdraw",
            frozenset({"open", "in_progress", "submitted", "returned"}),
            "withdrawn",
            "manager",
            True,
            "withdrawn",
        ),
        Transition("reopen", frozenset({"approved", "withdrawn"}), "open", "manager", True, "reopened"),
    )
}
# Tasks in these states still need someone's work; the others are finished (for queues, boards, overdue).
ACTIVE_STATES = frozenset({"open", "in_progress", "returned", "submitted"})
# Who can still be (re)assigned: not after approval or withdrawal (reopen first).
REASSIGNABLE_STATES = ACTIVE_STATES
# The sheet status that goes with each task state ("open" depends on whether work exists, see tasks.py).
SHEET_STATUS_FOR = {
    "in_progress": "in_progress",
    "returned": "in_progress",
    "submitted": "submitted",
    "approved": "approved",
    "withdrawn": "withdrawn",
}


def transition_for(action: str) -> Transition:
    try:
        return TRANSITIONS[action]
    except KeyError as error:
        raise Conflict(f"unknown task action {action!r}") from error


def check_transition(state: str, action: str) -> Transition:
    """The transition for ``action`` from ``state``, or 409 naming the states it is allowed from."""
    transition = transition_for(action)
    if state not in transition.sources:
        allowed = " or ".join(sorted(s.replace("_", " ") for s in transition.sources))
        raise Conflict(
            f"a task that is {state.replace('_', ' ')} cannot be {transition.past_tense}; only a task that is "
            f"{allowed} can",
            detail={"state": state, "action": action},
        )
    return transition
