"""Writing a file or a folder whole or not at all: fill a name of this writer's own, then rename it into place.

Two processes may write the same file at once (a straggler of an interrupted
batch and the resumed one): each writes its own whole copy under a private
temporary name and renames it into place, so a reader only ever sees a
complete one, and nothing but what the writer made itself is ever removed.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path


def _private_name(path: Path, suffix: str) -> Path:
    """A temporary name beside ``path`` that no other writer uses."""
    return path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:12]}.{suffix}")


def write_atomically(path: Path, write: Callable[[Path], object]) -> Path:
    """Write ``path`` whole or not at all: ``write`` fills a temporary name of this writer's own beside it,
    which is then renamed into place (creating the folder if needed). Returns ``path``."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = _private_name(path, "tmp")
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)  # ours alone, named above
        raise
    return path


@contextmanager
def staged_folder(out: Path) -> Iterator[Path]:
    """A private folder beside ``out`` to fill; renamed to ``out`` when the block ends without an error, and
    removed (it is this call's own) when it raises. ``out`` must not exist yet."""
    out.parent.mkdir(parents=True, exist_ok=True)
    staging = _private_name(out, "partial")
    try:
        yield staging
        staging.rename(out)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
