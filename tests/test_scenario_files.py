"""Scenario and suite files: the demo files load, and every bad file gets one clear line and exit 2.

The rule is the project's (DEVELOPERS.md, Configs): `error: FILE: KEY: rule, got VALUE`, exit 2,
before anything runs. Each case below breaks one rule of docs/scenarios.md.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from host.errors import ConfigError
from host.scenario import FAULTS, load_scenario
from host.suite import load_suite

ROOT = Path(__file__).resolve().parents[1]
SCN = ROOT / "configs" / "scenarios"
SUITES = ROOT / "configs" / "suites"

GOOD = """
[scenario]
name = "t"
duration_s = 1.0

[plant]
machine = "{root}/configs/machines/kestrel_f3_stand.toml"
converter = "{root}/configs/converters/kestrel_f3_bridge.toml"

[controller]
kind = "emulated"
settings = "{root}/configs/controllers/kestrel_f3_stand.toml"

[start]
state = "running"
speed_rpm = 400.0

[[timeline]]
at_s = 0.4
action = "fault"
fault = "phase_loss"
phase = "b"

[[expect]]
kind = "trip"
class = "mains_loss"
after = "phase_loss"
within_ms = 40
"""


def _write(tmp_path, text, name="s.toml"):
    p = tmp_path / name
    p.write_text(text.replace("{root}", str(ROOT)))
    return p


@pytest.mark.parametrize("path", sorted(SCN.glob("*.toml")), ids=lambda p: p.name)
def test_demo_scenarios_load(path):
    s = load_scenario(path)
    assert s.name == path.stem
    assert s.duration_s <= 20.0  # CI: short model horizons


def test_demo_suite_covers_every_fault_and_every_harm_check():
    from host.scenario.load import HARM_CHECKS

    suite = load_suite(SUITES / "kestrel_demo.toml")
    faults = {a.fault for r in suite.runs for a in r.scenario.timeline if a.action == "fault"}
    assert faults == set(FAULTS), set(FAULTS) - faults
    harm = {e.check for r in suite.runs for e in r.scenario.expects if e.kind == "harm"}
    assert harm == set(HARM_CHECKS), set(HARM_CHECKS) - harm
    assert len(suite.runs) >= 12
    assert [r.scenario.name for r in suite.runs if r.must_fail] == ["f3_overcurrent_misset"]
    assert {r.scenario.controller_kind for r in suite.runs} >= {"emulated", "process", "c_example"}


BAD = [
    # (replace this, with this, expected message after the file name)
    ('duration_s = 1.0', 'duration_s = -1.0', "scenario.duration_s: must be in (0, 600] s, got -1.0"),
    ('duration_s = 1.0', 'duration_s = 1.0\nspeed = 3', "scenario.speed: unknown key (known: name, description, duration_s)"),
    ('fault = "phase_loss"', 'fault = "phase_lost"', "timeline[0].fault: expected one of ["),
    ('phase = "b"', 'phase = "d"', "timeline[0].phase: must be one of 'a', 'b', 'c', got 'd'"),
    ('phase = "b"', '', "timeline[0].phase: required for fault 'phase_loss' (a, b or c)"),
    ('phase = "b"', 'phase = "b"\nohm = 3.0', "timeline[0].ohm: not a parameter of fault 'phase_loss' (it takes 'phase'), got 3.0"),
    ('at_s = 0.4', 'at_s = 1.5', "timeline[0].at_s: must be in [0, scenario.duration_s = 1), got 1.5"),
    ('after = "phase_loss"', 'after = "phase_los"', "expect[0].after: no timeline entry has this id; did you mean 'phase_loss'?, got 'phase_los'"),
    ('class = "mains_loss"', 'class = "mains"', "expect[0].class: expected one of ["),
    ('within_ms = 40', 'within_ms = 0', "expect[0].within_ms: must be > 0, got 0"),
    ('kind = "emulated"', 'kind = "emulted"', "controller.kind: expected one of [emulated, process, c_example, link], got 'emulted'"),
    ('speed_rpm = 400.0', 'speed_rpm = "fast"', "start.speed_rpm: must be a finite number, got 'fast'"),
    ('machine = "{root}/configs/machines/kestrel_f3_stand.toml"', 'machine = "nowhere.toml"',
     "plant.machine: file not found, got 'nowhere.toml'"),
    ('settings = "{root}/configs/controllers/kestrel_f3_stand.toml"',
     'settings = "{root}/configs/controllers/kestrel_f3_stand.toml"\nset = { "protection.overcurrent.threshold_A" = -5.0 }',
     "controller.set: protection.overcurrent.threshold_A: must be > 0, got -5.0"),
    ('[start]', '[starts]', "starts: unknown key (did you mean 'start'?)"),
]


@pytest.mark.parametrize("old,new,msg", BAD, ids=[b[2].split(":")[0] for b in BAD])
def test_bad_scenario_is_one_line(tmp_path, old, new, msg):
    text = GOOD.replace("{root}", str(ROOT))
    old = old.replace("{root}", str(ROOT))
    assert old in text
    p = _write(tmp_path, text.replace(old, new.replace("{root}", str(ROOT)), 1))
    with pytest.raises(ConfigError) as e:
        load_scenario(p)
    line = str(e.value)
    assert "\n" not in line
    assert line.startswith(f"{p}: "), line
    assert msg in line, line


def test_good_scenario_loads(tmp_path):
    s = load_scenario(_write(tmp_path, GOOD))
    assert [a.id for a in s.timeline] == ["phase_loss"] and s.timeline[0].param == "b"


def test_cli_exits_2_with_one_line_for_a_bad_scenario_and_a_bad_suite(tmp_path):
    bad = _write(tmp_path, GOOD.replace('class = "mains_loss"', 'class = "mains"'))
    suite = _write(tmp_path, f'[suite]\nname = "x"\n[[run]]\nscenario = "{bad}"\n', "suite.toml")
    nosuite = _write(tmp_path, '[suite]\nname = "x"\n', "empty.toml")
    env_py = [sys.executable, "-m", "host.cli"]
    for argv, want in (
        (["scenario", str(bad)], f"error: {bad}: expect[0].class: expected one of ["),
        (["suite", str(suite)], f"error: {bad}: expect[0].class: expected one of ["),
        (["suite", str(nosuite)], f"error: {nosuite}: run: at least one [[run]] with a scenario is required"),
        (["suite", str(SUITES / "kestrel_demo.toml"), "--baseline", str(tmp_path / "none.json"), "--out",
          str(tmp_path / "o")], f"error: --baseline: {tmp_path / 'none.json'}: not found"),
    ):
        r = subprocess.run(env_py + argv, capture_output=True, text=True, timeout=120, cwd=ROOT,
                           env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
        assert r.returncode == 2, (argv, r.stderr)
        lines = r.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(want), r.stderr


def test_help_has_an_example_and_the_caution():
    for cmd in ("scenario", "suite"):
        r = subprocess.run([sys.executable, "-m", "host.cli", cmd, "--help"], capture_output=True, text=True,
                           timeout=60, cwd=ROOT, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
        assert r.returncode == 0
        assert "examples:" in r.stdout and f"dcrig {cmd} configs/" in r.stdout
        assert "CAUTION" in r.stdout and "licensed practice" in r.stdout
