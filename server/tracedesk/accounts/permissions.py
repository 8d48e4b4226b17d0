"""What each role may do, kept as data so an authorization test can walk every route against it."""

from __future__ import annotations

from enum import StrEnum


class Permission(StrEnum):
    READ = "read"
    UPLOAD = "upload"
    EDIT_ARCHIVE = "edit_archive"
    MANAGE_COLLECTIONS = "manage_collections"
    DIGITIZE = "digitize"
    REVIEW = "review"
    MANAGE_USERS = "manage_users"
    VERIFY_AUDIT = "verify_audit"
    MANAGE_TASKS = "manage_tasks"
    EXPORT = "export"


ROLE_PERMISSIONS: dict[str, frozenset[Permission]] = {
    "viewer": frozenset({Permission.READ, Permission.EXPORT}),
    "technician": frozenset(
        {Permission.READ, Permission.UPLOAD, Permission.EDIT_ARCHIVE, Permission.DIGITIZE, Permission.EXPORT}
    ),
    "reviewer": frozenset(
        {
            Permission.READ,
            Permission.UPLOAD,
            Permission.EDIT_ARCHIVE,
            Permission.MANAGE_COLLECTIONS,
            Permission.DIGITIZE,
            Permission.REVIEW,
            Permission.MANAGE_TASKS,
            Permission.EXPORT,
        }
    ),
    "admin": frozenset(Permission),
}


def role_allows(role: str, permission: Permission) -> bool:
    return permission in ROLE_PERMISSIONS.get(role, frozenset())
