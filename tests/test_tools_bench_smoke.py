"""Smoke test of the benchmark scripts in tools/: each runs in --quick mode and prints its tables.

Owns no timing claims: speed is read from the printed tables by people, never asserted here
(project rule). What is asserted: the scripts run, print markdown tables with every
measurement row and a verdict line per target, reject bad options with one line and exit
status 2, and the C anchor (an independent plain-C integration of the same equations,
tools/bench_c/sep_heun.c) ends in the same state as the numba kernel.
Both scripts run at once, as separate processes, to keep the wall time short.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TIMEOUT_S = 180  # generous: the machine may be shared; a warm numba cache makes it seconds


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _start(script, *args):
    return subprocess.Popen([sys.executable, str(ROOT / "tools" / script), *args], cwd=str(ROOT), env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _finish(proc):
    try:
        out, err = proc.communicate(timeout=TIMEOUT_S)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate(timeout=10)
        raise AssertionError(f"benchmark script did not finish within {TIMEOUT_S} s:\n{out}\n{err}")
    return proc.returncode, out, err


def _table_rows(text: str, first_header: str) -> list[list[str]]:
    """Rows (cells) of the markdown table whose first header cell is first_header."""
    lines = text.splitlines()
    for i, line in enumerate(lines):
        if line.startswith(f"| {first_header} |"):
            assert re.fullmatch(r"\|(---\|)+", lines[i + 1]), f"no separator under the header: {lines[i + 1]!r}"
            rows = []
            for row in lines[i + 2 :]:
                if not row.startswith("|"):
                    break
                rows.append([c.strip() for c in row.strip("|").split("|")])
            return rows
    raise AssertionError(f"no table with header '{first_header}' in:\n{text}")


def test_both_benchmarks_print_their_tables(kernel):
    # the `kernel` fixture has compiled (or loaded) the kernel into the project cache, so the
    # model script's fresh processes only load it
    model = _start("bench_model.py", "--quick", "--repeats", "1", "--sim-seconds", "0.05")
    link = _start("bench_link.py", "--quick", "--paced-seconds", "0.5", "--frames", "60", "--echo", "100")
    rc_m, out_m, err_m = _finish(model)
    rc_l, out_l, err_l = _finish(link)
    assert rc_m == 0, err_m
    assert rc_l == 0, err_l
    assert "Traceback" not in err_m + err_l

    # model: CPU and versions in the caption, one row per measurement, a verdict line
    assert "Python 3." in out_m and "numba " in out_m and "Best of 1 runs" in out_m
    rows = _table_rows(out_m, "measurement")
    names = [r[0] for r in rows]
    for want in ("DC source, separate", "DC source, shunt", "DC source, series", "DC source, compound_long",
                 "DC source, compound_short", "switched bridge, frame", "averaged bridge, frame",
                 "per call, n_sub=1", "cached start (project cache)", "C anchor (cc -O2)", "numba / C",
                 "tuned C (cc -O3)", "kernel / tuned C", "tuned C bridge (cc -O3)", "kernel / tuned C bridge"):
        assert want in names, f"{want!r} missing from {names}"
    assert all(len(r) == 10 for r in rows), "every row has the header's ten cells"
    for r in rows:
        if r[0].startswith(("DC source", "switched bridge", "averaged bridge")):
            assert float(r[6]) > 0.0 and "nonfinite" not in r[9], r
    # the numba kernel and the independent C integration end in the same state: Heun's method
    # with the same equations differs only by floating-point rounding order (from memory: a
    # few ulp per step, far below 1e-6 relative over 0.05 s of simulated time)
    cmp_row = next(r for r in rows if r[0] == "numba / C")
    diffs = dict(re.findall(r"(ia|if|speed|temp|angle) ([0-9.e+-]+)", cmp_row[9]))
    assert set(diffs) == {"ia", "if", "speed", "temp", "angle"}, cmp_row
    assert all(float(v) < 1e-6 for v in diffs.values()), diffs
    # the tuned references (tools/bench_c/sep_tuned.c, bridge_tuned.c) integrate the same
    # equations in their own code: same final state to rounding, bridge switching included
    for name in ("kernel / tuned C", "kernel / tuned C bridge"):
        row = next(r for r in rows if r[0] == name)
        diffs = dict(re.findall(r"(ia|if|speed|temp|angle|mains|vt|pulse mean vt|line currents) ([0-9.e+-]+)", row[9]))
        assert {"ia", "if", "speed", "temp", "angle"} <= set(diffs), row
        assert all(float(v) < 1e-6 for v in diffs.values()), (name, diffs)
        if name.endswith("bridge"):
            assert "conducting devices same" in row[9], row
    assert re.search(r"target: switched bridge at 10 us >= 200x real time on one core: measured \d+x -> (MET|NOT MET)",
                     out_m)
    for case in ("separately excited on a DC source", "switched bridge at 10 us"):
        assert re.search(rf"target: kernel within 1.3x of the tuned C reference, {case}: measured [0-9.]+x on CPU time -> "
                         r"(MET|NOT MET)", out_m), case
    for what in ("first-run compile", "cached start"):
        assert f"target: {what} of the demo configuration <= " in out_m, what

    # link: both tables and one verdict per target
    rows = _table_rows(out_l, "measurement")
    names = " ".join(r[0] for r in rows)
    assert "pty echo anchor" in names and names.count("lockstep with the emulated controller") == 2
    assert "paced 1000 Hz" in names
    sizes = _table_rows(out_l, "frame")
    assert len(sizes) == 6
    for r in sizes[:4]:
        # wire bytes = header+body + CRC + COBS + delimiter, and 921600 baud / (10 x wire)
        payload, crc, cobs, delim, wire = (int(c) for c in r[2:7])
        assert wire == payload + crc + cobs + delim and crc == 2 and cobs == 1 and delim == 1, r
        assert int(r[8].rstrip("/s").replace(",", "")) == round(921_600 / (10 * wire)), r
    for target in ("lockstep >= 80% of the echo rate", "host work per frame p99 < 100 us",
                   "no deadline miss at 1 kHz"):
        assert re.search(rf"target {re.escape(target)}.*-> (MET|NOT MET)", out_l), target
    # issue 12's lean path: a verdict, and where it is not met, the kernel's measured share
    lean = re.search(r"target \(issue 12\) lean real-time path p99 <= 50 us.*-> (MET|NOT MET)(.*)", out_l)
    assert lean, out_l
    if lean.group(1) == "NOT MET":
        assert re.search(r"the kernel call \d+ us", lean.group(2)), lean.group(0)


def test_bad_options_give_one_line_and_status_2():
    for script, args in (("bench_model.py", ["--repeats", "0"]),
                         ("bench_link.py", ["--settings", str(ROOT / "no_such_settings.toml")])):
        rc, out, err = _finish(_start(script, *args))
        assert rc == 2, (script, out, err)
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: ") and "Traceback" not in err, (script, err)


def test_fast_path_breakdown_times_the_parts_and_restores_the_classes(kernel):
    # tools/bench_suite.py times the kernel and the emulated controller of in-process runs by
    # wrapping Plant.kernel and DriveController.step; the parts must fit inside the frame,
    # and the wrappers must be gone afterwards (later runs in this process stay untimed)
    sys.path.insert(0, str(ROOT / "tools"))
    try:
        import bench_suite
    finally:
        sys.path.pop(0)
    from host.controller.drive import DriveController
    from host.params import Plant

    kernel_before, step_before = Plant.kernel, DriveController.step
    r = bench_suite.fast_path_breakdown(str(ROOT / "configs" / "scenarios" / "f3_shorted_thyristor.toml"), repeats=1)
    assert Plant.kernel is kernel_before and DriveController.step is step_before
    plain, timed = r["plain"], r["timed"]
    assert plain["frames"] == timed["frames"] > 100
    assert plain["kernel_us"] == plain["controller_us"] == 0.0  # the plain runs are not timed
    assert 0.0 < timed["kernel_us"] and 0.0 < timed["controller_us"]
    assert timed["kernel_us"] + timed["controller_us"] < timed["frame_us"]
