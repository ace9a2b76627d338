"""Closed-loop replay as a scenario source (host.scenario.replay, a scenario's [replay]).

- The demo's own record replayed closed loop, with the same emulated controller as a process
  over the virtual cable, must reproduce it frame for frame in lockstep: the kernel and the
  controller are deterministic, and the recorded operator/load timeline is applied at the same
  frames (the issue's test; nothing outside the project is needed: the record is the reference).
- A CSV disturbance trace (the shipped invented bite and mains dip of the F3 stand) drives a
  scenario whose expectations are judged: the model's load torque follows the trace held from
  sample to sample, checked here frame by frame against numpy's searchsorted on the trace
  itself; a deeper dip (0.6 pu for 300 ms, below the controller's 311 V mains-loss threshold
  of the shipped profile) makes the no_trip expectation FAIL; a tacho-loss flag in the trace
  is a fault instant an expectation can refer to.
- Bad COMTRADE traces (missing .dat, wrong channel counts, unsorted time) give one line and
  exit 2, refused before anything runs; the undamaged pair is accepted (so the test can fail).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from host.cli import main
from host.errors import ConfigError
from host.record import open_record
from host.scenario import load_scenario
from host.suite.run import run_one

ROOT = Path(__file__).resolve().parents[1]
SCN = ROOT / "configs" / "scenarios"
TRACE = SCN / "f3_bite_dip_trace.csv"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory, kernel):
    run = tmp_path_factory.mktemp("clreplay") / "demo"
    assert main(["demo", "--out", str(run), "--no-plot"]) == 0
    return run


def test_closed_loop_replay_of_the_demo_record_reproduces_it_frame_for_frame(demo_run, capsys):
    assert main(["runs", "replay", str(demo_run), "--closed-loop"]) == 0
    out = capsys.readouterr().out
    assert "frame for frame" in out, out
    rep_dir = demo_run / "replays" / "closed-loop"
    with open_record(demo_run) as src, open_record(rep_dir) as rep:
        assert rep.status == "complete" and rep.meta["replay_source"] == str(src.path)
        a, b = src.frames(), rep.frames()
        assert a.shape == b.shape and len(a) > 4000
        keep = [k for k, c in enumerate(src.columns) if c != "host_work_us"]  # wall time differs
        assert np.array_equal(a[:, keep], b[:, keep])  # every column, not only the compared ones
        texts = [e[2] for e in rep.events() if e[1] == "timeline"]
        assert any(t.startswith("load_step: load torque") for t in texts), texts
    assert (rep_dir / "scenario.toml").is_file()


def _held(trace_t_s, trace_v, t_frame_s, slack_s):
    k = np.searchsorted(trace_t_s, t_frame_s + slack_s, side="right") - 1
    return trace_v[np.clip(k, 0, None)]


def test_a_csv_disturbance_trace_drives_a_judged_scenario(tmp_path):
    row = run_one(str(SCN / "f3_replay_bite_dip.toml"), str(tmp_path), plots=False)
    assert row["outcome"] != "error", row.get("error")
    assert row["passed"], row["verdict"]
    with open_record(row["run_dir"]) as rd:
        rows = rd.frames()
        period = rd.meta["frame_period_s"]
        t_end = rows[:, rd.R["time_s"]]
        tl = rows[:, rd.R["load_torque_Nm"]]
    data = np.loadtxt(TRACE, delimiter=",", skiprows=1)
    want = _held(data[:, 0] * 1e-3, data[:, 1] * 1000.0, t_end - period, 1e-9 + 0.01 * period)
    assert np.allclose(tl, want, rtol=0, atol=1e-9), np.max(np.abs(tl - want))
    assert abs(len(rows) * period - 1.5) < period  # the run is the trace's length

    # a deeper, longer dip in the same trace: the controller trips on mains loss, no_trip FAILS
    deep = tmp_path / "deep"
    deep.mkdir()
    text = TRACE.read_text().splitlines()
    out = [text[0]]
    for line in text[1:]:
        t_ms, tl_k, u, df, run = line.split(",")
        if 700 <= float(t_ms) < 1000:
            u = "0.600"
        out.append(",".join((t_ms, tl_k, u, df, run)))
    (deep / "f3_bite_dip_trace.csv").write_text("\n".join(out) + "\n")
    scn = (SCN / "f3_replay_bite_dip.toml").read_text().replace('"../', f'"{SCN.parent}/')
    (deep / "s.toml").write_text(scn)
    row = run_one(str(deep / "s.toml"), str(tmp_path / "deep-runs"), plots=False)
    assert row["outcome"] != "error", row.get("error")
    by = {e["name"]: e for e in row["verdict"]["expectations"]}
    assert not row["passed"] and not by["no_trip"]["passed"], by


def test_a_fault_instant_in_the_trace_is_a_timeline_event_expectations_refer_to(tmp_path):
    text = TRACE.read_text().splitlines()
    out = [text[0] + ",tacho_flt"] + [line + ("," + ("1" if float(line.split(",")[0]) >= 400 else "0"))
                                       for line in text[1:]]
    (tmp_path / "trace.csv").write_text("\n".join(out) + "\n")
    mp = (ROOT / "configs" / "replay" / "f3_site_recorder_map.toml").read_text()
    (tmp_path / "map.toml").write_text(mp + '\n[faults]\ntacho_loss = { column = "tacho_flt" }\n')
    scn = (SCN / "f3_replay_bite_dip.toml").read_text().replace('"../', f'"{SCN.parent}/')
    scn = scn.replace('source = "f3_bite_dip_trace.csv"', 'source = "trace.csv"')
    scn = scn.replace(f'map = "{SCN.parent}/replay/f3_site_recorder_map.toml"', 'map = "map.toml"')
    scn = scn.split("[[expect]]")[0] + ('[[expect]]\nkind = "trip"\nclass = "tacho_loss"\nafter = "tacho_loss"\n'
                                        'within_ms = 450\n')
    (tmp_path / "s.toml").write_text(scn)
    s = load_scenario(tmp_path / "s.toml")
    fault = [a for a in s.timeline if a.action == "fault"]
    assert len(fault) == 1 and fault[0].id == "tacho_loss" and fault[0].over_s == 0.0
    assert abs(fault[0].at_s - 0.4) < 1e-9
    row = run_one(str(tmp_path / "s.toml"), str(tmp_path / "runs"), plots=False)
    assert row["outcome"] != "error", row.get("error")
    assert row["passed"], row["verdict"]["expectations"]


@pytest.mark.parametrize("damage", ["none", "missing_dat", "channel_count", "unsorted"])
def test_bad_comtrade_traces_give_one_line_and_exit_2(demo_run, tmp_path, capsys, damage):
    ex = tmp_path / "ex"
    assert main(["runs", "export", str(demo_run), "--format", "comtrade", "--from", "5.9", "--to", "6.3",
                 "--into", str(ex)]) == 0
    capsys.readouterr()
    cfg = next(ex.glob("*.cfg"))
    dat = cfg.with_suffix(".dat")
    if damage == "missing_dat":
        dat.unlink()
    elif damage == "channel_count":
        lines = cfg.read_text().split("\n")  # universal newlines: CR/LF read as LF
        tt, na, nd = lines[1].split(",")
        lines[1] = f"{int(tt) + 1},{na},{nd}"
        cfg.write_text("\r\n".join(lines))
    elif damage == "unsorted":
        lines = dat.read_text().split("\n")
        lines[10], lines[11] = lines[11], lines[10]
        dat.write_text("\r\n".join(lines))
    (tmp_path / "map.toml").write_text('[trace]\ntime = "time"\n[inputs]\nload_torque_Nm = "load_torque_Nm"\n')
    scn = (SCN / "f3_replay_bite_dip.toml").read_text().replace('"../', f'"{SCN.parent}/')
    scn = scn.replace('source = "f3_bite_dip_trace.csv"', f'source = "{cfg}"')
    scn = scn.replace(f'map = "{SCN.parent}/replay/f3_site_recorder_map.toml"', 'map = "map.toml"')
    (tmp_path / "s.toml").write_text(scn)
    if damage == "none":
        s = load_scenario(tmp_path / "s.toml")  # the undamaged pair is read (with the comtrade package)
        assert s.replay is not None and abs(s.duration_s - 0.4) < 0.01
        return
    rc = main(["scenario", str(tmp_path / "s.toml"), "--out", str(tmp_path / "runs")])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error: ") and len(err.strip().splitlines()) == 1, err
    assert str(cfg.name) in err or str(dat.name) in err, err
    assert not (tmp_path / "runs").exists()  # refused before anything ran


@pytest.mark.parametrize("bad, where", [
    ('[faults]\nno_such_fault = "x"\n', "faults.no_such_fault"),
    ('[faults]\nmains_dip = { column = "u_pu" }\n', "faults.mains_dip.remaining_pu"),
    ('jog = "run_cmd"\n', "operator.jog"),  # the shipped map ends with its [operator] table
])
def test_bad_replay_maps_give_one_line(tmp_path, bad, where):
    mp = (ROOT / "configs" / "replay" / "f3_site_recorder_map.toml").read_text()
    (tmp_path / "map.toml").write_text(mp + "\n" + bad)
    scn = (SCN / "f3_replay_bite_dip.toml").read_text().replace('"../', f'"{SCN.parent}/')
    scn = scn.replace(f'map = "{SCN.parent}/replay/f3_site_recorder_map.toml"', 'map = "map.toml"')
    scn = scn.replace('source = "f3_bite_dip_trace.csv"', f'source = "{TRACE}"')
    (tmp_path / "s.toml").write_text(scn)
    with pytest.raises(ConfigError) as info:
        load_scenario(tmp_path / "s.toml")
    assert where in str(info.value) and "\n" not in str(info.value)


def test_an_open_loop_map_refuses_operator_and_faults(tmp_path):
    from host.replay import load_trace_map

    mp = tmp_path / "m.toml"
    mp.write_text((ROOT / "configs" / "replay" / "dcrig_frames_map.toml").read_text() + '\n[operator]\nrun = "x"\n')
    with pytest.raises(ConfigError, match="operator: only for a closed-loop replay"):
        load_trace_map(mp)
    shutil.copyfile(ROOT / "configs" / "replay" / "dcrig_frames_map.toml", mp)
    assert load_trace_map(mp).operator == {}
