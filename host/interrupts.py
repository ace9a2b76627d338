"""Ctrl-C at any moment: one line `error: interrupted`, status 130, never a traceback, never lost.

Four ways CPython gets this wrong on its own, all found by interrupting `dcrig` at random
moments of its first second (tools/crash_trials.py, tests/test_cli_interrupt_and_waits.py):

* a KeyboardInterrupt raised inside a weakref or ctypes callback (importlib's module locks,
  llvmlite's object cache while numba compiles) is printed as "Exception ignored ..." with a
  traceback, and then swallowed: the run carries on as if Ctrl-C had not been pressed;
* one that unwinds through an eval()/exec() of a string (numpy, enum and dataclass code does
  that while importing) marks the interpreter, which under `python -m host.cli` then ends
  itself by SIGINT at exit: status -2 instead of the 130 that main() returned;
* one raised in a descriptor's __set_name__ (class bodies of modules that numba's compiler
  imports lazily) comes out as a RuntimeError with the interrupt as its cause;
* one that arrives while the command modules import has nothing to clean up, yet unwinds
  through half-initialised modules.

So: until the command runs (imports and argument parsing) a Ctrl-C quits at once; from
then on it raises KeyboardInterrupt as usual, so that whatever is open gets closed and kept,
with a silent hook that notes a swallowed one and `raise_if_lost()` at the points after
which it can have happened (kernel compile, config loading); an error caused by an interrupt
counts as the interrupt (`caused_by_interrupt`); and host.cli.run ends an interrupted process
with os._exit(130) after the exit handlers ran.
"""

from __future__ import annotations

import os
import signal
import sys
import threading

_LINE = b"error: interrupted\n"
_lost = False  # a KeyboardInterrupt was swallowed by a callback since the last raise_if_lost()


def _quit_now(signum, frame):
    os.write(2, _LINE)
    os._exit(130)


def _unraisable(info) -> None:
    global _lost
    if info.exc_type is not None and issubclass(info.exc_type, KeyboardInterrupt):
        _lost = True  # raised again by the next raise_if_lost(); nothing to print
        return
    sys.__unraisablehook__(info)


def quit_at_once() -> None:
    """While nothing is open: a Ctrl-C writes the line and exits 130 at once."""
    sys.unraisablehook = _unraisable
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, _quit_now)


def raise_normally() -> None:
    """From here a Ctrl-C raises KeyboardInterrupt, so open records and links get closed."""
    sys.unraisablehook = _unraisable
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, signal.default_int_handler)


def raise_if_lost() -> None:
    """Raise the KeyboardInterrupt a callback swallowed since the last call, if any."""
    global _lost
    if _lost:
        _lost = False
        raise KeyboardInterrupt


def caused_by_interrupt(err: BaseException) -> bool:
    """True when err is a KeyboardInterrupt or was raised while handling one or because of
    one (Python 3.11 wraps one raised in a descriptor's __set_name__, which lazy imports inside
    numba's compiler run, in a RuntimeError)."""
    seen = set()
    while err is not None and id(err) not in seen:
        if isinstance(err, KeyboardInterrupt):
            return True
        seen.add(id(err))
        err = err.__cause__ or err.__context__
    return False


def exit_interrupted(code: int = 130) -> None:
    """End an interrupted process with `code`: let worker threads finish (bounded), run the
    exit handlers (clusters, logging), flush, and leave without the interpreter's own exit,
    which may turn a handled KeyboardInterrupt into death by SIGINT (see above)."""
    import atexit

    me = threading.current_thread()
    for th in threading.enumerate():
        if th is not me and not th.daemon:
            th.join(5.0)
    try:
        atexit._run_exitfuncs()
    finally:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):
                pass
        os._exit(code)
