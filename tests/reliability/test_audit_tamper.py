"""Tampering with the audit trail is refused by the database, and what gets past it is found by the hash chain
at the right sequence number (21 CFR Part 11 sec. 11.10(e); RELIABILITY.md, "Audit trail").

The refusals run on the campaign's guarded database. The tamper cases need an attacker with direct database
access who first drops the triggers: they run on a second, throw-away database, and each case puts the row back
afterwards, so the next case starts from an intact chain. `tracedesk audit verify` is run as an operator would.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from sqlalchemy import Connection, text
from sqlalchemy.exc import DBAPIError

from tests.reliability.campaign import Campaign, build_campaign, fresh_database_url
from tests.reliability.conftest import Figures
from tracedesk.audit.chain import HASHED_FIELDS
from tracedesk.audit.service import Actor, record_event, verify_chain
from tracedesk.cli import main
from tracedesk.db import transaction
from tracedesk.models import AuditEvent
from tracedesk.web.state import AppState

EVENTS = 14


def _write_events(state: AppState, count: int) -> None:
    with transaction(state.writer) as session:
        for index in range(count):
            record_event(
                session,
                actor=Actor(7, "Ana Lyst"),
                action="update",
                entity_type="sheet",
                entity_id=index + 1,
                entity_version=index + 2,
                changes={"notes": {"old": f"n{index}", "new": f"n{index + 1}"}},
                reason="typo in the notes",
            )


def _first_broken(state: AppState) -> int | None:
    with transaction(state.reader) as session:
        return verify_chain(session).first_broken_seq


GUARDED_STATEMENTS = [
    "UPDATE audit_events SET reason = 'rewritten' WHERE seq = 3",
    "UPDATE audit_events SET hash = prev_hash",
    "DELETE FROM audit_events WHERE seq = 3",
    "DELETE FROM audit_events",
]


def test_database_refuses_updates_and_deletes_of_audit_events(campaign: Campaign, figures: Figures) -> None:
    _write_events(campaign.state, 4)
    refused = 0
    statements = GUARDED_STATEMENTS + (["TRUNCATE audit_events"] if _is_postgres(campaign.state) else [])
    for statement in statements:
        try:
            with campaign.state.engine.begin() as connection:
                connection.execute(text(statement))
        except DBAPIError as error:
            refused += int("append-only" in str(error))
    with transaction(campaign.state.writer) as session:  # the ORM path too
        event = session.get(AuditEvent, 2)
        assert event is not None
        session.delete(event)
        with pytest.raises(DBAPIError, match="append-only"):
            session.flush()
        session.rollback()
    refused += 1
    intact = _first_broken(campaign.state) is None
    figures.add(cases=len(statements) + 2, failures=len(statements) + 1 - refused + int(not intact))
    assert refused == len(statements) + 1
    assert intact


def _is_postgres(state: AppState) -> bool:
    return state.engine.dialect.name == "postgresql"


@pytest.fixture(scope="module")
def unguarded(campaign_url: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Campaign]:
    """A second database with a written chain and the triggers dropped, as an attacker with DBA rights would."""
    kind = "postgresql" if campaign_url.startswith("postgresql") else "sqlite"
    with fresh_database_url(kind, tmp_path_factory.mktemp("tamper")) as url:
        built = build_campaign(url, Path(tmp_path_factory.mktemp("tamper-data")))
        _write_events(built.state, EVENTS)
        with built.state.engine.begin() as connection:
            if kind == "sqlite":
                connection.execute(text("DROP TRIGGER audit_events_no_update"))
                connection.execute(text("DROP TRIGGER audit_events_no_delete"))
            else:
                connection.execute(text("DROP TRIGGER audit_events_no_update_delete ON audit_events"))
        yield built
        built.close()


def _row(connection: Connection, seq: int) -> dict[str, Any]:
    return dict(connection.execute(text("SELECT * FROM audit_events WHERE seq = :s"), {"s": seq}).mappings().one())


def _put_back(connection: Connection, rows: list[dict[str, Any]]) -> None:
    for row in rows:
        connection.execute(text("DELETE FROM audit_events WHERE seq = :s"), {"s": row["seq"]})
        columns = ", ".join(row)
        connection.execute(
            text(f"INSERT INTO audit_events ({columns}) VALUES ({', '.join(':' + c for c in row)})"), row
        )


def _tampered_value(field: str, value: Any) -> Any:
    if isinstance(value, int) and not isinstance(value, bool):
        return value + 1
    if value is None:
        return 99 if field in {"actor_id", "entity_version"} else "added"
    text_value = str(value)
    return text_value[:-1] + chr(ord(text_value[-1]) ^ 1)  # one flipped bit in the last character


Tamper = Callable[[Connection], None]


def _flip(field: str, seq: int) -> Tamper:
    def tamper(connection: Connection) -> None:
        value = _row(connection, seq)[field]
        connection.execute(
            text(f"UPDATE audit_events SET {field} = :v WHERE seq = :s"), {"v": _tampered_value(field, value), "s": seq}
        )

    return tamper


def _delete(seq: int) -> Tamper:
    return lambda connection: connection.execute(text("DELETE FROM audit_events WHERE seq = :s"), {"s": seq})


def _swap_contents(first: int, second: int) -> Tamper:
    def tamper(connection: Connection) -> None:
        a, b = _row(connection, first), _row(connection, second)
        for seq, source in ((first, b), (second, a)):
            connection.execute(
                text("UPDATE audit_events SET changes = :c, entity_id = :e, reason = :r WHERE seq = :s"),
                {"c": source["changes"], "e": source["entity_id"], "r": source["reason"], "s": seq},
            )

    return tamper


def _swap_sequence_numbers(first: int, second: int) -> Tamper:
    def tamper(connection: Connection) -> None:
        connection.execute(text("UPDATE audit_events SET seq = -1 WHERE seq = :s"), {"s": first})
        connection.execute(text("UPDATE audit_events SET seq = :a WHERE seq = :b"), {"a": first, "b": second})
        connection.execute(text("UPDATE audit_events SET seq = :b WHERE seq = -1"), {"b": second})

    return tamper


def _forge_follower(seq: int) -> Tamper:
    """Replace an event by a made-up one with a self-consistent hash of its own (but not of the chain)."""

    def tamper(connection: Connection) -> None:
        connection.execute(
            text("UPDATE audit_events SET actor_name = 'Someone Else', hash = :h WHERE seq = :s"),
            {"h": "f" * 64, "s": seq},
        )

    return tamper


CASES: list[tuple[str, int, Tamper]] = [
    *[
        (f"flipped {field}", 3 + index % 9, _flip(field, 3 + index % 9))
        for index, field in enumerate(HASHED_FIELDS)
        if field != "seq"
    ],
    ("flipped prev_hash", 6, _flip("prev_hash", 6)),
    ("flipped hash", 8, _flip("hash", 8)),
    ("deleted first row", 1, _delete(1)),
    ("deleted middle row", 7, _delete(7)),
    ("deleted last row", EVENTS, _delete(EVENTS)),
    ("swapped contents of rows 4 and 9", 4, _swap_contents(4, 9)),
    ("swapped sequence numbers of rows 5 and 6", 5, _swap_sequence_numbers(5, 6)),
    ("forged row with its own hash", 10, _forge_follower(10)),
]


@pytest.mark.parametrize(("label", "expected"), [(label, seq) for label, seq, _ in CASES], ids=[c[0] for c in CASES])
def test_tampering_is_found_at_its_sequence_number(
    unguarded: Campaign, figures: Figures, label: str, expected: int
) -> None:
    tamper = next(case[2] for case in CASES if case[0] == label)
    engine = unguarded.state.engine
    with engine.connect() as connection:
        originals = [dict(row) for row in connection.execute(text("SELECT * FROM audit_events")).mappings()]
    with engine.begin() as connection:
        tamper(connection)
    found = _first_broken(unguarded.state)
    with engine.begin() as connection:
        _put_back(connection, originals)
    restored = _first_broken(unguarded.state) is None
    figures.add(cases=1, failures=int(found != expected) + int(not restored))
    assert found == expected, f"{label}: found at {found}, expected {expected}"
    assert restored


def _cli_verify(campaign: Campaign, monkeypatch: pytest.MonkeyPatch) -> tuple[int, str]:
    monkeypatch.setenv("TRACEDESK_DATABASE_URL", campaign.settings.resolved_database_url)
    monkeypatch.setenv("TRACEDESK_DATA_DIR", str(campaign.settings.data_dir))
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "test")
    result = CliRunner().invoke(main, ["audit", "verify"])
    return result.exit_code, result.output


def test_audit_verify_command_exit_codes(
    unguarded: Campaign, figures: Figures, monkeypatch: pytest.MonkeyPatch
) -> None:
    intact_code, intact_text = _cli_verify(unguarded, monkeypatch)
    engine = unguarded.state.engine
    with engine.connect() as connection:
        originals = [dict(row) for row in connection.execute(text("SELECT * FROM audit_events")).mappings()]
    with engine.begin() as connection:
        _flip("reason", 5)(connection)
    broken_code, broken_text = _cli_verify(unguarded, monkeypatch)
    with engine.begin() as connection:
        _put_back(connection, originals)
    outcomes = {
        "intact exits 0": intact_code == 0 and "intact" in intact_text,
        "broken exits 1": broken_code == 1,
        "names the sequence number": "sequence number 5" in broken_text,
    }
    figures.add(cases=len(outcomes), failures=sum(not ok for ok in outcomes.values()))
    assert all(outcomes.values()), (outcomes, intact_text, broken_text)
