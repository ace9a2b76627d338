"""`dcrig steady` on the command line: JSON keys, exit codes, one-line errors; `op`, its old name,
still works for one release and stays out of the help."""

from __future__ import annotations

import json
import re
import subprocess
import sys

import pytest

from conftest import CONVERTERS, MACHINES, ROOT

F3 = str(MACHINES / "kestrel_f3_stand.toml")
BRIDGE = str(CONVERTERS / "kestrel_f3_bridge.toml")
KEYS = ("speed_rpm", "armature_current_A", "field_current_A", "line_current_A", "emf_V",
        "terminal_voltage_V", "torque_Nm", "input_power_W", "output_power_W", "efficiency")


def dcrig(*args, timeout=120, command="steady"):
    return subprocess.run([sys.executable, "-m", "host.cli", command, *args], cwd=ROOT, capture_output=True,
                          text=True, timeout=timeout, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})


def test_json_has_the_keys():
    p = dcrig(F3, "--vt", "440", "--load-torque", "6000", "--json")
    assert p.returncode == 0, p.stderr
    rep = json.loads(p.stdout)
    for k in KEYS:
        assert isinstance(rep[k], float), k
    assert rep["shaft_torque_Nm"] == pytest.approx(6000.0, rel=1e-9)
    assert set(rep["losses_W"]) >= {"armature_copper_W", "field_copper_W", "brush_W", "friction_W"}


def test_json_with_converter_has_firing_angle():
    p = dcrig(F3, "--converter", BRIDGE, "--vt", "400", "--load-torque", "6000", "--json", "--no-kernel")
    assert p.returncode == 0, p.stderr
    rep = json.loads(p.stdout)
    assert 0.0 < rep["firing_angle_deg"] < 90.0 and isinstance(rep["continuous"], bool)


def test_table_output_and_caution_for_series_motor():
    p = dcrig(str(MACHINES / "kestrel_coil_hoist.toml"), "--vt", "240", "--load-torque", "50")
    assert p.returncode == 0, p.stderr
    assert "speed" in p.stdout and "r/min" in p.stdout
    assert "CAUTION" in p.stdout and "runaway" in p.stdout


@pytest.mark.parametrize("args", [
    (F3,),                                                    # nothing given
    (F3, "--vt", "440"),                                      # motor without a quantity
    (F3, "--vt", "440", "--speed", "400", "--load-torque", "10"),
    (F3, "--vt", "440", "--load-ohm", "2"),                   # generator option on a motor
    (F3, "--load-torque", "100"),                             # motor quantity without --vt
    (F3, "--speed", "400", "--load-ohm", "2", "--load-current", "5"),
    (str(MACHINES / "kestrel_shunt_fan.toml"), "--vt", "440", "--speed", "1400", "--field-voltage", "200"),
    (F3, "--vt", "nan", "--speed", "400"),
    (F3, "--speed", "400", "--load-ohm", "-1"),
    (F3, "--converter", BRIDGE, "--speed", "400"),           # a bridge is not a generator load
    (str(ROOT / "no_such_machine.toml"), "--vt", "440", "--speed", "400"),
])
def test_bad_combinations_exit_2_with_one_line(args):
    p = dcrig(*args)
    assert p.returncode == 2, (p.stdout, p.stderr)
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), p.stderr
    assert "Traceback" not in p.stderr


def test_no_operating_point_exits_1_and_says_why(tmp_path):
    p = dcrig(str(MACHINES / "kestrel_exciter.toml"), "--speed", "1450", "--field-reversed", "--json")
    assert p.returncode == 1
    rep = json.loads(p.stdout)
    assert rep["operating_point_found"] is False and "reversed" in rep["reason"]
    p = dcrig(str(MACHINES / "kestrel_exciter.toml"), "--speed", "600")
    assert p.returncode == 1 and "NO OPERATING POINT" in p.stdout and "critical" in p.stdout


def test_help_has_an_example():
    p = dcrig("--help", timeout=60)
    assert p.returncode == 0 and "dcrig steady configs/machines/" in p.stdout


def test_old_name_op_still_solves_the_same_point_and_says_it_is_renamed():
    args = (F3, "--vt", "440", "--load-torque", "6000", "--json")
    new, old = dcrig(*args), dcrig(*args, command="op")
    assert new.returncode == 0 and old.returncode == 0, old.stderr
    assert json.loads(old.stdout) == json.loads(new.stdout)
    assert "renamed to `dcrig steady`" in old.stderr and "renamed" not in new.stderr


def test_old_name_op_is_hidden_from_the_command_list():
    p = subprocess.run([sys.executable, "-m", "host.cli", "--help"], cwd=ROOT, capture_output=True,
                       text=True, timeout=60, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert p.returncode == 0 and "steady" in p.stdout
    assert not re.search(r"^\s+op\b", p.stdout, re.M) and "{" not in p.stdout.split("\n\n")[0], p.stdout
    p = subprocess.run([sys.executable, "-m", "host.cli", "no-such-command"], cwd=ROOT, capture_output=True,
                       text=True, timeout=60, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert p.returncode == 2 and "'steady'" in p.stderr and "'op'" not in p.stderr, p.stderr
