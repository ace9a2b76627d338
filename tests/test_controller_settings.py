"""Controller settings: every key documented, demo files valid, bad input refused in one line."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import pytest

from host.controller import DriveController
from host.controller.settings import KEYS, REQUIRED, from_dict, load_settings
from host.errors import ConfigError
from host.shipped import shipped_dir

ROOT = Path(__file__).resolve().parents[1]
CFG = shipped_dir("controllers")
DOC = ROOT / "docs" / "controller.md"
MILL = CFG / "kestrel_bench_mill.toml"


def _nested():
    with open(MILL, "rb") as f:
        return tomllib.load(f)


def test_every_loader_key_is_documented_and_every_documented_key_exists():
    text = DOC.read_text()
    documented = set(re.findall(r"^\| `([^`]+)` \|", text, re.M))
    assert documented == set(KEYS), (sorted(set(KEYS) - documented), sorted(documented - set(KEYS)))


def test_documented_defaults_match_the_loader():
    text = DOC.read_text()
    for name, key in KEYS.items():
        m = re.search(rf"^\| `{re.escape(name)}` \| (\w+) \| ([^|]+) \|", text, re.M)
        assert m, name
        assert m.group(1) == key.kind, name
        shown = m.group(2).strip()
        if key.default is REQUIRED:
            assert shown == "required", name
        else:
            assert shown != "required", name


@pytest.mark.parametrize("path", sorted(CFG.glob("*.toml")), ids=lambda p: p.name)
def test_demo_settings_load_and_build_a_controller(path):
    s = load_settings(path)
    DriveController(s)
    with open(path, "rb") as f:
        nested = tomllib.load(f)
    assert nested["drive"]["name"] == path.stem  # the name says which file it came from


def test_unknown_key_is_refused_with_did_you_mean():
    d = _nested()
    d["speed_loop"]["kp_A_per_rmp"] = 1.0
    with pytest.raises(ConfigError) as e:
        from_dict(d, "mill.toml")
    assert str(e.value) == ("mill.toml: speed_loop.kp_A_per_rmp: unknown key "
                            "(did you mean 'speed_loop.kp_A_per_rpm'?)")


def test_unknown_section_is_refused():
    d = _nested()
    d["protektion"] = {"overspeed": {"delay_s": 1.0}}
    with pytest.raises(ConfigError, match=r"^mill.toml: protektion.overspeed.delay_s: unknown key "
                                          r"\(did you mean 'protection.overspeed.delay_s'\?\)$"):
        from_dict(d, "mill.toml")


@pytest.mark.parametrize("section,key,value,rule", [
    ("ramp", "accel_rpm_per_s", "fast", "must be a number, got 'fast'"),
    ("ramp", "accel_rpm_per_s", True, "must be a number, got True"),
    ("ramp", "accel_rpm_per_s", -5.0, "must be > 0, got -5.0"),
    ("drive", "dual_bridge", 1, "must be true or false, got 1"),
    ("drive", "armature_mode", "firing_angel",
     "must be one of firing_angle, voltage, current (did you mean 'firing_angle'?)"),
    ("current_loop", "alpha_max_deg", 179.0, "must be in 90..175, got 179.0"),
    ("drive", "mains_frequency_Hz", float("nan"), "must be finite"),
    ("motor", "magnetisation_if_pu", [0.0, "x"], "must be a list of numbers"),
])
def test_wrong_type_or_range_is_one_line(section, key, value, rule):
    d = _nested()
    d[section][key] = value
    with pytest.raises(ConfigError) as e:
        from_dict(d, "f.toml")
    assert str(e.value) == f"f.toml: {section}.{key}: {rule}"
    assert "\n" not in str(e.value)


def test_missing_required_key():
    d = _nested()
    del d["motor"]["ra_ohm"]
    with pytest.raises(ConfigError, match=r"^f.toml: motor.ra_ohm: required key is missing$"):
        from_dict(d, "f.toml")


@pytest.mark.parametrize("changes,key", [
    ({"motor": {"top_speed_rpm": 400.0}}, "motor.top_speed_rpm"),
    ({"current_loop": {"alpha_min_deg": 60.0, "alpha_max_deg": 90.0}}, None),
    ({"protection": {"overcurrent": {"threshold_A": 1200.0}}}, "protection.overcurrent.threshold_A"),
    ({"motor": {"magnetisation_phi_pu": [0.0, 0.5, 0.4, 0.9, 1.0, 1.1]}}, "motor.magnetisation_phi_pu"),
    ({"motor": {"magnetisation_phi_pu": [0.0, 1.0]}}, "motor.magnetisation_phi_pu"),
    ({"field": {"emf_setpoint_V": 600.0}}, "field.emf_setpoint_V"),
    ({"field": {"rated_voltage_V": 400.0, "voltage_max_V": 400.0}}, "field.rated_voltage_V"),
])
def test_cross_checks(changes, key):
    d = _nested()
    for sec, vals in changes.items():
        for k, v in vals.items():
            if isinstance(v, dict):
                d[sec][k].update(v)
            else:
                d[sec][k] = v
    with pytest.raises(ConfigError) as e:
        from_dict(d, "f.toml")
    if key:
        assert str(e.value).startswith(f"f.toml: {key}: ")


def test_series_motor_needs_no_field_section():
    s = load_settings(CFG / "kestrel_bench_hoist.toml")
    assert s["motor.connection"] == "series"
    d = _nested()
    del d["field"]
    with pytest.raises(ConfigError, match="field.rated_current_A: required key is missing"):
        from_dict(d, "f.toml")  # a separately excited motor does need it


def test_file_errors_are_one_line(tmp_path):
    with pytest.raises(ConfigError, match=r"nope.toml: \(file\): not found$"):
        load_settings(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[drive\nname = 1\n")
    with pytest.raises(ConfigError) as e:
        load_settings(bad)
    assert str(e.value).startswith(f"{bad}: (file): not valid TOML")


def test_replace_revalidates():
    s = load_settings(MILL)
    assert s.replace({"ramp.accel_rpm_per_s": 10.0})["ramp.accel_rpm_per_s"] == 10.0
    with pytest.raises(ConfigError, match="ramp.accel_rpm_per_s: must be > 0"):
        s.replace({"ramp.accel_rpm_per_s": 0.0})


# ---- renamed keys: the old spelling is refused with one line naming the new one --------------
def test_old_start_stop_section_name_is_refused_with_its_new_name():
    d = _nested()
    d["sequencing"] = d.pop("start_stop")
    with pytest.raises(ConfigError) as e:
        from_dict(d, "f.toml")
    msg = str(e.value)
    assert "\n" not in msg
    assert re.fullmatch(r"f\.toml: sequencing\.\w+: renamed to start_stop\.\w+ "
                        r"\(\[sequencing\] is now \[start_stop\]\), got .+", msg), msg


def test_old_economy_field_key_is_refused_with_its_new_name():
    d = _nested()
    d["field"]["standby_fraction"] = d["field"].pop("economy_fraction", 0.3)
    with pytest.raises(ConfigError) as e:
        from_dict(d, "f.toml")
    assert str(e.value) == "f.toml: field.standby_fraction: renamed to field.economy_fraction, got 0.3"


def test_old_section_name_through_the_cli_exits_2_with_one_line(tmp_path):
    import subprocess
    import sys

    old = tmp_path / "old.toml"
    old.write_text(MILL.read_text().replace("[start_stop]", "[sequencing]"))
    p = subprocess.run([sys.executable, "-m", "host.cli", "controller", "--link", str(tmp_path / "no-port"),
                        "--settings", str(old)], cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"error: {old}: sequencing.") and "renamed to start_stop." in lines[0]
