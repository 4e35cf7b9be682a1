"""The ``integrate`` command: parses arguments, calls the public API, prints. Nothing else."""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import sys

from . import __version__
from .commands import COMMANDS
from .errors import InputError, InputErrors, IntegrateError

EXIT_INPUT = 2  # the input (mapping files, sources, values) is wrong
EXIT_OTHER = 3  # any other error raised on purpose (settings, state)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="integrate",
        description="Merge several department exports about the same people into one deduplicated table.",
    )
    parser.add_argument("--version", action="version", version=f"integrate {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="show debugging detail")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        importlib.import_module(f"{__package__}.commands.{name}").register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.DEBUG if args.verbose else logging.WARNING,
                        format="%(levelname)s: %(message)s")
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        code = int(args.func(args))
        sys.stdout.flush()  # a reader that went away shows here, not at interpreter exit
        return code
    except InputErrors as many:
        print(f"error: {many}", file=sys.stderr)
        return EXIT_INPUT
    except InputError as one:
        print(f"error: {one}", file=sys.stderr)
        return EXIT_INPUT
    except IntegrateError as other:
        print(f"error: {other}", file=sys.stderr)
        return EXIT_OTHER
    except KeyboardInterrupt:
        print("interrupted; previous outputs are unchanged", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader went away ('integrate evaluate | head'): stop quietly, as shell tools do
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141


if __name__ == "__main__":
    sys.exit(main())
