"""Every run keeps a record, as a user runs it: Ctrl-C and SIGKILL on `dcrig demo` and
`dcrig sim`, run folders never overwritten, `dcrig runs` on good and bad files.

The rows of a killed or interrupted `sim` are compared with an uninterrupted run of the
same model (host.sim.run_offline, deterministic): a prefix, exact to the bit. The outside
guarantee leaned on is SQLite's atomic commit (https://sqlite.org/atomiccommit.html).
Every wait has a timeout; nothing here asserts a speed.
"""

from __future__ import annotations

import csv
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from host.cli import main
from host.record import open_record

ROOT = Path(__file__).resolve().parents[1]
F3 = ROOT / "configs" / "machines" / "kestrel_f3_stand.toml"
TIMEOUT_S = 240


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _spawn(*args, cwd=None):
    return subprocess.Popen([sys.executable, "-m", "host.cli", *map(str, args)], env=_env(), cwd=cwd,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_rows(record: Path, n: int, proc, timeout_s: float = TIMEOUT_S) -> int:
    """Wait until the live record holds at least n rows (the run is under way); on failure
    the process is killed, never left running."""
    try:
        return _wait_rows_inner(record, n, proc, timeout_s)
    except BaseException:
        if proc.poll() is None:
            proc.kill()
            proc.communicate(timeout=10)
        raise


def _wait_rows_inner(record: Path, n: int, proc, timeout_s: float) -> int:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"the run ended early: {proc.communicate()}")
        if record.is_file():
            try:
                with open_record(record) as rd:
                    got = len(rd.frames())
                if got >= n:
                    return got
            except Exception:  # noqa: BLE001 - the file is being created; try again
                pass
        time.sleep(0.1)
    raise AssertionError(f"{record}: fewer than {n} rows within {timeout_s} s")


def _finish(proc, timeout_s: float = TIMEOUT_S):
    try:
        out, err = proc.communicate(timeout=timeout_s)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate(timeout=10)
        raise AssertionError(f"did not end within {timeout_s} s after the signal:\n{out}\n{err}")
    return proc.returncode, out, err


def _reference_rows(n_rows: int, sample_s: float) -> np.ndarray:
    from host.config import load
    from host.params import pack
    from host.sim import run_offline

    plant = pack(load("machine", F3))
    _, Y = run_offline(plant, (n_rows - 1) * sample_s, sample_s)
    return Y


def test_ctrl_c_on_a_long_sim_keeps_every_computed_row(kernel, tmp_path):
    out = tmp_path / "long.csv"
    proc = _spawn("sim", F3, "--t-end", "1500", "--sample", "0.001", "--out", out)
    record = tmp_path / "long-run" / "record.sqlite"
    _wait_rows(record, 2000, proc)
    proc.send_signal(signal.SIGINT)
    rc, so, se = _finish(proc)
    assert rc == 130, (so, se)
    assert "Traceback" not in se and se.strip().splitlines() == ["error: interrupted"], se
    assert "interrupted at" in so and "kept" in so
    with open_record(record) as rd:
        assert rd.status == "stopped"
        rows = rd.frames()
    assert len(rows) >= 2000
    ref = _reference_rows(len(rows), 0.001)
    assert np.array_equal(rows, ref)  # every computed row, bit for bit
    with out.open() as fh:
        csv_rows = list(csv.reader(fh))
    assert len(csv_rows) == len(rows) + 1  # the CSV holds the same rows, not a cut file


def test_sigint_is_honoured_quickly_in_one_huge_sample(kernel, tmp_path):
    """--sample 1e5 s is 5e9 steps in one sample: the kernel is called in bounded chunks, so the
    interrupt lands between calls (the timeout here is a hang guard, not a speed check)."""
    out = tmp_path / "huge.csv"
    proc = _spawn("sim", F3, "--t-end", "1e5", "--sample", "1e5", "--out", out)
    record = tmp_path / "huge-run" / "record.sqlite"
    _wait_rows(record, 1, proc)  # the initial row is in: the long sample is being computed
    time.sleep(0.5)
    proc.send_signal(signal.SIGINT)
    rc, so, se = _finish(proc, timeout_s=60)
    assert rc == 130 and "Traceback" not in se, se
    with open_record(record) as rd:
        assert rd.status == "stopped" and len(rd.frames()) >= 1


def test_sigkill_on_sim_leaves_an_exact_prefix_marked_unfinished(kernel, tmp_path):
    out = tmp_path / "k.csv"
    (tmp_path / "k.csv").write_text("an earlier run's file\n")
    proc = _spawn("sim", F3, "--t-end", "1500", "--sample", "0.001", "--out", out)
    record = tmp_path / "k-run" / "record.sqlite"
    _wait_rows(record, 1000, proc)
    proc.send_signal(signal.SIGKILL)
    _finish(proc)
    assert not out.exists()  # the earlier run's CSV cannot pass for this one
    with open_record(record) as rd:
        assert rd.status == "unfinished"
        rows = rd.frames()
    assert np.array_equal(rows, _reference_rows(len(rows), 0.001))


def test_sim_run_folders_are_never_overwritten(kernel, tmp_path, capsys):
    for _ in range(2):
        rc = main(["sim", str(F3), "--t-end", "0.05", "--out", str(tmp_path / "s.csv")])
        assert rc == 0, capsys.readouterr().err
    assert (tmp_path / "s-run" / "record.sqlite").is_file() and (tmp_path / "s-run-2" / "record.sqlite").is_file()
    with open_record(tmp_path / "s-run") as a, open_record(tmp_path / "s-run-2") as b:
        assert a.status == b.status == "complete"
        assert np.array_equal(a.frames(), b.frames())
        assert a.meta["config_sha256"] == b.meta["config_sha256"]
    assert (tmp_path / "s-run" / "configs" / "machine.toml").is_file()


def test_ctrl_c_on_demo_keeps_the_record_and_the_exports(kernel, tmp_path):
    run = tmp_path / "demo"
    proc = _spawn("demo", "--out", run, "--no-plot")
    _wait_rows(run / "record.sqlite", 600, proc)
    proc.send_signal(signal.SIGINT)
    rc, so, se = _finish(proc)
    assert rc == 130, (so, se)
    assert "Traceback" not in se and "Traceback" not in so, se
    assert "summary (run stopped early)" in so
    with open_record(run) as rd:
        assert rd.status == "stopped"
        rows = rd.frames()
        events = rd.events()
    assert len(rows) >= 600
    with (run / "frames.csv").open() as fh:
        assert sum(1 for _ in fh) == len(rows) + 1
    ev = (run / "events.csv").read_text()
    assert "run stopped early" in ev and "counters" in ev
    assert any(e[1] == "counters" for e in events)


def test_demo_twice_into_one_folder_gets_two_run_folders(kernel, tmp_path, capsys):
    run = tmp_path / "d"
    for _ in range(2):
        assert main(["demo", "--out", str(run), "--no-plot"]) == 0
    out = capsys.readouterr().out
    assert f"recording to {run}-2" in out
    with open_record(run) as a, open_record(tmp_path / "d-2") as b:
        assert a.status == b.status == "complete"
        assert len(a.frames()) == len(b.frames()) > 4000  # lockstep: the same run twice
    rc = main(["runs", "list", str(tmp_path)])
    listed = capsys.readouterr().out
    assert rc == 0 and "d-2" in listed and listed.count("complete") == 2
    rc = main(["runs", "show", str(run)])
    shown = capsys.readouterr().out
    assert rc == 0 and "status: complete" in shown and "trips: none" in shown and "counters: frames" in shown


def test_a_folder_that_cannot_be_made_is_refused_before_the_run(tmp_path, capsys):
    (tmp_path / "file").write_text("")
    rc = main(["demo", "--out", str(tmp_path / "file" / "run")])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error: --out:") and len(err.strip().splitlines()) == 1
    rc = main(["sim", str(F3), "--t-end", "0.1", "--out", str(tmp_path / "nodir" / "x.csv")])
    err = capsys.readouterr().err
    assert rc == 2 and "does not exist" in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("kind", ["text", "truncated", "foreign", "missing", "folder_without_record"])
def test_runs_show_and_export_refuse_bad_files_with_one_line(tmp_path, capsys, kind):
    import sqlite3

    from host.record import RunRecorder

    p = tmp_path / "r.sqlite"
    if kind == "text":
        p.write_text("time_s,speed_rpm\n")
    elif kind == "truncated":
        with RunRecorder(tmp_path / "good.sqlite", ["time_s", "x"]) as rec:
            rec.frame_block(np.column_stack([np.arange(50000.0), np.arange(50000.0)]))
        raw = (tmp_path / "good.sqlite").read_bytes()
        p.write_bytes(raw[: len(raw) // 2])
    elif kind == "foreign":
        db = sqlite3.connect(p)
        db.execute("CREATE TABLE frames(t)")
        db.commit()
        db.close()
    elif kind == "folder_without_record":
        p = tmp_path / "emptyrun"
        p.mkdir()
    for argv in (["runs", "show", str(p)], ["runs", "export", str(p), "--format", "comtrade"]):
        rc = main(argv)
        err = capsys.readouterr().err
        assert rc == 2, (argv, err)
        assert err.startswith("error: ") and len(err.strip().splitlines()) == 1, err


def test_runs_export_writes_comtrade_that_the_independent_reader_opens(tmp_path, capsys):
    import comtrade  # independent reader (PyPI: comtrade)

    from host.record import RunRecorder

    cols = ["time_s", "armature_current_A", "speed_rpm", "controller_trip", "model_status"]
    t = np.arange(3000) / 300
    rows = np.column_stack([t, 900 * np.sin(t), 500 * (1 - np.exp(-t)), (t >= 7).astype(float), (t > 3) * 1.0])
    run = tmp_path / "run"
    run.mkdir()
    with RunRecorder(run / "record.sqlite", cols, {"status_bits": {"model_status": {"0": "discontinuous_conduction"}}}) as rec:
        rec.frame_block(rows)
        rec.event(7.0, "trip", "controller tripped, code 2")
    rc = main(["runs", "export", str(run), "--format", "comtrade", "--revision", "2013", "--pre", "0.2", "--post", "0.3"])
    assert rc == 0, capsys.readouterr().err
    ct = comtrade.Comtrade(use_double_precision=True)
    ct.load(str(run / "exports" / "trip-1-2013.cfg"), str(run / "exports" / "trip-1-2013.dat"))
    assert ct.total_samples == int(np.sum((t >= 6.8 - 1e-9) & (t <= 7.3 + 1e-9)))
    assert ct.status_channel_ids == ["controller_trip", "model_status.discontinuous_conduction"]
    assert abs(ct.trigger_time - 0.2) < 2e-6


@pytest.mark.parametrize("delay_s", [0.0, 0.3])
def test_ctrl_c_right_after_start_is_one_line(delay_s):
    from test_cli_interrupt_and_waits import _wait_until_mapped

    proc = _spawn("check", F3)
    # a signal before the interpreter has installed its own SIGINT handler ends the process by
    # the default action, before any dcrig code runs: wait until the imports are under way
    assert _wait_until_mapped(proc.pid, "numpy") or proc.poll() is not None
    time.sleep(delay_s)
    proc.send_signal(signal.SIGINT)
    rc, so, se = _finish(proc, timeout_s=60)
    assert "Traceback" not in se, se
    assert rc in (0, 130)  # 0 when it had finished before the signal
    if rc == 130:
        assert se.strip().splitlines() == ["error: interrupted"]


def test_a_scenario_record_says_it_is_one(kernel, tmp_path, capsys):
    # `dcrig runs list` printed "?" as the kind of every scenario record
    scn = ROOT / "configs" / "scenarios" / "f3_armature_short.toml"
    assert main(["scenario", str(scn), "--out", str(tmp_path), "--no-plot"]) in (0, 1)
    (run_dir,) = [p for p in tmp_path.iterdir() if p.is_dir()]
    with open_record(run_dir) as rd:
        assert rd.meta["run_kind"] == "scenario" and rd.meta["run_name"] == "f3_armature_short"
    capsys.readouterr()
    assert main(["runs", "list", str(tmp_path)]) == 0
    listed = [ln for ln in capsys.readouterr().out.splitlines() if str(run_dir) in ln]
    assert len(listed) == 1 and " scenario " in listed[0], listed


def test_ctrl_c_on_a_scenario_says_where_the_record_is(kernel, tmp_path):
    # `dcrig scenario` said only "error: interrupted": the user had to look for the run folder
    scn = tmp_path / "long_run.toml"
    cfg = ROOT / "configs"
    scn.write_text(f"""
[scenario]
name = "long_run"
duration_s = 600.0
[plant]
machine = "{(cfg / 'machines' / 'kestrel_f3_stand.toml').as_posix()}"
converter = "{(cfg / 'converters' / 'kestrel_f3_bridge.toml').as_posix()}"
[controller]
kind = "emulated"
settings = "{(cfg / 'controllers' / 'kestrel_f3_stand.toml').as_posix()}"
[start]
state = "running"
speed_rpm = 400.0
[[expect]]
kind = "no_trip"
""")
    out = tmp_path / "runs"
    proc = _spawn("scenario", scn, "--out", out, "--no-plot")
    _wait_rows(out / "long_run" / "record.sqlite", 300, proc)
    proc.send_signal(signal.SIGINT)
    rc, so, se = _finish(proc)
    assert rc == 130, (so, se)
    assert se.strip().splitlines() == ["error: interrupted"], se
    assert f"interrupted: the record so far is kept (status stopped): {out / 'long_run'}" in so, so
    with open_record(out / "long_run") as rd:
        assert rd.status == "stopped" and len(rd.frames()) >= 300
