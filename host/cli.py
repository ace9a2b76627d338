"""The `dcrig` command: finds the subcommand modules and runs one. Thin: no logic here.

Every DcrigError becomes one line `error: ...` on stderr and exit status 2; `--debug` shows
the traceback instead.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import textwrap

from . import interrupts
from .errors import DcrigError

# one module per subcommand under host.commands, each with add_subparser(subparsers)
COMMANDS = ("check", "steady", "sim", "demo", "serve", "controller", "identify", "calc", "runs", "scenario", "suite",
            "campaign")
# old command names that still work for one release, listed nowhere (not in help, not in the
# invalid-choice message): main() swaps them for the new name and prints a note
HIDDEN_ALIASES = {"op": "steady"}

# The deferral every caution ends with: the help of every command, the README, the docs'
# caution boxes, the config-reference generator and the C library's header carry this exact
# sentence (tests/test_cautions.py checks them all against this string).
DEFER_TO_CODES = (
    "Follow local electrical codes and licensed practice, and leave the wiring, energising and "
    "protection of a real drive to a qualified person; nothing in dcrig replaces them."
)

SAFETY = textwrap.fill(
    "CAUTION: dcrig models a machine; it does not make a real one safe. An unloaded series motor "
    "runs away; a shunt motor that loses its field overspeeds; armature and field inductances "
    "store energy that arcs when broken. Never rely on a simulated trip for safety. Keep to your "
    "site's lock-out rules. " + DEFER_TO_CODES,
    width=92,
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


def _swap_hidden_alias(argv: list[str]) -> list[str]:
    for i, word in enumerate(argv):
        if word.startswith("-"):
            continue  # a global option such as --debug
        if word in HIDDEN_ALIASES:
            new = HIDDEN_ALIASES[word]
            print(f"note: `dcrig {word}` is renamed to `dcrig {new}`; the old name goes in the next release",
                  file=sys.stderr)
            return [*argv[:i], new, *argv[i + 1:]]
        break
    return argv


def main(argv: list[str] | None = None) -> int:
    # Ctrl-C may come at any moment, also while the subcommands import numpy, numba and
    # matplotlib (the first second of every run): one line and 130, never a traceback.
    # Until the command runs nothing is open, so it quits at once (host/interrupts.py says why)
    interrupts.quit_at_once()
    argv = _swap_hidden_alias(list(sys.argv[1:] if argv is None else argv))
    debug = "--debug" in argv
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            parser.print_help()
            return 2
        interrupts.raise_normally()
        code = int(args.func(args) or 0)
        interrupts.raise_if_lost()
        return code
    except DcrigError as err:
        if debug:
            raise
        print(f"error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        if debug:
            raise
        print("error: interrupted", file=sys.stderr)
        return 130
    except Exception as err:
        if debug or not interrupts.caused_by_interrupt(err):
            raise
        print("error: interrupted", file=sys.stderr)
        return 130
    finally:
        interrupts.raise_normally()  # main() called in-process (tests) leaves Python's own handler


def run() -> None:
    """Console entry point: exit with main()'s status; a Ctrl-C during interpreter shutdown
    (after main returned) still gives no traceback."""
    try:
        code = main()
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        code = 130
    # the work is done and the record closed: a Ctrl-C from here on has nothing left to stop.
    # Interpreter shutdown puts SIGINT back to its default, so without this a late Ctrl-C
    # killed the process by the signal (status -2, found by tools/crash_trials.py) instead of
    # letting it exit with its own status
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if code == 130:
        interrupts.exit_interrupted(code)  # the interpreter's own exit may turn 130 into -2
    sys.exit(code)


if __name__ == "__main__":
    run()
