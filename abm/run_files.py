"""What a complete run directory holds: every file's size and SHA-256, written last, checked on reading.

A run directory appears by rename only when whole, but a disk, a copy or a
hand can damage it later: a file cut short, removed, or rewritten. The run
records ``files.json`` (relative path -> bytes and SHA-256) as its last file;
a resumed batch re-runs any run whose files no longer match, and every reader
(briefing, estimate, compare) refuses a damaged run in one line naming the
file. Files added later by the summary extensions (cached estimates) are not
listed, and a run from before this record has none to check.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable
from pathlib import Path

from .errors import InputError

FILES_RECORD = "files.json"


class DamagedRun(InputError):
    """A run directory whose files do not match its record."""


def sha256_of(path: Path) -> str:
    """The SHA-256 of a file, read in blocks."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def record_files(run_dir: Path) -> None:
    """Write ``files.json`` for every file now in ``run_dir`` (call it last, before the directory is published)."""
    files = sorted(p for p in run_dir.rglob("*") if p.is_file() and p.name != FILES_RECORD)
    record = {p.relative_to(run_dir).as_posix(): {"bytes": p.stat().st_size, "sha256": sha256_of(p)} for p in files}
    (run_dir / FILES_RECORD).write_text(json.dumps(record, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def damage(run_dir: Path, only: Iterable[str] | None = None, digests: bool = True) -> str | None:
    """The first problem of a run directory against its record, as "FILE: what is wrong"; None when whole.

    ``only`` limits the check to those relative paths (a reader checks what it reads); ``digests`` False
    checks presence and sizes alone (cheap enough for every listing of a folder).
    """
    path = run_dir / FILES_RECORD
    if not path.is_file():
        return None  # a run from before the record: nothing to check against
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return f"{path}: damaged (not readable JSON)"
    if not isinstance(record, dict):
        return f"{path}: damaged (not a JSON object)"
    wanted = set(only) if only is not None else None
    for name, expected in sorted(record.items()):
        if wanted is not None and name not in wanted:
            continue
        file = run_dir / name
        if not file.is_file():
            return f"{file}: missing from a complete run"
        if file.stat().st_size != expected.get("bytes"):
            return f"{file}: {file.stat().st_size} bytes where the run wrote {expected.get('bytes')} (cut short or changed)"
        if digests and sha256_of(file) != expected.get("sha256"):
            return f"{file}: its content changed since the run wrote it (SHA-256 differs)"
    return None


def require_whole(run_dir: Path, only: Iterable[str] | None = None) -> None:
    """Raise DamagedRun naming the file when ``run_dir`` is damaged."""
    problem = damage(run_dir, only)
    if problem is not None:
        raise DamagedRun(f"{problem}; the run is damaged: rerun it (undertow batch ... --resume redoes it)")
