"""The only names the store accepts: SHA-256 keys, derived-folder names and relative paths inside them.

Everything is checked against a strict pattern before it touches a path or an object key, so no caller-chosen
string can climb out of its folder (``..``, absolute paths, NUL bytes, backslashes, empty components).
"""

from __future__ import annotations

import re
from pathlib import PurePosixPath

from tracedesk.storage.errors import InvalidStorageName

_KEY = re.compile(r"[0-9a-f]{64}")
#: Derived names are chosen by the caller (e.g. a sheet's public id); at most 100 characters like the
#: `sheets.derived_key` column.
_DERIVED_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,99}")
_PATH_PART = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.-]{0,127}")


def check_key(key: str) -> str:
    """Return `key` if it is a SHA-256 in 64 lowercase hex digits, else raise InvalidStorageName."""
    if not isinstance(key, str) or not _KEY.fullmatch(key):
        raise InvalidStorageName(f"not a SHA-256 key (64 lowercase hex digits): {key!r:.80}")
    return key


def check_derived_name(name: str) -> str:
    """Return `name` if it is a safe derived-folder name (letters, digits, ``_.-``, up to 100), else raise."""
    if not isinstance(name, str) or not _DERIVED_NAME.fullmatch(name) or ".." in name:
        raise InvalidStorageName(f"not a valid derived name: {name!r:.120}")
    return name


def check_relative_path(relative_path: str) -> str:
    """Return a ``/``-separated path inside a derived folder if every component is safe, else raise.

    Components start with a letter, digit or underscore, so ``.``, ``..`` and hidden files are refused.
    """
    if not isinstance(relative_path, str) or not relative_path:
        raise InvalidStorageName("empty path inside a derived folder")
    parts = PurePosixPath(relative_path).parts
    if relative_path.startswith("/") or not all(_PATH_PART.fullmatch(part) for part in parts):
        raise InvalidStorageName(f"not a valid path inside a derived folder: {relative_path!r:.200}")
    if "/".join(parts) != relative_path:
        raise InvalidStorageName(f"not a normalised path inside a derived folder: {relative_path!r:.200}")
    return relative_path


def sharded_parts(key: str) -> tuple[str, str, str]:
    """The two two-character shard folders and the file name of an original: ``ab``, ``cd``, ``abcd...``."""
    check_key(key)
    return key[:2], key[2:4], key
