"""The closed-loop commands as a user runs them: `dcrig demo`, and `dcrig serve` on a TCP
listening socket with `dcrig controller` connecting to it as a separate process.

Every subprocess has a timeout; the checks read the printed summary and the written files.
"""

import csv
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from host.cli import main
from host.shipped import shipped_config

ROOT = Path(__file__).resolve().parents[1]
TIMEOUT_S = 240


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _summary_value(text: str, prefix: str) -> str:
    for line in text.splitlines():
        if line.strip().startswith(prefix):
            return line.strip()
    raise AssertionError(f"no line starting {prefix!r} in:\n{text}")


def test_demo_runs_start_to_stop(kernel, tmp_path, capsys):
    out_dir = tmp_path / "demo"
    rc = main(["demo", "--out", str(out_dir), "--no-plot"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "CAUTION" in out and "licensed practice" in out
    line = _summary_value(out, "frames ")
    assert "frames without command 0" in line and "link-loss events 0" in line
    assert "controller trips: none" in out
    # the machine-harm checks run in every closed-loop run, demo included
    assert "machine-harm checks: " in out
    with (out_dir / "frames.csv").open() as fh:
        rows = list(csv.DictReader(fh))
    speeds = [float(r["speed_rpm"]) for r in rows]
    # the stand reached rated speed (500 r/min) and was stopped again
    assert max(speeds) > 495.0
    assert abs(speeds[-1]) < 25.0
    events = (out_dir / "events.csv").read_text()
    assert "run" in events and "stop" in events


def test_serve_on_tcp_with_controller_process(kernel, tmp_path):
    port = _free_port()
    machine = shipped_config("machines/kestrel_f3_stand.toml")
    converter = shipped_config("converters/kestrel_f3_dual.toml")
    settings = shipped_config("controllers/kestrel_f3_dual.toml")
    host = subprocess.Popen(
        [sys.executable, "-m", "host.cli", "serve", str(machine), "--converter", str(converter),
         "--link", f"accept://127.0.0.1:{port}", "--lockstep", "--out", str(tmp_path / "serve")],
        env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        # the controller connects as a client once the host listens; retry until it does
        for _ in range(200):
            if host.poll() is not None:
                break
            try:
                with socket.create_connection(("127.0.0.1", port), timeout=0.2):
                    pass
                break
            except OSError:
                time.sleep(0.2)
        ctrl = subprocess.run(
            [sys.executable, "-m", "host.cli", "controller", "--link", f"socket://127.0.0.1:{port}",
             "--settings", str(settings), "--idle-timeout", "10"],
            env=_env(), capture_output=True, text=True, timeout=TIMEOUT_S,
        )
        out, err = host.communicate(timeout=TIMEOUT_S)
    finally:
        if host.poll() is None:
            host.kill()
            host.wait()
    assert host.returncode == 0, err
    assert ctrl.returncode == 0, ctrl.stderr
    assert "end: bye" in ctrl.stdout and "trips: none" in ctrl.stdout, ctrl.stdout
    assert "lockstep" in out
    assert "frames without command 0" in _summary_value(out, "frames ")
    assert "machine-harm checks: " in out
    assert (tmp_path / "serve" / "frames.csv").exists()


@pytest.mark.parametrize("argv, words", [
    (["serve", "configs/machines/kestrel_f3_stand.toml", "--link", "ftp://x"], ("link", "ftp://x")),
    (["demo", "--load", "5"], ("--load", "[0, 2]")),
    (["demo", "--settings", "configs/machines/kestrel_f3_stand.toml"], ("kestrel_f3_stand.toml",)),
])
def test_closed_loop_commands_refuse_bad_input_in_one_line(argv, words, capsys, monkeypatch):
    monkeypatch.chdir(ROOT)
    rc = main(argv)
    out, err = capsys.readouterr()
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    for w in words:
        assert w in lines[0], lines[0]


def test_sim_takes_a_bridge_voltage_profile(kernel, tmp_path, capsys):
    """A voltage reference on a bridge supply becomes alpha = arccos(V / Vdo), Vdo = 1.35 V_LL
    (Mohan, Undeland, Robbins, Power Electronics), latched at the next natural instant."""
    import math

    out_csv = tmp_path / "v.csv"
    rc = main(["sim", str(shipped_config("machines/kestrel_f3_stand.toml")), "--converter",
               str(shipped_config("converters/kestrel_f3_bridge.toml")), "--t-end", "0.2",
               "--set-input", "bridge_voltage_ref_V=300", "--out", str(out_csv), "--sample", "0.001"])
    assert rc == 0, capsys.readouterr().err
    with out_csv.open() as fh:
        rows = list(csv.DictReader(fh))
    want = math.degrees(math.acos(300.0 / (3 * math.sqrt(2) / math.pi * 415.0)))
    assert float(rows[-1]["last_firing_angle_deg"]) == pytest.approx(want, abs=1e-3)  # CSV keeps 6 digits


def test_sim_refuses_a_bridge_voltage_without_a_bridge(capsys):
    rc = main(["sim", str(shipped_config("machines/kestrel_f3_stand.toml")), "--t-end", "0.1",
               "--set-input", "bridge_voltage_ref_V=300", "--out", "/tmp/never.csv"])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error: bridge_voltage_ref_V: needs a bridge converter")


def test_an_interrupted_run_keeps_what_it_recorded(kernel, tmp_path, capsys):
    """Ctrl-C (or a link error) mid-run: the summary and the frame record of the frames run so
    far are still written, then the interruption goes on to the caller."""
    import threading

    from host.controller.process import run_controller
    from host.link import VirtualCable
    from host.runner import Timeline, TimelineStep, run_closed_loop
    from tests.conftest import make_plant

    plant = make_plant("kestrel_f3_stand", "kestrel_f3_dual")
    stop_after = 300

    class Interrupt(Timeline):
        def __call__(self, loop):
            super().__call__(loop)
            if loop.stats.frames >= stop_after:
                raise KeyboardInterrupt

    timeline = Interrupt([TimelineStep(0.1, "run"), TimelineStep(5.0, "stop")])
    settings = shipped_config("controllers/kestrel_f3_dual.toml")
    with VirtualCable() as cable:
        ctl = threading.Thread(target=run_controller, args=(cable.controller_link(), settings),
                               kwargs={"idle_timeout_s": 5.0}, daemon=True)
        ctl.start()
        with pytest.raises(KeyboardInterrupt):
            run_closed_loop(plant, cable.host_link(), encoding="fixed", paced=False, timeline=timeline,
                            out_dir=tmp_path / "cut", plot=False)
        ctl.join(timeout=10)
    out = capsys.readouterr().out
    assert "summary (run stopped early)" in out
    with (tmp_path / "cut" / "frames.csv").open() as fh:
        assert len(list(csv.DictReader(fh))) == stop_after
    assert "run stopped early: KeyboardInterrupt" in (tmp_path / "cut" / "events.csv").read_text()
