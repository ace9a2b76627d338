"""`dcrig sim` input options: `--change NAME@T=V` (and its old spelling `--step`, hidden, kept
for one release) jump an input at T; a bad value is one line naming the option used."""

from __future__ import annotations

import csv
import subprocess
import sys

import pytest

from conftest import MACHINES, ROOT
from host.cli import main

F3 = str(MACHINES / "kestrel_f3_stand.toml")


def _rows(path):
    with open(path) as fh:
        return list(csv.DictReader(fh))


def test_change_jumps_an_input_and_the_old_step_spelling_does_the_same(kernel, tmp_path, capsys):
    base = [F3, "--t-end", "0.3", "--sample", "0.01", "--set-input", "terminal_voltage_V=0"]
    assert main(["sim", *base, "--change", "terminal_voltage_V@0.1=200", "--out", str(tmp_path / "new.csv")]) == 0
    assert "renamed" not in capsys.readouterr().err
    assert main(["sim", *base, "--step", "terminal_voltage_V@0.1=200", "--out", str(tmp_path / "old.csv")]) == 0
    assert "--step is renamed to --change" in capsys.readouterr().err
    new, old = _rows(tmp_path / "new.csv"), _rows(tmp_path / "old.csv")
    assert new == old
    vt = {round(float(r["time_s"]), 3): float(r["terminal_voltage_V"]) for r in new}
    assert vt[0.05] == 0.0 and vt[0.2] == pytest.approx(200.0)


@pytest.mark.parametrize("option", ["--change", "--step"])
def test_bad_change_names_the_option_given(option, capsys):
    rc = main(["sim", F3, "--t-end", "0.1", option, "terminal_voltage_V=200", "--out", "/tmp/never.csv"])
    err = [ln for ln in capsys.readouterr().err.strip().splitlines() if not ln.startswith("note: ")]
    assert rc == 2 and len(err) == 1 and err[0].startswith(f"error: {option}: 'terminal_voltage_V=200': expected")


def test_help_shows_change_and_hides_step():
    p = subprocess.run([sys.executable, "-m", "host.cli", "sim", "--help"], cwd=ROOT, capture_output=True,
                       text=True, timeout=60, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert p.returncode == 0 and "--change NAME@T=VALUE" in p.stdout and "--step" not in p.stdout


def test_ctrl_c_while_exporting_keeps_the_whole_record_and_says_so(kernel, tmp_path, capsys, monkeypatch):
    # the run is done and its record closed complete; an interrupt while the CSV is written
    # leaves no CSV under its name (exports are atomic) and must say how to write it again
    import host.record.export as export
    from host.record import open_record

    def interrupted(*args, **kw):
        raise KeyboardInterrupt

    monkeypatch.setattr(export, "export_frames_csv", interrupted)
    out = tmp_path / "x.csv"
    assert main(["sim", F3, "--t-end", "0.05", "--out", str(out)]) == 130
    said = capsys.readouterr()
    assert "the record is whole: dcrig runs export" in said.out
    assert said.err.strip() == "error: interrupted"
    assert not out.exists()
    with open_record(tmp_path / "x-run") as rd:
        assert rd.status == "complete" and len(rd.frames()) > 1
