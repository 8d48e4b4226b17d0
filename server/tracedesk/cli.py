"""The ``tracedesk`` command: run the service, manage accounts, import scans, check the audit chain."""

from __future__ import annotations

import secrets
import sys
from pathlib import Path
from typing import TYPE_CHECKING

import click
from sqlalchemy import func, select

from tracedesk.accounts import service as accounts
from tracedesk.audit.service import SYSTEM, verify_chain
from tracedesk.config import Settings
from tracedesk.db import build_engine, transaction
from tracedesk.migrate import upgrade_database
from tracedesk.models import User
from tracedesk.models.user import ROLES
from tracedesk.web.state import AppState

if TYPE_CHECKING:
    from tracedesk.demo.loader import DemoSummary


def _state(*, migrate: bool = True) -> AppState:
    from tracedesk.app import build_state

    state = build_state(Settings(), migrate=migrate)
    context = click.get_current_context(silent=True)
    if context is not None:  # close the pool and the job threads when the command ends
        context.call_on_close(lambda: _close(state))
    return state


def _close(state: AppState) -> None:
    state.dispatcher.shutdown()
    state.engine.dispose()


def _fail(message: str, code: int = 1) -> None:
    click.secho(message, fg="red", err=True)
    sys.exit(code)


@click.group()
@click.version_option(package_name="tracedesk")
def main() -> None:
    """Tracedesk: turn archived paper chart records into trustworthy numbers."""


@main.command()
def migrate() -> None:
    """Create or upgrade the database schema (needed for PostgreSQL; the embedded SQLite does it itself)."""
    settings = Settings()
    engine = build_engine(settings.resolved_database_url)
    upgrade_database(engine)
    engine.dispose()
    click.echo(f"database at {engine.url.render_as_string(hide_password=True)} is up to date")


def _ensure_first_admin(state: AppState) -> None:
    """On the very first run, create an admin with a fresh random password and print it once."""
    with transaction(state.writer) as session:
        if session.scalar(select(func.count()).select_from(User)):
            return
        password = secrets.token_urlsafe(12)
        accounts.create_user(
            session,
            state.hasher,
            actor=SYSTEM,
            username="admin",
            password=password,
            role="admin",
            display_name="Administrator",
        )
    click.secho("First run: an administrator account was created.", fg="green")
    click.secho(f"  user name: admin\n  password:  {password}   (shown once; change it after signing in)", bold=True)


def _print_demo_accounts(summary: DemoSummary) -> None:
    """The demo accounts, with the passwords generated now (printed this once, never stored in clear)."""
    fresh = [account for account in summary.accounts if account.password]
    if not fresh:
        return
    click.secho(
        "Demo accounts (passwords shown once; the demo and these accounts go with `tracedesk demo --remove`):",
        fg="green",
    )
    for account in fresh:
        click.secho(
            f"  {account.username:<15} {account.role:<11} {account.password}   ({account.display_name})", bold=True
        )


def _load_demo(state: AppState, *, dpi: int | None = None) -> None:
    from tracedesk.demo.loader import load_demo
    from tracedesk.demo.scenarios import DEMO_DPI

    click.echo("Loading the demo archive (invented records drawn by Tracedesk; a minute or two the first time) ...")
    summary = load_demo(state, progress=lambda message: click.echo(f"  {message}"), dpi=dpi or DEMO_DPI)
    click.echo(f"demo archive ready: {len(summary.collections)} collection(s), {summary.sheets_added} new sheet(s)")
    for note in summary.notes:
        click.secho(f"  note: {note}", fg="yellow")
    _print_demo_accounts(summary)


@main.command()
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port", default=8000, show_default=True, type=int)
@click.option("--workers", default=1, show_default=True, type=int, help="uvicorn worker processes")
@click.option("--demo", is_flag=True, help="load the demo archive first if the archive is still empty")
def serve(host: str, port: int, workers: int, demo: bool) -> None:
    """Run the web service (on the embedded SQLite database and local files unless configured otherwise)."""
    import uvicorn

    state = _state()
    _ensure_first_admin(state)
    if demo:
        from tracedesk.demo.loader import first_run_wants_demo

        if first_run_wants_demo(state):
            _load_demo(state)
    state.engine.dispose()
    click.secho(f"Tracedesk is running at http://{host}:{port}/  (Ctrl+C stops it)", fg="cyan")
    uvicorn.run("tracedesk.asgi:app", host=host, port=port, workers=workers, log_level="info")


@main.command()
@click.option("--burst", is_flag=True, help="stop when the queue is empty (for tests and cron)")
def worker(burst: bool) -> None:
    """Run a queue worker (RQ on Redis; set TRACEDESK_REDIS_URL). Start as many as the machines allow."""
    from rq import Worker

    from tracedesk.jobs.dispatch import RqDispatcher
    from tracedesk.jobs.worker import requeue_stale, worker_state
    from tracedesk.logs import configure_logging

    settings = Settings()
    if not settings.redis_url:
        _fail("set TRACEDESK_REDIS_URL (e.g. redis://127.0.0.1:6379/0) to run a worker", 2)
    configure_logging(settings.log_level)  # failed jobs are logged as JSON lines, like the web service's
    state = worker_state()
    requeued = requeue_stale(state)
    if requeued:
        click.echo(f"re-queued {len(requeued)} job(s) whose worker had stopped: {requeued}")
    dispatcher = RqDispatcher(str(settings.redis_url), settings.rq_queue)
    Worker([dispatcher.queue], connection=dispatcher.connection).work(burst=burst, with_scheduler=False)


@main.group()
def user() -> None:
    """Manage accounts."""


@user.command("add")
@click.argument("username")
@click.option("--role", type=click.Choice(ROLES), required=True)
@click.option("--name", "display_name", default="", help="printed name used in signatures")
@click.option("--password-stdin", is_flag=True, help="read the password from standard input")
def user_add(username: str, role: str, display_name: str, password_stdin: bool) -> None:
    """Create an account; without --password-stdin a random password is generated and printed once."""
    password = sys.stdin.readline().rstrip("\n") if password_stdin else secrets.token_urlsafe(12)
    state = _state()
    from tracedesk.errors import AppError

    try:
        with transaction(state.writer) as session:
            accounts.create_user(
                session,
                state.hasher,
                actor=SYSTEM,
                username=username,
                password=password,
                role=role,
                display_name=display_name,
            )
    except AppError as error:
        _fail(f"refused: {error.message}", 2)
    click.echo(f"created {username.lower()} ({role})")
    if not password_stdin:
        click.echo(f"password: {password}   (shown once)")


@user.command("list")
def user_list() -> None:
    """List accounts with their roles."""
    state = _state()
    with transaction(state.reader) as session:
        for account in accounts.list_users(session):
            flag = "" if account.is_active else "  (disabled)"
            click.echo(f"{account.username:<24} {account.role:<11} {account.display_name}{flag}")


@user.command("disable")
@click.argument("username")
def user_disable(username: str) -> None:
    """Disable an account and end its sessions and API tokens."""
    state = _state()
    from tracedesk.errors import AppError

    try:
        with transaction(state.writer) as session:
            account = accounts.get_user_by_name(session, username)
            accounts.update_user(session, account, actor=SYSTEM, is_active=False)
    except AppError as error:
        _fail(f"refused: {error.message}", 2)
    click.echo(f"disabled {username}")


@main.group()
def token() -> None:
    """Manage API tokens."""


@token.command("create")
@click.argument("username")
@click.option("--label", default="command line", show_default=True)
def token_create(username: str, label: str) -> None:
    """Create an API token for USERNAME and print it once."""
    state = _state()
    from tracedesk.errors import AppError

    try:
        with transaction(state.writer) as session:
            account = accounts.get_user_by_name(session, username)
            raw, _ = accounts.create_api_token(session, account, name=label, actor=SYSTEM)
    except AppError as error:
        _fail(f"refused: {error.message}", 2)
    click.echo(raw)


@main.group()
def audit() -> None:
    """Audit trail commands."""


@audit.command("verify")
def audit_verify() -> None:
    """Recompute the hash chain; exit 0 when it holds, else 1 and the first broken sequence number."""
    state = _state()
    try:
        with transaction(state.reader) as session:
            report = verify_chain(session)
    finally:
        state.engine.dispose()  # close the pooled connection now (the command may run inside a test process)
    if report.ok:
        click.echo(f"audit chain intact: {report.events_checked} events verified")
        return
    _fail(f"audit chain BROKEN at sequence number {report.first_broken_seq}: {report.problem}", 1)


@main.command()
@click.option(
    "--grace-hours",
    type=click.FloatRange(min=0),
    default=24.0,
    show_default=True,
    help="keep unreferenced files younger than this (uploads in flight use them)",
)
@click.option("--dry-run", is_flag=True, help="list what would be removed and remove nothing")
@click.option("--allow-empty", is_flag=True, help="sweep even though the database references no file at all")
def sweep(grace_hours: float, dry_run: bool, allow_empty: bool) -> None:
    """Remove stored files no database row references (left by crashes, failed uploads, removed records)."""
    from datetime import UTC, datetime, timedelta

    from tracedesk.archive.ingest_job import pending_ingest_keys
    from tracedesk.exports.bundle_jobs import kept_bundle_keys
    from tracedesk.models import Sheet, SourceFile
    from tracedesk.storage import sweep_orphans
    from tracedesk.storage.durable import remove_entries_older_than

    state = _state()
    grace = timedelta(hours=grace_hours)
    try:
        with transaction(state.reader) as session:
            keys = set(session.scalars(select(SourceFile.sha256))) | kept_bundle_keys(session)
            keys |= pending_ingest_keys(session)  # originals stored for ingest jobs that have not run yet
            derived = set(session.scalars(select(Sheet.derived_key)))
        if not (keys or derived or allow_empty):
            _fail("the database references no stored file: is TRACEDESK_DATABASE_URL right? (--allow-empty)", 2)
        report = sweep_orphans(
            state.store,
            referenced_keys=keys,
            referenced_derived=derived,
            grace=grace,
            dry_run=dry_run,
            allow_empty_references=True,
        )
        incoming = state.settings.data_dir / "incoming"  # uploads being received when a process died
        stale_uploads = (
            []
            if dry_run or not incoming.is_dir()
            else remove_entries_older_than(incoming, older_than=datetime.now(UTC) - grace)
        )
    finally:
        state.engine.dispose()
    verb = "would remove" if dry_run else "removed"
    click.echo(
        f"{verb} {len(report.removed_keys)} original(s), {len(report.removed_derived)} derived folder(s), "
        f"{len(report.removed_temporaries) + len(stale_uploads)} temporary file(s); "
        f"kept {report.kept_recent} unreferenced file(s) younger than {grace_hours:g} h"
    )


@main.command()
@click.argument("destination", type=click.Path(path_type=Path))
def backup(destination: Path) -> None:
    """Back up the database, the stored files and the audit chain into a new folder DESTINATION."""
    from tracedesk.maintenance.backup import BackupError, backup_archive

    state = _state()
    try:
        manifest = backup_archive(state, destination, progress=click.echo)
    except BackupError as error:
        _fail(f"backup failed: {error}", 1)
    counts = manifest["inventory"]["row_counts"]
    click.echo(
        f"backup written to {destination}: {counts.get('sheets', 0)} sheet(s), "
        f"{counts.get('audit_events', 0)} audit event(s)"
    )


@main.command()
@click.argument("source", type=click.Path(exists=True, file_okay=False, path_type=Path))
def restore(source: Path) -> None:
    """Restore a backup folder SOURCE into the configured (new, empty) database and data folder, then check it."""
    from tracedesk.maintenance.backup import BackupError, restore_archive

    state = _state(migrate=False)
    try:
        inventory = restore_archive(state, source, progress=click.echo)
    except BackupError as error:
        _fail(f"restore failed: {error}", 1)
    click.echo(f"restored and checked: {inventory['row_counts'].get('sheets', 0)} sheet(s), audit chain intact")


@main.command("move-to-postgres")
@click.argument("target_url")
def move_to_postgres_command(target_url: str) -> None:
    """Copy the embedded SQLite archive into the PostgreSQL database TARGET_URL (ids, audit chain kept).

    Afterwards set TRACEDESK_DATABASE_URL=TARGET_URL; the files stay in the same data folder or object store.
    """
    from tracedesk.maintenance.backup import BackupError
    from tracedesk.maintenance.move import move_to_postgres

    settings = Settings()
    source = build_engine(settings.resolved_database_url)
    target = build_engine(target_url)
    try:
        counts = move_to_postgres(source, target, progress=click.echo)
    except BackupError as error:
        _fail(f"move failed: {error}", 1)
    finally:
        source.dispose()
        target.dispose()
    click.echo(f"moved {sum(counts.values())} row(s); audit chain verified on PostgreSQL")
    click.echo(f"now set TRACEDESK_DATABASE_URL={target.url.render_as_string(hide_password=True)}")


@main.command("demo")
@click.option("--remove", is_flag=True, help="remove the demo collections and everything in them instead")
@click.option("--dpi", type=click.IntRange(20, 600), default=None, help="scan resolution of the drawn sheets [200]")
def demo_command(remove: bool, dpi: int | None) -> None:
    """Load the demo archive (invented records, accounts printed once), or remove it with --remove."""
    state = _state()
    try:
        if remove:
            _remove_demo(state)
            return
        from tracedesk.errors import AppError

        try:
            _load_demo(state, dpi=dpi)
        except AppError as error:
            _fail(f"refused: {error.message}", 2)
    finally:
        state.engine.dispose()


def _remove_demo(state: AppState) -> None:
    from tracedesk.demo.removal import remove_demo

    removed = remove_demo(state)
    if not removed.anything:
        click.echo("there is no demo archive to remove")
        return
    counts = ", ".join(f"{count} {kind.replace('_', ' ')}(s)" for kind, count in removed.removed.items() if count)
    click.echo(f"demo archive removed: {counts}; {removed.files_removed} stored file(s) deleted")
    if removed.accounts_disabled:
        click.echo(f"demo accounts disabled: {', '.join(removed.accounts_disabled)}")
    click.echo("the audit trail keeps every event about the demo")


@main.command("import")
@click.argument("folder", type=click.Path(exists=True, file_okay=False, path_type=Path))
@click.option("--collection", "collection_name", required=True, help="collection name (created if missing)")
@click.option("--as-user", "username", default=None, help="account recorded as the uploader (default: system)")
def import_folder(folder: Path, collection_name: str, username: str | None) -> None:
    """Bulk upload every scan in FOLDER (PNG, JPEG, TIFF, PDF) into a collection, with a summary."""
    from tracedesk.archive.bulk_import import import_folder as run_import

    state = _state()
    summary = run_import(state, folder, collection_name=collection_name, username=username)
    click.echo(
        f"accepted {summary.accepted} sheet(s), duplicates {len(summary.duplicates)}, refused {len(summary.refused)}"
    )
    for name, reason in summary.duplicates + summary.refused:
        click.echo(f"  {name}: {reason}")
    if summary.refused:
        sys.exit(3)


if __name__ == "__main__":  # pragma: no cover
    main()
