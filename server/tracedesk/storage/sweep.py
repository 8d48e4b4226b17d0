"""Orphan sweep: remove stored files that no database row references, once they are old enough.

The upload path writes the file first and the row second (a row must never point at a missing file), so a crash
or a refused upload can leave files without rows. The sweep removes originals and derived folders that are
neither referenced nor younger than a grace period (so uploads in flight survive), and stale temp files.

Races: `put_file` refreshes the write time of an original it finds already stored, and every removal re-checks
the write time just before deleting, so a file reused by an upload that starts while the sweep runs is kept.
"""

from __future__ import annotations

from collections.abc import Collection
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from tracedesk.storage.protocol import FileStore

DEFAULT_GRACE = timedelta(hours=24)


@dataclass(frozen=True, slots=True)
class SweepReport:
    """What a sweep removed (or, in a dry run, would remove).

    Attributes
    ----------
    removed_keys
        Originals removed.
    removed_derived
        Derived folders removed (unreferenced, or interrupted publishes).
    removed_temporaries
        Temp files and staging folders removed.
    kept_recent
        Unreferenced originals and derived folders kept because they are younger than the grace period.
    """

    removed_keys: list[str]
    removed_derived: list[str]
    removed_temporaries: list[str]
    kept_recent: int


def _sweep_originals(
    store: FileStore, referenced: set[str], *, cutoff: datetime, dry_run: bool
) -> tuple[list[str], int]:
    removed: list[str] = []
    kept = 0
    for entry in list(store.iter_originals()):
        if entry.key in referenced:
            continue
        if entry.modified_at >= cutoff:
            kept += 1
        elif dry_run or store.delete(entry.key, if_older_than=cutoff):
            removed.append(entry.key)
    return removed, kept


def _sweep_derived(store: FileStore, referenced: set[str], *, cutoff: datetime, dry_run: bool) -> tuple[list[str], int]:
    removed: list[str] = []
    kept = 0
    for folder in list(store.iter_derived()):
        if folder.name in referenced:
            continue
        if folder.modified_at >= cutoff:
            kept += 1
        elif dry_run or store.delete_derived(folder.name, if_older_than=cutoff):
            removed.append(folder.name)
    return removed, kept


def sweep_orphans(
    store: FileStore,
    *,
    referenced_keys: Collection[str],
    referenced_derived: Collection[str],
    grace: timedelta = DEFAULT_GRACE,
    now: datetime | None = None,
    dry_run: bool = False,
    allow_empty_references: bool = False,
) -> SweepReport:
    """Remove originals and derived folders not referenced by the database and older than `grace`.

    Parameters
    ----------
    store
        The file store to clean.
    referenced_keys
        SHA-256 keys of every original a database row references.
    referenced_derived
        Names of every derived folder a database row references.
    grace
        Minimum age (time since last write) of anything removed.
    now
        The current time (timezone-aware); for tests.
    dry_run
        Report what would be removed without removing it (temp files are not listed).
    allow_empty_references
        Both reference sets empty usually means the caller's query failed, so it is refused unless this is set.

    Raises
    ------
    ValueError
        Both reference sets are empty and `allow_empty_references` is not set, or `grace` is negative.
    """
    if grace < timedelta(0):
        raise ValueError("the grace period must not be negative")
    if not referenced_keys and not referenced_derived and not allow_empty_references:
        raise ValueError("no referenced files given: refusing to sweep everything (pass allow_empty_references)")
    cutoff = (now or datetime.now(UTC)) - grace
    removed_keys, kept_originals = _sweep_originals(store, set(referenced_keys), cutoff=cutoff, dry_run=dry_run)
    removed_derived, kept_derived = _sweep_derived(store, set(referenced_derived), cutoff=cutoff, dry_run=dry_run)
    temporaries = [] if dry_run else store.remove_stale_temporaries(older_than=cutoff)
    return SweepReport(
        removed_keys=removed_keys,
        removed_derived=removed_derived,
        removed_temporaries=temporaries,
        kept_recent=kept_originals + kept_derived,
    )
