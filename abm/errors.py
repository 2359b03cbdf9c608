"""The one exception family the command line reports as bad input (exit code 2), and the check of an --out."""

from __future__ import annotations

import os
from pathlib import Path


class InputError(Exception):
    """Input that cannot be used. ``str()`` is a single line naming the file and key."""


def refuse_unwritable(out: str | Path, option: str = "--out") -> None:
    """Raise InputError before any work when ``out`` cannot be made or written: checked up front, not after a run."""
    out = Path(out)
    probe = out
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    if probe != out and not probe.is_dir():
        raise InputError(f"{option} {out}: {probe} is a file, so no folder can be made there")
    if probe == out and not out.is_dir():
        return  # an existing file: the command's own check says what it wants instead
    if not os.access(probe, os.W_OK | os.X_OK):
        raise InputError(f"{option} {out}: cannot write in {probe} (permission denied)")
