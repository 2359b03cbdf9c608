"""The command line's option values: argparse types that refuse a bad value in one line, shared help texts, and the
versions ``--version`` prints."""

from __future__ import annotations

import argparse
import re
import sys
from collections.abc import Callable


def whole_number(minimum: int, what: str = "number") -> Callable[[str], int]:
    """An argparse type for a whole number of at least ``minimum``."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole-number {what}, got '{text}'") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"expected a {what} of {minimum} or more, got {value}")
        return value

    return parse


positive_int = whole_number(1)
seed_value = whole_number(0, "seed")
non_negative_int = whole_number(0)
warmup_days = whole_number(0, "count of days")


def scheduler_address(text: str) -> str:
    """A Dask scheduler address: [tcp:// or tls://]HOST:PORT, checked before anything starts."""
    if not re.fullmatch(r"((tcp|tls)://)?(\[[0-9a-fA-F:]+\]|[A-Za-z0-9_.-]+):\d{1,5}", text) or int(
        text.rsplit(":", 1)[1]) > 65535:
        raise argparse.ArgumentTypeError(f"expected an address like tcp://HOST:PORT, got '{text}'")
    return text


def non_negative_float(text: str) -> float:
    """An argparse type for a finite number of 0 or more."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got '{text}'") from None
    if not 0 <= value < float("inf"):
        raise argparse.ArgumentTypeError(f"expected a number of 0 or more, got {text}")
    return value


ALLOW_LARGE_HELP = ("start a plan above the size ceilings (e.g. for a cluster); never one that cannot fit one "
                    "worker's memory or the disk")
SHARED_OUTPUT_HELP = ("with --scheduler: the workers see --out at the same path and write runs there themselves "
                      "(by default they send each run back and this command writes it)")


def version_text() -> str:
    """This package's version and those that make records reproducible (the same versions give the same bytes)."""
    from importlib import metadata

    def of(name: str) -> str:
        try:
            return metadata.version(name)
        except metadata.PackageNotFoundError:
            return "not installed"

    return (f"undertow {of('undertow')} (python {sys.version.split()[0]}; records depend on numpy {of('numpy')}, "
            f"numba {of('numba')}, mesa {of('mesa')}, pyarrow {of('pyarrow')})")
