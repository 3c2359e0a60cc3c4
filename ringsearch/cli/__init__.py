"""Command line: ``ringsearch SUBCOMMAND ...``.

Thin by design: each subcommand module parses its arguments, calls public
functions that a notebook user could call too, and prints.  Bad input raises
:class:`ringsearch.errors.InputError`; ``main`` turns it into one sentence on
stderr and exit status 2, never a traceback.

To add a subcommand, write ``ringsearch/cli/<name>.py`` with
``register(subparsers)`` (which sets ``func`` via ``set_defaults``) and add the
module name to ``_COMMANDS``.
"""

from __future__ import annotations

import argparse
import sys
from importlib import import_module

from ringsearch import __version__
from ringsearch.errors import InputError

#: Subcommand modules, in the order --help lists them.
_COMMANDS: list[str] = [
    "spectrum",
    "noise",
    "condition",
    "inject",
    "search",
    "analyse",
    "campaign",
]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ringsearch",
        description=(
            "Search gravitational-wave strain for black-hole ringdowns, measure the "
            "search with injection campaigns, and analyse candidates' overtones."
        ),
        epilog="Run 'ringsearch SUBCOMMAND --help' for each subcommand's options.",
    )
    parser.add_argument("--version", action="version", version=f"ringsearch {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND")
    sub.required = True
    for name in _COMMANDS:
        import_module(f"ringsearch.cli.{name}").register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``ringsearch`` console script; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        status = args.func(args)
    except InputError as exc:
        print(f"ringsearch {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(f"ringsearch {args.command}: error: file not found: {exc.filename}",
              file=sys.stderr)
        return 2
    except BrokenPipeError:
        # the reader (e.g. `| head`) went away: not an error of ours
        import os

        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print(f"ringsearch {args.command}: interrupted", file=sys.stderr)
        return 130
    return int(status or 0)
