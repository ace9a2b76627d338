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
