"""The demo suite end to end, as CI runs it: `dcrig suite configs/suites/kestrel_demo.toml`.

Checks: exit status 0 (every scenario as expected, the mis-set controller's scenario failing),
the JUnit XML parsed back with an independent reader (junitparser) and counted, the HTML page
self-contained (its plots embedded), a baseline saved and then an injected regression (a
field-loss protection 10 ms slower, still inside its expectation) reported with exit 1. Also
the in-process controller against the process-over-pty path, frame for frame, on the demo
plant's start-stop cycle and two fault scenarios.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
SUITE = ROOT / "configs" / "suites" / "kestrel_demo.toml"


def _dcrig(*argv, timeout=540):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT)
    return subprocess.run([sys.executable, "-m", "host.cli", *argv], capture_output=True, text=True,
                          timeout=timeout, cwd=ROOT, env=env)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory, kernel):
    out = tmp_path_factory.mktemp("suite")
    base = out / "baseline.json"
    r = _dcrig("suite", str(SUITE), "--jobs", "2", "--out", str(out), "--save-baseline", str(base))
    return r, out / "kestrel_demo", base


def test_demo_suite_passes_with_the_misset_variant_failing(demo_run):
    from host.suite import load_suite

    r, folder, _ = demo_run
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-3000:]
    n = len(load_suite(SUITE).runs)
    assert f"{n}/{n} as expected, 0 regression(s)" in r.stdout
    assert re.search(r"expected fail\s+f3_overcurrent_misset", r.stdout)


def test_junit_xml_parsed_back_and_counted(demo_run):
    from junitparser import Failure, JUnitXml

    from host.suite import load_suite

    _, folder, _ = demo_run
    xml = JUnitXml.fromfile(str(folder / "junit.xml"))
    suites = list(xml)
    assert len(suites) == 1
    cases = list(suites[0])
    names = [c.name for c in cases]
    assert sorted(names) == sorted(r.scenario.name for r in load_suite(SUITE).runs)
    failed = [c.name for c in cases if any(isinstance(x, Failure) for x in c.result)]
    assert failed == []  # the must-fail scenario failed as it must: a passing test case
    misset = [c for c in cases if c.name == "f3_overcurrent_misset"][0]
    assert "must fail: the verdict failed" in (misset.system_out or "")
    assert "FAIL trip_overcurrent_after_armature_short" in misset.system_out


def test_html_report_is_one_self_contained_page(demo_run):
    _, folder, _ = demo_run
    text = (folder / "report.html").read_text()
    assert text.count("data:image/png;base64,") >= 20
    assert "src=\"http" not in text and "<link" not in text  # nothing to fetch
    assert "f3_overcurrent_misset: expected fail" in text
    assert "licensed practice" in text


def test_injected_regression_is_reported_and_fails_the_suite(demo_run, tmp_path):
    """A firmware change that makes the field-loss trip 10 ms slower: still within 2200 ms, but a
    regression against the baseline (tolerance 3 ms)."""
    _, _, base = demo_run
    scn_dir = ROOT / "configs" / "scenarios"
    text = (scn_dir / "f3_field_rheostat.toml").read_text()
    text = text.replace('settings = "../controllers/kestrel_f3_stand.toml"',
                        'settings = "../controllers/kestrel_f3_stand.toml"\n'
                        'set = { "protection.field_loss.delay_s" = 1.01 }')
    text = text.replace('"../', f'"{scn_dir.parent}/')
    (tmp_path / "slower.toml").write_text(text)
    (tmp_path / "suite.toml").write_text('[suite]\nname = "kestrel_demo"\n[[run]]\nscenario = "slower.toml"\n')
    r = _dcrig("suite", str(tmp_path / "suite.toml"), "--jobs", "1", "--out", str(tmp_path / "o"),
               "--baseline", str(base), "--no-plot")
    assert r.returncode == 1, r.stdout + r.stderr
    line = [x for x in r.stdout.splitlines() if "REGRESSION" in x]
    assert len(line) == 1 and "f3_field_rheostat: trip_field_loss_after_field_rheostat.ms" in line[0], r.stdout
    old, new = (float(v) for v in re.search(r"ms ([\d.]+) -> ([\d.]+)", line[0]).groups())
    assert 6.6 < new - old < 13.4  # 10 ms, whole frames of 3.33 ms
    assert "1/1 as expected, 1 regression(s)" in r.stdout  # it still passes its expectation


# scenario, the trip code it must end with (None: no trip), and the worst-frame bounds on speed
# (r/min), frame-mean armature current (A) and firing angle (deg). The two faults keep the
# bounds this test had on the phase loss; the start-stop cycle's light-load stretch needs wider
# ones (see the docstring). Measured worst cases 2026-12-03 in the comments.
INPROC_VS_PROCESS = (
    ("f3_start_stop", None, 1.0, 75.0, 1.5),    # 0.39 r/min, 45.5 A, 0.50 deg
    ("f3_phase_loss", 7, 0.5, 25.0, 1.0),       # 0.07 r/min, 8.2 A, 0.12 deg
    ("f3_armature_short", 1, 0.5, 25.0, 1.0),   # 0.06 r/min, 8.1 A, 0.10 deg
)


@pytest.mark.parametrize("name,trip_code,speed_tol_rpm,current_tol_A,alpha_tol_deg", INPROC_VS_PROCESS)
def test_inproc_controller_matches_the_process_over_pty(kernel, name, trip_code, speed_tol_rpm,
                                                        current_tol_A, alpha_tol_deg):
    """Same scenario, the emulated controller in-process and as a separate process on a virtual
    cable, frame for frame. The link's fixed-point encoding (0.01 A, 0.01 V, 0.01 deg in the
    command ... docs/protocol.md) rounds what the process sees, so frames agree to a tolerance,
    not bit for bit (F3 stand rated 500 r/min, 1040 A, 18 A field). On the start-stop cycle the
    current bound is the loosest: at light load near the edge of continuous conduction the
    current loop limit-cycles by about +-25 A, and rounding shifts the cycle's phase (worst
    frame 45 A, median 11 A); the median bound keeps it sharp."""
    from host.scenario import load_scenario
    from host.scenario.run import run_scenario

    scn = load_scenario(ROOT / "configs" / "scenarios" / f"{name}.toml")
    a = run_scenario(scn)
    b = run_scenario(replace(scn, controller_kind="process"))
    assert a.frames.shape == b.frames.shape
    col = {c: k for k, c in enumerate(a.columns)}

    def diff(column):
        return np.abs(a.frames[:, col[column]] - b.frames[:, col[column]])

    for column, tol in (("speed_rpm", speed_tol_rpm), ("armature_current_A", current_tol_A),
                        ("firing_angle_deg", alpha_tol_deg),
                        ("field_current_A", 0.01)):  # worst measured 0.0005 A
        assert diff(column).max() <= tol, (column, diff(column).max())
    assert np.median(diff("armature_current_A")) <= 21.0  # 2 % of rated (measured 11 A at most)
    # the same bridge in every frame, and the same trip with the same code in the same frame
    for column in ("bridge_select", "controller_trip", "trip_code"):
        assert np.array_equal(a.frames[:, col[column]], b.frames[:, col[column]]), column
    tripped = a.frames[:, col["controller_trip"]] > 0
    if trip_code is None:
        assert not tripped.any()
    else:
        assert tripped.any() and a.frames[np.argmax(tripped), col["trip_code"]] == trip_code
