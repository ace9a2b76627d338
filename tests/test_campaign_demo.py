"""The reduced demo campaign (configs/campaigns/kestrel_f3_tolerance_ci.toml) through the
command line, as CI runs it: 2 scenarios x 2 controller builds x 4 plant samples on 2 local
worker processes. Checks the table against the same runs done one by one in this process,
the JUnit XML parsed back and counted, the report, and that the second build's 3 ms
overcurrent debounce shows in its measured reaction time (the protection's delay plus at
most one frame period, the frame in which the condition is seen: see host/verdict/expect.py).
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

pytest.importorskip("distributed")  # the campaign extra; CI installs it

from host.campaign.engine import execute_run  # noqa: E402
from host.campaign.spec import load_campaign  # noqa: E402
from host.campaign.table import read_rows  # noqa: E402
from host.cli import main  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
CI_CAMPAIGN = ROOT / "configs" / "campaigns" / "kestrel_f3_tolerance_ci.toml"
FULL_CAMPAIGN = ROOT / "configs" / "campaigns" / "kestrel_f3_tolerance.toml"


def test_full_demo_campaign_is_valid_and_large_enough():
    camp = load_campaign(FULL_CAMPAIGN)  # every plant point checked against the config rules
    assert camp.n_runs >= 200 and len(camp.controllers) == 2
    assert {p.key for p in camp.parameters} == {"machine.la_H", "machine.ra_ohm", "mechanics.load_inertia_kgm2",
                                               "mains.inductance_H"}


@pytest.fixture(scope="module")
def ci_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("ci") / "f3"
    rc = main(["campaign", str(CI_CAMPAIGN), "--workers", "2", "--out", str(out), "--no-progress"])
    return rc, out


def test_ci_campaign_writes_table_report_and_junit(ci_run):
    rc, out = ci_run
    camp = load_campaign(CI_CAMPAIGN)
    rows = {r["run_id"]: r for r in read_rows(out / "results.parquet")}
    assert len(rows) == camp.n_runs == 16
    assert all(r["status"] in ("pass", "fail") for r in rows.values())
    assert rc == (0 if all(r["status"] == "pass" for r in rows.values()) else 1)
    for r in rows.values():
        assert (out / r["record"] / "record.sqlite").is_file()  # the durable run record
    page = (out / "report.html").read_text()
    for c in camp.controllers:
        assert c.name in page
    root = ET.parse(out / "junit.xml").getroot()
    cases = root.findall(".//testcase")
    assert len(cases) == 4  # 2 scenarios x 2 controllers
    failed_groups = {(r["scenario"], r["controller"]) for r in rows.values() if r["status"] == "fail"}
    assert sum(1 for c in cases if c.find("failure") is not None) == len(failed_groups)
    for suite in root.findall("testsuite"):
        assert int(suite.get("tests")) == len(suite.findall("testcase"))
        assert int(suite.get("failures")) == sum(1 for c in suite.findall("testcase") if c.find("failure") is not None)


def test_ci_campaign_rows_equal_the_runs_one_by_one(ci_run):
    _, out = ci_run
    rows = {r["run_id"]: r for r in read_rows(out / "results.parquet")}
    for spec in load_campaign(CI_CAMPAIGN).runs():
        ref = execute_run(spec, None, "none")
        row = rows[spec.run_id]
        assert row["status"] == ref["status"], spec.run_id
        keys = [k for k in ref if k.startswith(("verdict:", "figure:", "margin:", "param:"))]
        assert keys and all(row[k] == ref[k] for k in keys), spec.run_id


def test_the_debounce_of_the_second_build_shows_in_its_reaction_time(ci_run):
    _, out = ci_run
    rows = read_rows(out / "results.parquet")
    fig = "figure:trip_overcurrent_after_armature_short.ms"
    by = {(r["controller"], r["sample"]): r for r in rows if r["scenario"] == "f3_armature_short"}
    frame_ms = 1e3 / 300.0  # one pulse of 50 Hz mains
    for (ctrl, sample), r in by.items():
        if ctrl != "build_1_5_debounced":
            continue
        base = by[("build_1_4", sample)]
        diff = r[fig] - base[fig]
        assert 3.0 - 1e-6 <= diff <= 3.0 + frame_ms + 1e-6, (sample, diff)
