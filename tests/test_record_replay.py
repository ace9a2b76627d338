"""Open-loop replay of a recorded run (host.replay): the recorded command trace drives the
model with no controller.

With the record's own configs it must reproduce the recorded frames to the bit: the kernel
is deterministic and the replay runs the same HostLoop, lockstep, frame for frame. With one
parameter changed (the armature resistance, doubled) it must report the departure where the
changed parameter starts to matter: not before armature current first flows in the record,
and in the armature current before the speed (the resistance acts on the current through
di/dt = (v - e - R i) / L, and on the speed only through the torque: any machines textbook,
e.g. Chapman, Electric Machinery Fundamentals, ch. 9 - from memory). The field current of the
separately excited stand does not depend on the armature resistance at all.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from host.cli import main
from host.record import open_record
from host.replay import open_loop_replay


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory, kernel):
    run = tmp_path_factory.mktemp("replay") / "demo"
    assert main(["demo", "--out", str(run), "--no-plot"]) == 0
    return run


def test_replay_with_the_records_configs_reproduces_it_frame_for_frame(demo_run):
    res = open_loop_replay(demo_run)
    assert res.identical and not res.departs
    assert all(d.max_abs_diff == 0.0 for d in res.departures)
    with open_record(demo_run) as src, open_record(res.run_dir) as rep:
        assert rep.status == "complete" and rep.meta["run_kind"] == "open_loop_replay"
        a, b = src.frames(), rep.frames()
        keep = [k for k, c in enumerate(src.columns) if c != "host_work_us"]
        assert np.array_equal(a[:, keep], b[:, keep])  # every column, not only the compared ones
        assert any(e[1] == "replay" for e in rep.events())


def test_replay_with_a_changed_parameter_reports_the_departure_where_it_starts(demo_run):
    with open_record(demo_run) as src:
        rows = src.frames()
        ra = src.meta["configs"]["machine"]["values"]["machine.ra_ohm"]
        t = rows[:, src.R["time_s"]]
        ia = rows[:, src.R["armature_current_A"]]
    t_current = t[np.nonzero(np.abs(ia) > 1.0)[0][0]]
    res = open_loop_replay(demo_run, [f"machine.ra_ohm={2 * ra!r}"])
    by = {d.column: d for d in res.departures}
    assert res.departs and not res.identical
    ia_dep = by["armature_current_A"].first_outside_s
    assert ia_dep is not None and t_current <= ia_dep <= t_current + 1.0, (t_current, ia_dep)
    assert by["speed_rpm"].first_outside_s is None or by["speed_rpm"].first_outside_s >= ia_dep
    assert by["field_current_A"].first_outside_s is None and by["field_current_A"].max_abs_diff == 0.0


def test_replay_command_exit_status_and_bad_sources(demo_run, tmp_path, capsys):
    assert main(["runs", "replay", str(demo_run)]) == 0
    assert "frame for frame" in capsys.readouterr().out
    assert main(["runs", "replay", str(demo_run), "--set", "machine.ra_ohm=0.03"]) == 1
    assert "DEPARTS" in capsys.readouterr().out
    # a sim record carries no command trace; a bad tolerance; a text file
    machine = str(Path(__file__).resolve().parents[1] / "configs" / "machines" / "kestrel_f3_stand.toml")
    assert main(["sim", machine, "--t-end", "0.02", "--out", str(tmp_path / "s.csv")]) == 0
    capsys.readouterr()
    for argv in (["runs", "replay", str(tmp_path / "s-run")],
                 ["runs", "replay", str(demo_run), "--tolerance", "speed_rpm=abc"],
                 ["runs", "replay", str(demo_run), "--compare", "no_such_column"],
                 ["runs", "replay", str(tmp_path / "s.csv")]):
        rc = main(argv)
        err = capsys.readouterr().err
        assert rc == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1, (argv, err)


ROOT = Path(__file__).resolve().parents[1]
MAP = ROOT / "configs" / "replay" / "dcrig_frames_map.toml"
F3 = ROOT / "configs" / "machines" / "kestrel_f3_stand.toml"
F3_DUAL = ROOT / "configs" / "converters" / "kestrel_f3_dual.toml"


def test_a_csv_trace_replays_open_loop(demo_run, tmp_path):
    """The demo's own frames.csv as a trace from "another recorder": six significant digits
    per value, commands held per frame. Open loop, rounding integrates, so only the speed and
    field current are held to 1 % of their peak everywhere (the armature current in
    discontinuous conduction near standstill is far more sensitive to a 1e-4 degree change)."""
    from host.replay import trace_replay

    res = trace_replay(demo_run / "frames.csv", MAP, F3, F3_DUAL, run_dir=tmp_path / "rep")
    by = {d.column: d for d in res.departures}
    assert by["speed_rpm"].first_outside_s is None, by["speed_rpm"].line()
    assert by["field_current_A"].first_outside_s is None, by["field_current_A"].line()
    assert by["armature_current_A"].frames_outside < 0.05 * res.frames
    with open_record(tmp_path / "rep") as rd:
        assert rd.status == "complete" and rd.meta["run_kind"] == "trace_replay"
        assert len(rd.frames()) == res.frames > 4000
    # with the armature resistance doubled the speed leaves its tolerance
    with open_record(demo_run) as src:
        ra = src.meta["configs"]["machine"]["values"]["machine.ra_ohm"]
    res2 = trace_replay(demo_run / "frames.csv", MAP, F3, F3_DUAL, [f"machine.ra_ohm={2 * ra!r}"],
                        run_dir=tmp_path / "rep2")
    base, changed = by["armature_current_A"], {d.column: d for d in res2.departures}["armature_current_A"]
    # it departs where current first flows, long before the rounding of the trace shows, and far more often
    assert changed.first_outside_s is not None and changed.frames_outside >= 5 * base.frames_outside + 10
    assert base.first_outside_s is None or changed.first_outside_s < base.first_outside_s


@pytest.mark.parametrize("damage", ["unsorted", "missing_column", "unknown_key", "not_numbers", "no_feedback"])
def test_bad_traces_and_maps_give_one_line(demo_run, tmp_path, capsys, damage):
    trace = tmp_path / "t.csv"
    mp = tmp_path / "m.toml"
    lines = (demo_run / "frames.csv").read_text().splitlines()[:200]
    text = MAP.read_text()
    if damage == "unsorted":
        lines[50], lines[51] = lines[51], lines[50]
    elif damage == "missing_column":
        text = text.replace('armature_cmd = { column = "armature_cmd" }', 'armature_cmd = { column = "alpha_deg" }')
    elif damage == "unknown_key":
        text = text.replace("[commands]", "[commands]\nfiring = 3")
    elif damage == "not_numbers":
        lines[20] = lines[20].replace(",", ",x", 1)
    elif damage == "no_feedback":
        text = text.split("[feedback]")[0]
    trace.write_text("\n".join(lines) + "\n")
    mp.write_text(text)
    rc = main(["runs", "replay", "--trace", str(trace), "--map", str(mp), "--machine", str(F3), "--converter", str(F3_DUAL)])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "t-replay").exists()  # refused before anything ran


def test_a_comtrade_trace_replays_open_loop_and_a_missing_dat_is_one_line(demo_run, tmp_path, capsys):
    """A COMTRADE pair as a drive's recorder would leave it (here our own binary export of the
    demo, read with the independent `comtrade` package): commands quantised to 16 bits, the
    speed and field current still within 1 % of their peaks open loop."""
    from host.replay import trace_replay

    assert main(["runs", "export", str(demo_run), "--format", "comtrade", "--binary", "--into", str(tmp_path)]) == 0
    cfg = tmp_path / "run-1999-bin.cfg"
    with open_record(demo_run) as src:
        period_s = src.meta["frame_period_us"] * 1e-6
    mp = tmp_path / "map.toml"
    # COMTRADE time runs from the first sample, which is the end of the first frame
    mp.write_text(MAP.read_text().replace('time = "time_s"', 'time = "time"')
                  .replace("start_s = 0.0", f"start_s = {-period_s!r}"))
    res = trace_replay(cfg, mp, F3, F3_DUAL, run_dir=tmp_path / "rep")
    by = {d.column: d for d in res.departures}
    assert by["speed_rpm"].first_outside_s is None and by["field_current_A"].first_outside_s is None
    assert by["armature_current_A"].frames_outside < 0.05 * res.frames
    (tmp_path / "run-1999-bin.dat").unlink()
    rc = main(["runs", "replay", "--trace", str(cfg), "--map", str(mp), "--machine", str(F3)])
    err = capsys.readouterr().err
    assert rc == 2 and "run-1999-bin.dat is missing" in err and len(err.strip().splitlines()) == 1
