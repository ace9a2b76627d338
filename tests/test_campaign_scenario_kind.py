"""The scenario kind without a cluster: suites and name patterns, controller variants put into
the scenario (emulated settings changes, the host-compiled C example firmware), and its
campaign-file rules (exit 2, one line)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from host.campaign.engine import execute_run
from host.campaign.spec import load_campaign
from host.cli import main

ROOT = Path(__file__).resolve().parents[1]
CFG = ROOT / "configs"

BASE = f"""
[campaign]
name = "k"
kind = "scenario"
seed = 3
suite = "{CFG}/suites/kestrel_demo.toml"
select = ["f3_armature_short", "f3_c_firmware_short", "f3_overcurrent_misset"]

[[controller]]
name = "shipped"
settings = "{CFG}/controllers/kestrel_f3_stand.toml"

[spread]
samples = 2

[[spread.parameter]]
key = "mains.inductance_H"
distribution = "uniform"
relative = true
low = 0.5
high = 2.0
"""


def _w(tmp_path, text):
    p = tmp_path / "k.toml"
    p.write_text(text)
    return p


def test_suite_select_and_must_fail_runs_left_out(tmp_path):
    camp = load_campaign(_w(tmp_path, BASE))
    # f3_overcurrent_misset is a must-fail run of the suite: not part of a campaign
    assert [c.name for c in camp.cases] == ["f3_armature_short", "f3_c_firmware_short"]
    assert camp.n_runs == 4
    base_ls = 0.00006  # configs/converters/kestrel_f3_bridge.toml
    for r in camp.runs():
        assert 0.5 * base_ls <= dict(r.params)["mains.inductance_H"] <= 2.0 * base_ls


def test_variant_settings_change_reaches_the_controller(tmp_path):
    text = BASE.replace('select = ["f3_armature_short", "f3_c_firmware_short", "f3_overcurrent_misset"]',
                        'select = ["f3_armature_short"]')
    text += f"""
[[controller]]
name = "threshold_high"
settings = "{CFG}/controllers/kestrel_f3_stand.toml"
set = {{ "protection.overcurrent.threshold_A" = 6000.0 }}
"""
    camp = load_campaign(_w(tmp_path, text))
    rows = {(r.controller_name, r.sample): execute_run(r, None, "none") for r in camp.runs()}
    for s in (0, 1):
        assert rows[("shipped", s)]["status"] == "pass"
        # 6000 A is above what the short reaches before the other protections: no overcurrent trip in time
        assert rows[("threshold_high", s)]["status"] == "fail"
        assert rows[("threshold_high", s)]["margin_pu"] < 0


@pytest.mark.skipif(shutil.which("cc") is None, reason="needs the system C compiler")
def test_c_example_firmware_variant_runs(tmp_path):
    text = BASE.replace('select = ["f3_armature_short", "f3_c_firmware_short", "f3_overcurrent_misset"]',
                        'select = ["f3_c_firmware_short"]')
    text = text.replace(f'''name = "shipped"
settings = "{CFG}/controllers/kestrel_f3_stand.toml"''', '''name = "fw_trip_4500"
kind = "c_example"
trip_A = 4500''')
    camp = load_campaign(_w(tmp_path, text))
    spec = camp.runs()[0]
    row = execute_run(spec, str(tmp_path / "out"), "all")
    assert row["status"] in ("pass", "fail"), row.get("error")
    assert row["figure:first_trip_s"] > 0.6  # the flashover at 0.6 s trips the firmware's comparison
    assert (tmp_path / "out" / row["record"] / "record.sqlite").is_file()


BAD = [
    ("no scenarios", BASE.replace(f'suite = "{CFG}/suites/kestrel_demo.toml"\n', "").replace(
        'select = ["f3_armature_short", "f3_c_firmware_short", "f3_overcurrent_misset"]\n', ""),
     "campaign.scenarios: a scenario campaign needs"),
    ("suite missing", BASE.replace("kestrel_demo.toml", "nowhere.toml"), "campaign.suite: file not found"),
    ("select leaves nothing", BASE.replace('"f3_overcurrent_misset"]', '"f3_overcurrent_misset"]\nexclude = ["f3_*"]'),
     "campaign.select: no scenario is left"),
    ("no controller", BASE.split("[[controller]]")[0] + "[spread]" + BASE.split("[spread]")[1],
     "controller: a scenario campaign needs at least one"),
    ("settings missing", BASE.replace(f'settings = "{CFG}/controllers/kestrel_f3_stand.toml"\n', ""),
     "controller[0].settings: required for kind 'emulated'"),
    ("bad settings key", BASE.replace('settings = "', 'set = { "protection.overcurrent.threshold" = 1.0 }\nsettings = "'),
     "controller[0].set:"),
    ("firmware key on emulated", BASE.replace('name = "shipped"', 'name = "shipped"\ntrip_A = 10'),
     "controller[0].trip_A: only for kind 'c_example'"),
    ("case table", BASE + '\n[[case]]\nname = "x"\n', "case: belongs to kind = 'transient'"),
]


@pytest.mark.parametrize("what,text,expect", BAD, ids=[b[0] for b in BAD])
def test_bad_scenario_campaign_one_line_exit_2(tmp_path, capsys, what, text, expect):
    p = _w(tmp_path, text)
    rc = main(["campaign", str(p), "--out", str(tmp_path / "out"), "--no-progress"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1, err
    assert err.startswith(f"error: {p}: ") and expect in err, err


def test_glob_pattern_matching_nothing(tmp_path, capsys):
    text = BASE.replace(f'suite = "{CFG}/suites/kestrel_demo.toml"', 'scenarios = ["nowhere/f3_*.toml"]')
    text = text.replace('select = ["f3_armature_short", "f3_c_firmware_short", "f3_overcurrent_misset"]\n', "")
    p = _w(tmp_path, text)
    assert main(["campaign", str(p), "--no-progress"]) == 2
    assert "campaign.scenarios: no scenario file matches, got 'nowhere/f3_*.toml'" in capsys.readouterr().err
