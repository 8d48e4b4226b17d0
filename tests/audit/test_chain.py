"""The audit trail is hash-chained and append-only (RELIABILITY.md; 21 CFR Part 11 section 11.10(e))."""

from __future__ import annotations

import hashlib

import pytest
from sqlalchemy import text
from sqlalchemy.exc import DBAPIError

from tracedesk.audit.chain import GENESIS_HASH, canonical_json
from tracedesk.audit.service import SYSTEM, Actor, record_event, verify_chain
from tracedesk.db import transaction
from tracedesk.web.state import AppState


def _write_events(state: AppState, count: int) -> None:
    with transaction(state.writer) as session:
        for index in range(count):
            record_event(
                session,
                actor=Actor(7, "Ana Lyst"),
                action="update",
                entity_type="sheet",
                entity_id=index,
                entity_version=index + 1,
                changes={"notes": {"old": "", "new": f"n{index}"}},
                reason="typo",
            )


def test_first_hash_is_sha256_of_genesis_and_canonical_json(state: AppState) -> None:
    """h_1 = SHA-256(h_0 || canonical JSON), recomputed here with hashlib directly."""
    with transaction(state.writer) as session:
        event = record_event(
            session,
            actor=SYSTEM,
            action="create",
            entity_type="collection",
            entity_id=1,
            changes={"name": {"old": None, "new": "Box 1"}},
        )
        fields = {
            name: getattr(event, name)
            for name in (
                "seq",
                "occurred_at",
                "actor_id",
                "actor_name",
                "action",
                "entity_type",
                "entity_id",
                "entity_version",
                "changes",
                "reason",
            )
        }
        expected = hashlib.sha256(GENESIS_HASH.encode() + canonical_json(fields).encode()).hexdigest()
        assert event.seq == 1
        assert event.hash == expected


def test_intact_chain_verifies(state: AppState) -> None:
    _write_events(state, 25)
    with transaction(state.reader) as session:
        report = verify_chain(session)
    assert report.ok and report.events_checked == 25


@pytest.mark.parametrize(
    "statement", ["UPDATE audit_events SET reason = 'x' WHERE seq = 2", "DELETE FROM audit_events WHERE seq = 2"]
)
def test_triggers_refuse_update_and_delete(state: AppState, statement: str) -> None:
    _write_events(state, 3)
    with pytest.raises(DBAPIError, match="append-only"), state.engine.begin() as connection:
        connection.execute(text(statement))


def test_truncate_refused_on_postgresql(state: AppState) -> None:
    if state.engine.dialect.name != "postgresql":
        return  # SQLite has no TRUNCATE statement; DELETE is covered above
    _write_events(state, 2)
    with pytest.raises(DBAPIError, match="append-only"), state.engine.begin() as connection:
        connection.execute(text("TRUNCATE audit_events"))


def _drop_guard(state: AppState) -> None:
    """Simulate an attacker with direct database access who removes the triggers first."""
    with state.engine.begin() as connection:
        if state.engine.dialect.name == "sqlite":
            connection.execute(text("DROP TRIGGER audit_events_no_update"))
            connection.execute(text("DROP TRIGGER audit_events_no_delete"))
        else:
            connection.execute(text("DROP TRIGGER audit_events_no_update_delete ON audit_events"))


def _first_broken(state: AppState) -> int | None:
    with transaction(state.reader) as session:
        report = verify_chain(session)
    assert not report.ok or report.first_broken_seq is None
    return report.first_broken_seq


def test_flipped_byte_is_found_at_its_sequence_number(state: AppState) -> None:
    _write_events(state, 10)
    _drop_guard(state)
    with state.engine.begin() as connection:
        connection.execute(text("UPDATE audit_events SET actor_name = 'Ana Lysu' WHERE seq = 6"))
    assert _first_broken(state) == 6


def test_deleted_row_is_found(state: AppState) -> None:
    _write_events(state, 10)
    _drop_guard(state)
    with state.engine.begin() as connection:
        connection.execute(text("DELETE FROM audit_events WHERE seq = 4"))
    assert _first_broken(state) == 4


def test_deleted_tail_is_found(state: AppState) -> None:
    _write_events(state, 10)
    _drop_guard(state)
    with state.engine.begin() as connection:
        connection.execute(text("DELETE FROM audit_events WHERE seq >= 9"))
    assert _first_broken(state) == 9


def test_swapped_rows_are_found(state: AppState) -> None:
    _write_events(state, 10)
    _drop_guard(state)
    with state.engine.begin() as connection:
        rows = connection.execute(text("SELECT seq, changes FROM audit_events WHERE seq IN (3, 7) ORDER BY seq")).all()
        connection.execute(text("UPDATE audit_events SET changes = :c WHERE seq = 3"), {"c": rows[1][1]})
        connection.execute(text("UPDATE audit_events SET changes = :c WHERE seq = 7"), {"c": rows[0][1]})
    assert _first_broken(state) == 3
