"""The checks every output folder gets before a command writes in it (batch, calibration, policy search).

A folder is new (absent or empty), or holds the record of earlier work of the
same kind that ``--resume`` takes up; anything else is refused in one line and
left as it is. A live writer's lock refuses it too (:mod:`abm.experiment.lock`).
"""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

from ..errors import InputError
from .lock import LOCK_FILE, acquire, check_unlocked


def held_record(out: Path, record_name: str, what: str, resume: bool, error: type[InputError]) -> dict[str, Any] | None:
    """The record of the ``what`` that ``out`` holds (taken up with ``resume``), or None when ``out`` is new.

    Raises ``error`` when ``out`` is a file, has a live writer, holds such work without ``resume``, holds an
    unreadable record, or holds anything else.
    """
    if out.exists() and not out.is_dir():
        raise error(f"{out}: is a file; --out needs a folder")
    if out.is_dir():
        check_unlocked(out)
    record = out / record_name
    if record.is_file():
        if not resume:
            raise error(f"{out}: already holds a {what}; pass --resume to finish it, or choose another --out "
                        "(nothing was overwritten)")
        try:
            held = json.loads(record.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            held = None
        if not isinstance(held, dict):
            raise error(f"{record}: damaged (not readable JSON); the {what} cannot be taken up: choose another --out "
                        "(nothing was changed)")
        return held
    if out.is_dir() and any(p.name != LOCK_FILE for p in out.iterdir()):
        raise error(f"{out}: is not empty and holds no {what}; choose another --out (nothing was overwritten)")
    return None


def open_output(
    out: Path,
    record_name: str,
    what: str,
    resume: bool,
    error: type[InputError],
    digest: tuple[str, str],
    write_record: Callable[[], None],
    changed: Callable[[dict[str, Any]], None],
) -> tuple[Path, bool]:
    """Open ``out`` for one writer; returns its lock (the caller releases it) and whether earlier work was taken up.

    Earlier work (with ``resume``) is taken up as it is when its record holds ``digest`` (key, value). Otherwise
    ``changed(held)`` raises, naming what changed, unless the earlier work may go on under new settings; then,
    as for a new folder, the folder is made, locked and ``write_record()`` writes the record.
    """
    held = held_record(out, record_name, what, resume, error)
    key, value = digest
    if held is not None and held.get(key) == value:
        return acquire(out), True
    if held is not None:
        changed(held)
    out.mkdir(parents=True, exist_ok=True)
    lock = acquire(out)
    write_record()
    return lock, False
