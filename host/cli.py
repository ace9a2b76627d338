"""The `dcrig` command: finds the subcommand modules and runs one. Thin: no logic here.

Every DcrigError becomes one line `error: ...` on stderr and exit status 2; `--debug` shows
the traceback instead.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from .errors import DcrigError

# one module per subcommand under host.commands, each with add_subparser(subparsers)
COMMANDS = ("check", "op", "sim", "demo", "serve", "controller", "runs", "scenario", "suite", "campaign")

SAFETY = (
    "CAUTION: dcrig models a machine; it does not make a real one safe. Energise real drives only\n"
    "under your site's lock-out rules, local electrical codes and licensed practice. An unloaded\n"
    "series motor runs away; a shunt motor that loses its field overspeeds; armature and field\n"
    "inductances store energy that arcs when broken. Never rely on a simulated trip for safety."
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="dcrig",
        description="Hardware-in-the-loop host for thyristor-fed DC drives.",
        epilog=SAFETY,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f"host.commands.{name}")
        except ModuleNotFoundError as err:
            if err.name == f"host.commands.{name}":
                continue  # not built yet
            raise
        mod.add_subparser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    try:
        # the subcommand modules import numpy and friends here: a Ctrl-C in the first second
        # lands in these imports and must end like any other interrupt, in one line
        parser = build_parser()
        args = parser.parse_args(argv)
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except DcrigError as err:
        if args.debug:
            raise
        print(f"error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    try:
        sys.exit(main())
    except KeyboardInterrupt:  # between main's return and exit: still one line
        print("error: interrupted", file=sys.stderr)
        sys.exit(130)
