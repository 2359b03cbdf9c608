"""One writer per output folder: a lock file holding the owner's process id and host.

Two commands writing one batch, calibration or search folder at once tidy away
each other's half-written runs. The first takes ``OUT/.undertow.lock`` (created
exclusively, so two cannot both succeed); a second is refused in one line
naming the owner. The lock is removed when its owner finishes, however it
finishes; a lock whose owner is gone (its process no longer runs on this host)
is stale and taken over. A lock from another host cannot be checked from here,
so it is reported and left alone: remove it by hand once that host's command
has stopped.
"""

from __future__ import annotations

import json
import os
import socket
import time
from pathlib import Path

from ..errors import InputError

LOCK_FILE = ".undertow.lock"


class FolderLocked(InputError):
    """Another live command is writing the folder."""


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # somebody else's process: alive
        return True
    return True


def _owner(path: Path) -> dict | None:
    """The lock's record, or None when the file is gone or unreadable (being written this instant)."""
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return record if isinstance(record, dict) else None


def _refusal(folder: Path, owner: dict) -> FolderLocked:
    since = time.strftime("%Y-%m-%d %H:%M", time.localtime(float(owner.get("since", 0))))
    return FolderLocked(
        f"{folder}: another undertow command (process {owner.get('pid')} on {owner.get('host')}, since {since}) is "
        f"writing here; wait for it to finish or stop it, then run again (nothing was changed)"
    )


def check_unlocked(folder: Path) -> None:
    """Raise FolderLocked when a live command holds ``folder``'s lock (a stale lock is left for :func:`acquire`)."""
    owner = _owner(folder / LOCK_FILE)
    if owner is not None and not _stale(owner):
        raise _refusal(folder, owner)


def _stale(owner: dict) -> bool:
    return owner.get("host") == socket.gethostname() and isinstance(owner.get("pid"), int) and not _alive(owner["pid"])


def acquire(folder: Path) -> Path:
    """Take ``folder``'s lock (the folder must exist); returns the lock file. Raises FolderLocked if held."""
    path = folder / LOCK_FILE
    record = json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "since": time.time()})
    for _ in range(2):  # a second try after removing a stale lock
        try:
            handle = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            owner = _owner(path)
            if owner is not None and _stale(owner):
                path.unlink(missing_ok=True)
                continue
            raise _refusal(folder, owner or {"pid": "?", "host": "?"}) from None
        with os.fdopen(handle, "w", encoding="utf-8") as out:
            out.write(record)
        return path
    raise _refusal(folder, _owner(path) or {"pid": "?", "host": "?"})


def release(path: Path) -> None:
    """Remove a lock this process took (never another's)."""
    owner = _owner(path)
    if owner is not None and owner.get("pid") == os.getpid() and owner.get("host") == socket.gethostname():
        path.unlink(missing_ok=True)
