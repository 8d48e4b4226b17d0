"""Electronic signatures (21 CFR 11.50/11.70 in spirit): the signer re-enters their password; the meaning
(reviewed / approved), printed name and UTC time are recorded and bound to the SHA-256 of the sheet's record as it
is at that moment (``record.py``). A signature holds only while the record still hashes to the same value and its
task was not reopened; anything else shows it void, with what changed. Never commits.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

from argon2 import PasswordHasher
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.accounts.service import confirm_password
from tracedesk.audit.service import record_event
from tracedesk.errors import Conflict, Forbidden, NotFound
from tracedesk.models import LoginAttempt, Sheet, Signature, Task, User
from tracedesk.models.base import utcnow
from tracedesk.workflow.access import may_review, require_may_take
from tracedesk.workflow.authorship import batch_authorships, digitization_authors
from tracedesk.workflow.double import both_sets_present
from tracedesk.workflow.notices import notify
from tracedesk.workflow.record import SheetRecord, describe_version_changes, sheet_record
from tracedesk.workflow.schemas import SignatureRead
from tracedesk.workflow.states import check_transition, transition_for
from tracedesk.workflow.tasks import actor_of, sync_sheet_status


class SignatureRefused(Forbidden):
    """The password did not match: no signature is recorded."""

    code = "signature_refused"


class FourEyesViolation(Forbidden):
    code = "four_eyes"


def _sheet_of(session: Session, task: Task) -> Sheet:
    sheet = session.get(Sheet, task.sheet_id)
    if sheet is None:
        raise NotFound(f"the sheet of task {task.id} is gone")
    return sheet


def check_four_eyes(session: Session, task: Task, signer: User) -> None:
    """403 when the signer digitized any part of the sheet or is assigned to digitize it."""
    if signer.id in (task.technician_id, task.second_technician_id):
        raise FourEyesViolation(
            f"you are assigned to digitize sheet {task.sheet_id}, so you cannot sign it: another reviewer must"
        )
    started = [run.run_id for run in batch_authorships(session, task.sheet_id) if run.started_by_id == signer.id]
    if started:
        raise FourEyesViolation(
            f"you started batch run {started[0]}, which digitized part of sheet {task.sheet_id}, so you cannot sign "
            "it (four-eyes rule): another reviewer must"
        )
    authors = digitization_authors(session, task.sheet_id)
    if signer.id in authors:
        raise FourEyesViolation(
            f"you created or changed part of sheet {task.sheet_id}'s calibration, traces or fits, so you cannot "
            "sign it (four-eyes rule): another reviewer must"
        )


def _check_signable(session: Session, task: Task, signer: User, meaning: str) -> None:
    if meaning == "approved":
        transition = transition_for("approve")
        require_may_take(task, signer, transition)
        check_transition(task.state, "approve")
    else:
        if not may_review(task, signer):
            raise Forbidden(f"only a reviewer (the one assigned to task {task.id}, if any) or an admin can sign it")
        if task.state != "submitted":
            raise Conflict(f"only a submitted task can be signed as reviewed; this one is {task.state}")
    if task.double_digitization and both_sets_present(session, task):
        raise Conflict("both technicians' traces are still on the sheet: keep one set (or return it) before signing")


def sign_task(
    session: Session, task: Task, *, signer: User, password: str, meaning: str, hasher: PasswordHasher
) -> Signature:
    """Record a signature on ``task`` (locked by the caller). Checks, in order: role (403), state (409), double
    digitization resolved (409), four eyes (403), password (403, ``SignatureRefused``)."""
    _check_signable(session, task, signer, meaning)
    check_four_eyes(session, task, signer)
    if not confirm_password(hasher, signer, password):
        raise SignatureRefused("the password does not match: nothing was signed")
    record = sheet_record(session, _sheet_of(session, task))
    signature = Signature(
        task_id=task.id,
        sheet_id=task.sheet_id,
        signer_id=signer.id,
        printed_name=signer.display_name,
        meaning=meaning,
        signed_at=utcnow(),
        record_sha256=record.sha256,
        record_versions=json.dumps(record.versions, sort_keys=True),
    )
    session.add(signature)
    session.flush()
    actor = actor_of(signer)
    values = {
        "task_id": task.id,
        "meaning": meaning,
        "printed_name": signature.printed_name,
        "signed_at": signature.signed_at.isoformat(),
        "record_sha256": record.sha256,
    }
    record_event(
        session,
        actor=actor,
        action="sign",
        entity_type="signature",
        entity_id=signature.id,
        changes={name: {"old": None, "new": value} for name, value in values.items()},
    )
    if meaning == "approved":
        _approve(session, task, signature, actor_name=signer.display_name, signer=signer)
    return signature


def _approve(session: Session, task: Task, signature: Signature, *, actor_name: str, signer: User) -> None:
    task.state = "approved"
    task.approved_at = signature.signed_at
    task.version += 1
    task.updated_at = signature.signed_at
    actor = actor_of(signer)
    record_event(
        session,
        actor=actor,
        action="approve",
        entity_type="task",
        entity_id=task.id,
        entity_version=task.version,
        changes={"state": {"old": "submitted", "new": "approved"}, "signature_id": {"old": None, "new": signature.id}},
    )
    sync_sheet_status(session, task, actor=actor, cause=f"task {task.id} approved (signature {signature.id})")
    message = f"{actor_name} approved sheet {task.sheet_id} (task {task.id})."
    notify(
        session,
        [task.technician_id, task.second_technician_id],
        kind="approved",
        message=message,
        task_id=task.id,
        skip=signer.id,
    )


@dataclass(frozen=True)
class SignatureStatus:
    signature: Signature
    valid: bool
    void_reason: str | None


def signature_status(signature: Signature, current: SheetRecord) -> SignatureStatus:
    if signature.withdrawn_at is not None:
        return SignatureStatus(signature, False, signature.withdrawn_reason or "withdrawn")
    if signature.record_sha256 == current.sha256:
        return SignatureStatus(signature, True, None)
    changes = describe_version_changes(json.loads(signature.record_versions), current.versions)
    detail = "; ".join(changes) if changes else "its content differs"
    return SignatureStatus(signature, False, f"the record changed after signing ({detail})")


def signatures_of(session: Session, task: Task) -> list[Signature]:
    return list(session.scalars(select(Signature).where(Signature.task_id == task.id).order_by(Signature.id)))


def task_signature_statuses(session: Session, task: Task) -> list[SignatureStatus]:
    signatures = signatures_of(session, task)
    if not signatures:
        return []
    current = sheet_record(session, _sheet_of(session, task))
    return [signature_status(signature, current) for signature in signatures]


def approval_status(statuses: list[SignatureStatus]) -> SignatureStatus | None:
    """The latest "approved" signature's status (None when the task was never approved)."""
    approvals = [status for status in statuses if status.signature.meaning == "approved"]
    return approvals[-1] if approvals else None


def signature_read(status: SignatureStatus) -> SignatureRead:
    signature = status.signature
    return SignatureRead(
        id=signature.id,
        task_id=signature.task_id,
        sheet_id=signature.sheet_id,
        signer_id=signature.signer_id,
        printed_name=signature.printed_name,
        meaning=signature.meaning,
        signed_at=signature.signed_at,
        record_sha256=signature.record_sha256,
        valid=status.valid,
        void_reason=status.void_reason,
        withdrawn_at=signature.withdrawn_at,
    )


def record_refusal(session: Session, task: Task, user: User, *, address: str) -> None:
    """A wrong password at signing counts towards login throttling and is shown in the audit trail."""
    session.add(LoginAttempt(username=user.username, address=address[:64], succeeded=False))
    record_event(
        session,
        actor=actor_of(user),
        action="sign_refused",
        entity_type="task",
        entity_id=task.id,
        entity_version=task.version,
        reason="the password did not match",
    )
