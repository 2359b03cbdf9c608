"""The ``undertow`` command.

Every sub-command reports bad input as one line on stderr and exit code 2
(never a traceback); an internal fault prints one line and exits 1 unless
``UNDERTOW_DEBUG=1`` asks for the traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Sequence

from .errors import InputError

EXIT_OK, EXIT_FAULT, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors in one line with exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_INPUT, f"{self.prog}: {message}\n")


def cmd_check(args: argparse.Namespace) -> int:
    """Validate a world file."""
    from .world import load_world

    for path in args.files:
        world = load_world(path)
        print(f"{path}: ok ({world.name}; {len(world.stations)} stations, {len(world.boarding_points)} boarding points)")
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command."""
    parser = _Parser(prog="undertow", description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    check = sub.add_parser("check", help="validate world files")
    check.add_argument("files", nargs="+", help="world YAML files")
    check.set_defaults(func=cmd_check)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script."""
    args = build_parser().parse_args(argv)
    func: Callable[[argparse.Namespace], int] = args.func
    try:
        return func(args)
    except InputError as exc:
        print(f"undertow {args.command}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print(f"undertow {args.command}: interrupted; completed output is kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # a fault of ours: one line unless debugging
        if os.environ.get("UNDERTOW_DEBUG") == "1":
            raise
        print(f"undertow {args.command}: internal error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return EXIT_FAULT


if __name__ == "__main__":
    sys.exit(main())
