"""Campaign files: every rule gets one line `error: FILE: KEY: rule` and exit 2 through the CLI;
run ids are stable and change with anything that decides a run's result."""

from __future__ import annotations

import shutil

import pytest

from host.campaign.spec import load_campaign
from host.cli import main

from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

MACHINE = ROOT / "configs" / "machines" / "kestrel_f3_stand.toml"
CONVERTER = ROOT / "configs" / "converters" / "kestrel_f3_bridge.toml"

GOOD = f"""
[campaign]
name = "t"
kind = "transient"
seed = 1

[plant]
machine = "{MACHINE}"
converter = "{CONVERTER}"

[[case]]
name = "locked"
t_end_s = 0.05
inputs = ["locked_rotor=1", "firing_angle_deg=80"]
limits = [{{ figure = "peak_armature_current_A", max = 3000.0 }}]

[spread]
method = "latin_hypercube"
samples = 4

[[spread.parameter]]
key = "machine.la_H"
distribution = "uniform"
relative = true
low = 0.8
high = 1.2

[[spread.parameter]]
key = "mains.inductance_H"
distribution = "uniform"
low = 4e-5
high = 8e-5
"""


def _write(tmp_path, text, name="c.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_good_file_loads_and_expands(tmp_path):
    camp = load_campaign(_write(tmp_path, GOOD))
    runs = camp.runs()
    assert camp.n_runs == len(runs) == 4
    la = [dict(r.params)["machine.la_H"] for r in runs]
    assert all(0.8 * 0.00085 <= v <= 1.2 * 0.00085 for v in la)  # relative to the config's 0.85 mH
    assert len({r.run_id for r in runs}) == 4


BAD = [
    ("not toml", "[campaign\n", "(file): not valid TOML"),
    ("no campaign table", GOOD.replace("[campaign]", "[campaing]"), "campaing: unknown key; did you mean 'campaign'?"),
    ("kind", GOOD.replace('kind = "transient"', 'kind = "transit"'), "campaign.kind: expected one of"),
    ("key", GOOD.replace('key = "machine.la_H"', 'key = "machine.la_h"'), "spread.parameter[0].key: not a numeric"),
    ("string key", GOOD.replace('key = "machine.la_H"', 'key = "machine.name"'), "spread.parameter[0].key: not a numeric"),
    ("distribution", GOOD.replace('distribution = "uniform"\nrelative', 'distribution = "gauss"\nrelative'),
     "spread.parameter[0].distribution: expected one of"),
    ("high <= low", GOOD.replace("low = 0.8\nhigh = 1.2", "low = 1.2\nhigh = 0.8"), "spread.parameter[0].high: must exceed low"),
    ("normal without sd", GOOD.replace('distribution = "uniform"\nrelative = true\nlow = 0.8\nhigh = 1.2',
                                       'distribution = "normal"\nmean = 0.00085'), "spread.parameter[0].sd: required key"),
    ("unused key", GOOD.replace("low = 0.8\nhigh = 1.2", "low = 0.8\nhigh = 1.2\nmode = 1.0"),
     "spread.parameter[0].mode: not used by distribution 'uniform'"),
    ("plant rule", GOOD.replace("low = 0.8\nhigh = 1.2", "low = -1.0\nhigh = 1.2"), "breaks a plant rule"),
    ("points on lhs", GOOD.replace("low = 0.8\nhigh = 1.2", "low = 0.8\nhigh = 1.2\npoints = 3"),
     "spread.parameter[0].points: is for method = 'grid' only"),
    ("grid needs levels", GOOD.replace('method = "latin_hypercube"\nsamples = 4', 'method = "grid"'),
     "spread.parameter[0].distribution: a grid needs 'levels'"),
    ("samples on grid", GOOD.replace('method = "latin_hypercube"', 'method = "grid"'), "spread.samples: is for"),
    ("samples zero", GOOD.replace("samples = 4", "samples = 0"), "spread.samples: must be >= 1"),
    ("duplicate key", GOOD + '\n[[spread.parameter]]\nkey = "mains.inductance_H"\ndistribution = "levels"\nlevels = [6e-5]\n',
     "spread.parameter[2].key: is varied twice"),
    ("controller in transient", GOOD + f'\n[[controller]]\nname = "a"\nsettings = "{ROOT}/configs/controllers/kestrel_f3_stand.toml"\n',
     "controller: a transient campaign runs the plant open loop"),
    ("unknown figure", GOOD.replace('figure = "peak_armature_current_A"', 'figure = "peak_current"'),
     "case[0].limits[0].figure: unknown figure"),
    ("limit without bound", GOOD.replace(', max = 3000.0', ''), "case[0].limits[0]: needs min, max or both"),
    ("bad input name", GOOD.replace('"firing_angle_deg=80"', '"firing_angle=80"'), "case[0]: unknown input 'firing_angle'"),
    ("bad change", GOOD.replace('inputs = [', 'changes = ["armature_short@x=1"]\ninputs = ['), "case[0]: 'armature_short@x=1'"),
    ("t_end", GOOD.replace("t_end_s = 0.05", "t_end_s = -1"), "case[0].t_end_s: must be within (0, 600]"),
    ("machine missing", GOOD.replace(str(MACHINE), "nowhere.toml"), "plant.machine: file not found"),
    ("records", GOOD + '\n[execution]\nrecords = "some"\n', "execution.records: expected one of"),
    ("retries", GOOD + '\n[execution]\nretries = -1\n', "execution.retries: must be within [0, 10]"),
    ("no case", GOOD.split("[[case]]")[0] + "[spread]" + GOOD.split("[spread]")[1], "case: a transient campaign needs"),
    ("scenario kind with cases", GOOD.replace('kind = "transient"', 'kind = "scenario"'), "case: belongs to kind = 'transient'"),
]


@pytest.mark.parametrize("what,text,expect", BAD, ids=[b[0] for b in BAD])
def test_bad_campaign_file_one_line_exit_2(tmp_path, capsys, what, text, expect):
    p = _write(tmp_path, text)
    out_dir = tmp_path / "out"
    rc = main(["campaign", str(p), "--out", str(out_dir), "--no-progress"])
    err = capsys.readouterr().err.strip()
    assert rc == 2
    assert len(err.splitlines()) == 1, err
    assert err.startswith(f"error: {p}: ")
    assert expect in err, err
    assert not (out_dir / "results.parquet").exists()  # nothing started


def test_bad_options_exit_2(tmp_path, capsys):
    p = _write(tmp_path, GOOD)
    assert main(["campaign", str(p), "--workers", "0"]) == 2
    assert "--workers: must be >= 1" in capsys.readouterr().err


def test_run_ids_are_stable_and_follow_what_decides_a_run(tmp_path):
    m = tmp_path / "m.toml"
    shutil.copy(MACHINE, m)
    text = GOOD.replace(str(MACHINE), str(m))
    a = [r.run_id for r in load_campaign(_write(tmp_path, text)).runs()]
    assert a == [r.run_id for r in load_campaign(_write(tmp_path, text, "again.toml")).runs()]
    # another seed: other parameter points, other ids
    b = [r.run_id for r in load_campaign(_write(tmp_path, text.replace("seed = 1", "seed = 2"))).runs()]
    assert not set(a) & set(b)
    # the machine file changed (its armature resistance): every run is another run
    m.write_text(m.read_text().replace("ra_ohm = 0.0175", "ra_ohm = 0.0180"))
    c = [r.run_id for r in load_campaign(_write(tmp_path, text)).runs()]
    assert not set(a) & set(c)
    # a limit changed: another case definition
    d = [r.run_id for r in load_campaign(_write(tmp_path, text.replace("max = 3000.0", "max = 3100.0"))).runs()]
    assert not set(c) & set(d)


def test_docs_page_documents_every_campaign_key():
    from host.campaign.spec import FILE_KEYS

    page = (ROOT / "docs" / "campaign.md").read_text()
    for table, keys in FILE_KEYS.items():
        for k in keys:
            forms = (f"`{k}`", f"[{k}]", f"[[{k}]]", f"{k} =", f"[[{table}.{k}]]", f"{{ {k} =")
            assert any(f in page for f in forms), (table, k)
    for table in FILE_KEYS:
        if table and "." not in table:
            assert f"[{table}]" in page or f"[[{table}]]" in page, table
