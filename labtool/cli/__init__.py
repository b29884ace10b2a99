"""Command-line entry point. Thin: parse arguments, call the library, print.

Each subcommand is a module in :mod:`labtool.cli.commands` with ``register(subparsers)``; the
module's handler returns an exit code. ``LabtoolError`` subclasses map to their ``exit_code``.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys

from labtool import __version__
from labtool.errors import LabtoolError

EXIT_INTERRUPTED = 130


def build_parser() -> argparse.ArgumentParser:
    from labtool.cli import commands

    parser = argparse.ArgumentParser(
        prog="labtool",
        description="Startup characterisation of self-biased references: ingest captures, measure, "
                    "model, compare lots with predictions, report.")
    parser.add_argument("--version", action="version", version=f"labtool {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda m: m.name):
        importlib.import_module(f"labtool.cli.commands.{info.name}").register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or 0)
    except LabtoolError as exc:
        print(f"labtool {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"labtool {args.command}: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
