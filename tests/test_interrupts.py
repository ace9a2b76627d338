"""host/interrupts.py: the ways CPython mishandles a Ctrl-C, each provoked on purpose.

Project rule (README, DEVELOPERS): a Ctrl-C is one line `error: interrupted` and status 130,
never a traceback and never lost. The CPython behaviours provoked here were found by
interrupting `dcrig` at random moments (tests/test_cli_interrupt_and_waits.py) and are
CPython 3.11's: run_eval_code_obj in Python/pythonrun.c sets _Py_UnhandledKeyboardInterrupt
when an interrupt leaves an eval() of a string (read in CPython's source; that Py_RunMain in
Modules/main.c then exits by SIGINT is from memory, and measured here); the RuntimeError around
one raised in __set_name__ was seen here on 3.11 (that 3.12 stopped wrapping it: from
memory). Each is provoked here, not assumed.
"""

from __future__ import annotations

import gc
import os
import subprocess
import sys
import weakref
from pathlib import Path

import pytest

from host import interrupts

ROOT = Path(__file__).resolve().parents[1]


def _python(code: str, tmp_path: Path) -> subprocess.CompletedProcess:
    """Run code as `python -m` runs host.cli: only that way (runpy) does CPython 3.11 turn a
    marked interrupt into death by SIGINT; `-c` and script files exit through Py_Exit."""
    (tmp_path / "probe_mod.py").write_text(code)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(tmp_path), str(ROOT), env.get("PYTHONPATH", "")])
    return subprocess.run([sys.executable, "-m", "probe_mod"], env=env, capture_output=True, text=True,
                          timeout=120)


def test_an_interrupt_handled_after_leaving_an_eval_still_exits_130(tmp_path):
    # the interpreter would end itself by SIGINT (status -2) although main() returned 130
    code = (
        "import host.cli as cli\n"
        "def fake_main():\n"
        "    try:\n"
        "        eval('(lambda: (_ for _ in ()).throw(KeyboardInterrupt))()')\n"
        "    except KeyboardInterrupt:\n"
        "        print('error: interrupted', file=__import__('sys').stderr)\n"
        "        return 130\n"
        "cli.main = fake_main\n"
        "cli.run()\n"
    )
    done = _python(code, tmp_path)
    assert done.returncode == 130, (done.returncode, done.stderr)
    assert done.stderr.strip() == "error: interrupted"


def test_the_same_without_the_guard_dies_by_sigint(tmp_path):
    # the control: this is what exit_interrupted() is there for (if CPython stops doing it,
    # this test says so and the guard can go)
    code = (
        "import sys\n"
        "try:\n"
        "    eval('(lambda: (_ for _ in ()).throw(KeyboardInterrupt))()')\n"
        "except KeyboardInterrupt:\n"
        "    pass\n"
        "sys.exit(130)\n"
    )
    done = _python(code, tmp_path)
    assert done.returncode in (-2, 130)
    if sys.version_info[:2] == (3, 11):
        assert done.returncode == -2


def test_an_interrupt_swallowed_by_a_callback_is_raised_again_and_not_printed(capsys):
    class Thing:
        pass

    def callback(_ref):
        raise KeyboardInterrupt  # as when the signal lands inside importlib's lock callback

    old_hook = sys.unraisablehook
    try:
        interrupts.raise_normally()  # installs the hook (the signal handler only in the main thread)
        t = Thing()
        ref = weakref.ref(t, callback)
        del t
        gc.collect()
        assert ref() is None
        with pytest.raises(KeyboardInterrupt):
            interrupts.raise_if_lost()
        interrupts.raise_if_lost()  # raised once, not twice
    finally:
        sys.unraisablehook = old_hook
    assert "Exception ignored" not in capsys.readouterr().err


def test_other_unraisable_errors_are_still_printed(tmp_path):
    code = (
        "import gc, weakref\n"
        "from host import interrupts\n"
        "interrupts.raise_normally()\n"
        "class T: pass\n"
        "def cb(_r): raise ValueError('boom')\n"
        "t = T(); r = weakref.ref(t, cb); del t; gc.collect()\n"
        "interrupts.raise_if_lost()\n"
    )
    done = _python(code, tmp_path)
    assert done.returncode == 0, done.stderr
    assert "ValueError: boom" in done.stderr


def test_an_error_caused_by_an_interrupt_counts_as_one():
    try:
        try:
            raise KeyboardInterrupt
        except KeyboardInterrupt as ki:
            raise RuntimeError("Error calling __set_name__") from ki
    except RuntimeError as err:
        assert interrupts.caused_by_interrupt(err)
    try:
        try:
            raise KeyboardInterrupt
        except KeyboardInterrupt:
            raise OSError("while cleaning up")  # context, not cause
    except OSError as err:
        assert interrupts.caused_by_interrupt(err)
    assert not interrupts.caused_by_interrupt(ValueError("plain"))
    assert interrupts.caused_by_interrupt(KeyboardInterrupt())


def test_set_name_wrapping_is_reported_as_interrupted_by_main(capsys):
    from host import cli

    class Boom:
        def __set_name__(self, owner, name):
            raise KeyboardInterrupt

    def func(_args):
        type("Made", (), {"x": Boom()})  # 3.11: RuntimeError caused by the KeyboardInterrupt
        return 0

    import argparse

    real = cli.build_parser

    def parser():
        p = argparse.ArgumentParser()
        p.set_defaults(func=func)
        return p

    cli.build_parser = parser
    try:
        assert cli.main([]) == 130
    finally:
        cli.build_parser = real
    assert capsys.readouterr().err.strip() == "error: interrupted"
