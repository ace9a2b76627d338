"""Bad input of every kind, one table: each case is refused with one line, exit status 2.

The rule under test is the project's own (README, DEVELOPERS: `error: FILE: KEY: rule, got
VALUE`, status 2, nothing recorded is lost). Every case runs the real `dcrig` entry point
in-process and checks:
  * exit status 2, stdout empty (no safety banner before a refusal), stderr exactly one line
    starting `error: ` and naming the file or option and the key;
  * no model work was started: the kernel warm-up, the offline run, the closed loop and the
    controller's handshake are replaced by tripwires that fail the test when called;
  * nothing in the working folder was written or changed (a previous run's files included).
Scenario and suite files (issue 8) are in the table too: a scenario or suite refused before
the banner, before any run folder is made and before any scenario runs.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import pytest

from host import cli

ROOT = Path(__file__).resolve().parents[1]
F3 = str(ROOT / "configs/machines/kestrel_f3_stand.toml")
FAN = str(ROOT / "configs/machines/kestrel_shunt_fan.toml")
DUAL = str(ROOT / "configs/converters/kestrel_f3_dual.toml")
S = str(ROOT / "configs/controllers/kestrel_f3_dual.toml")
SCN = ROOT / "configs/scenarios/f3_phase_loss_process.toml"
NINES = "9" * 400
DEEP = "[" * 5000 + "]" * 5000


def _machine_with(tmp: Path, name: str, old: str, new: str) -> str:
    text = Path(F3).read_text(encoding="utf-8")
    assert old in text, old
    p = tmp / name
    p.write_text(text.replace(old, new, 1), encoding="utf-8")
    return str(p)


def _files(tmp: Path) -> dict[str, str]:
    """Broken inputs written once per test into tmp (names -> paths)."""
    f = {}
    latin = tmp / "latin1_machine.toml"
    latin.write_bytes(Path(F3).read_bytes().replace(b"Kestrel", b"Kestr\xe9l", 1))
    f["latin1_machine"] = str(latin)
    rnd = tmp / "random.toml"
    rnd.write_bytes(bytes((i * 197 + 91) % 256 for i in range(600)))
    f["random"] = str(rnd)
    f["nines_machine"] = _machine_with(tmp, "nines.toml", "ra_ohm = ", f"ra_ohm = {NINES} # was ")
    deep = tmp / "deep.toml"
    deep.write_text(Path(F3).read_text(encoding="utf-8") + f"\n[extra]\nx = {DEEP}\n", encoding="utf-8")
    f["deep_machine"] = str(deep)
    f["ppr_machine"] = _machine_with(tmp, "ppr.toml", "encoder_ppr = 2048", "encoder_ppr = 1" + "0" * 30)
    conv = Path(DUAL).read_text(encoding="utf-8")
    (tmp / "latin1_conv.toml").write_bytes(conv.encode() + b"\n# \xff\xfe\n")
    f["latin1_conv"] = str(tmp / "latin1_conv.toml")
    (tmp / "deep_conv.toml").write_text(conv + f"\n[more]\ny = {DEEP}\n", encoding="utf-8")
    f["deep_conv"] = str(tmp / "deep_conv.toml")
    assert "voltage_V = " in conv
    (tmp / "nines_conv.toml").write_text(conv.replace("voltage_V = ", f"voltage_V = {NINES} # ", 1), encoding="utf-8")
    f["nines_conv"] = str(tmp / "nines_conv.toml")
    sett = Path(S).read_text(encoding="utf-8")
    (tmp / "latin1_settings.toml").write_bytes(b"# \xe9\n" + sett.encode())
    f["latin1_settings"] = str(tmp / "latin1_settings.toml")
    (tmp / "deep_settings.toml").write_text(sett + f"\n[zz]\nq = {DEEP}\n", encoding="utf-8")
    f["deep_settings"] = str(tmp / "deep_settings.toml")
    assert "mains_voltage_V = " in sett
    (tmp / "nines_settings.toml").write_text(sett.replace("mains_voltage_V = ", f"mains_voltage_V = {NINES} # ", 1),
                                             encoding="utf-8")
    f["nines_settings"] = str(tmp / "nines_settings.toml")
    (tmp / "a_file").write_text("not a folder\n")
    f["a_file"] = str(tmp / "a_file")
    (tmp / "folder.csv").mkdir()
    f["folder_csv"] = str(tmp / "folder.csv")
    # scenario and suite files: copies of a shipped scenario with its relative paths made
    # absolute (they live in tmp now), then one thing broken in each
    scn = SCN.read_text(encoding="utf-8").replace('"../', f'"{ROOT}/configs/')
    for name, old, new in (
        ("scn_unknown_key", "duration_s = 1.2", "duration_sec = 1.2"),
        ("scn_duration_negative", "duration_s = 1.2", "duration_s = -1.2"),
        ("scn_machine_missing", "machines/kestrel_f3_stand.toml", "machines/kestrel_f3_nosuch.toml"),
        ("scn_unknown_action", 'action = "load_step"', 'action = "load_jump"'),
        ("scn_fault_without_phase", 'phase = "b"', ""),
        ("scn_speed_nan", "speed_rpm = 400.0", "speed_rpm = nan"),
        ("scn_expect_unknown_kind", 'kind = "trip"', 'kind = "trips"'),
    ):
        assert old in scn, old
        (tmp / f"{name}.toml").write_text(scn.replace(old, new, 1), encoding="utf-8")
        f[name] = str(tmp / f"{name}.toml")
    (tmp / "scn_not_utf8.toml").write_bytes(scn.encode().replace(b"Kestrel", b"Kestr\xe9l", 1))
    f["scn_not_utf8"] = str(tmp / "scn_not_utf8.toml")
    (tmp / "scn_deep.toml").write_text(scn + f"\n[extra]\nx = {DEEP}\n", encoding="utf-8")
    f["scn_deep"] = str(tmp / "scn_deep.toml")
    good_scn = tmp / "good_scenario.toml"
    good_scn.write_text(scn, encoding="utf-8")
    suite = f'[suite]\nname = "bad_suite"\n\n[[run]]\nscenario = "{good_scn}"\n'
    for name, old, new in (
        ("suite_unknown_key", 'name = "bad_suite"', 'nme = "bad_suite"'),
        ("suite_scenario_missing", str(good_scn), str(tmp / "nosuch_scenario.toml")),
        ("suite_bad_scenario_inside", str(good_scn), f["scn_duration_negative"]),
        ("suite_must_fail_text", f'scenario = "{good_scn}"', f'scenario = "{good_scn}"\nmust_fail = "yes"'),
        ("suite_baseline_negative", "\n[[run]]", "\n[baseline]\nms = -3.0\n\n[[run]]"),
        ("suite_no_runs", f'\n[[run]]\nscenario = "{good_scn}"\n', "\n"),
        ("suite_same_scenario_twice", "\n[[run]]", f'\n[[run]]\nscenario = "{good_scn}"\n[[run]]'),
    ):
        assert old in suite, old
        (tmp / f"{name}.toml").write_text(suite.replace(old, new, 1), encoding="utf-8")
        f[name] = str(tmp / f"{name}.toml")
    (tmp / "suite_not_utf8.toml").write_bytes(b"# \xff\n" + suite.encode())
    f["suite_not_utf8"] = str(tmp / "suite_not_utf8.toml")
    (tmp / "suite_deep.toml").write_text(suite + f"\n[x]\ny = {DEEP}\n", encoding="utf-8")
    f["suite_deep"] = str(tmp / "suite_deep.toml")
    (tmp / "good_suite.toml").write_text(suite, encoding="utf-8")
    f["good_suite"] = str(tmp / "good_suite.toml")
    prev = tmp / "previous-run"
    prev.mkdir()
    (prev / "frames.csv").write_text("time_s\n0\n")
    f["prev"] = str(prev)
    return f


@dataclass
class Case:
    name: str
    argv: list  # strings; "{key}" is replaced from _files()
    must: tuple  # substrings of the one error line (file or option, key, rule)


SIM = ["sim", F3, "--t-end", "0.01"]
SERVE = ["serve", F3, "--converter", DUAL, "--link", "socket://127.0.0.1:9", "--lockstep"]
CTRL = ["controller", "--link", "socket://127.0.0.1:9", "--settings", S]

CASES = [
    # --- machine files and keys
    Case("machine_not_utf8", ["check", "{latin1_machine}"], ("latin1_machine.toml", "UTF-8", "0xe9")),
    Case("machine_random_bytes_sim", SIM[:1] + ["{random}", "--t-end", "0.01", "--out", "x.csv"], ("random.toml",)),
    Case("machine_400_nines_in_file", ["check", "{nines_machine}"], ("nines.toml", "machine.ra_ohm", "too large")),
    Case("machine_400_nines_set", ["steady", F3, "--vt", "440", "--speed", "500", "--set", f"machine.ra_ohm={NINES}"],
         ("machine.ra_ohm", "too large")),
    Case("machine_deep_nesting", ["check", "{deep_machine}"], ("deep.toml", "nested too deeply")),
    Case("machine_deep_nesting_set", ["check", F3, "--set", f"machine.ra_ohm={DEEP}"], ("--set", "machine.ra_ohm", "nested")),
    Case("brush_knee_denormal", ["check", F3, "--set", "machine.brush_knee_A=5e-324"], ("machine.brush_knee_A", "magnitude")),
    Case("curve_speed_denormal", ["check", F3, "--set", "machine.magnetization.speed_rpm=5e-324"],
         ("machine.magnetization.speed_rpm", "magnitude")),
    Case("la_huge", ["check", F3, "--set", "machine.la_H=1e308"], ("machine.la_H", "magnitude")),
    Case("encoder_ppr_huge_file", ["check", "{ppr_machine}"], ("ppr.toml", "sensors.encoder_ppr", "whole number")),
    Case("encoder_ppr_1e6_plus", ["check", F3, "--set", "sensors.encoder_ppr=2000000"], ("sensors.encoder_ppr", "within")),
    Case("field_mode_too_fast", ["check", FAN, "--set", "machine.field_inductance_H=1e-4", "--set", "machine.field_leakage_H=0"],
         ("kestrel_shunt_fan.toml", "sim.dt_us", "stability")),
    Case("unknown_machine_key", ["check", F3, "--set", "machine.ra_ohms=0.1"], ("machine.ra_ohms", "unknown key")),
    # --- converter files and keys
    Case("frame_period_1e10_check", ["check", F3, "--converter", DUAL, "--set", "frame.period_us=1e10"], ("frame.period_us",)),
    Case("frame_period_1e10_demo", ["demo", "--set", "frame.period_us=1e10", "--out", "d"], ("kestrel_f3_dual.toml", "frame.period_us")),
    Case("frame_period_above_0_1_s", ["check", F3, "--converter", DUAL, "--set", "frame.period_us=200000"],
         ("frame.period_us", "at most")),
    Case("converter_not_utf8", ["check", F3, "--converter", "{latin1_conv}"], ("latin1_conv.toml", "UTF-8")),
    Case("converter_deep_nesting", ["sim", F3, "--converter", "{deep_conv}", "--t-end", "0.01", "--out", "x.csv"],
         ("deep_conv.toml", "nested")),
    Case("converter_400_nines", ["check", F3, "--converter", "{nines_conv}"], ("nines_conv.toml", "mains.voltage_V", "too large")),
    # --- controller settings and options
    Case("settings_not_utf8_demo", ["demo", "--settings", "{latin1_settings}", "--out", "d"], ("latin1_settings.toml", "UTF-8")),
    Case("settings_deep_demo", ["demo", "--settings", "{deep_settings}", "--out", "d"], ("deep_settings.toml", "nested")),
    Case("settings_400_nines_controller", ["controller", "--link", "socket://127.0.0.1:9", "--settings", "{nines_settings}"],
         ("nines_settings.toml", "drive.mains_voltage_V", "too large")),
    Case("handshake_timeout_nan", CTRL + ["--handshake-timeout", "nan"], ("--handshake-timeout", "nan")),
    Case("handshake_timeout_inf", CTRL + ["--handshake-timeout", "inf"], ("--handshake-timeout", "inf")),
    Case("handshake_timeout_negative", CTRL + ["--handshake-timeout", "-1"], ("--handshake-timeout", "-1")),
    Case("idle_timeout_nan", CTRL + ["--idle-timeout", "nan"], ("--idle-timeout", "nan")),
    # --- links
    Case("socket_without_port", ["controller", "--link", "socket://", "--settings", S], ("socket://", "port")),
    Case("socket_without_host", ["controller", "--link", "socket://:5020", "--settings", S], ("socket://:5020", "host")),
    Case("serve_missing_device", ["serve", F3, "--link", "/dev/ttyUSB7-dcrig-none"], ("/dev/ttyUSB7-dcrig-none", "no such device")),
    Case("serve_unknown_scheme", ["serve", F3, "--link", "nosuch://x"], ("nosuch://x", "scheme")),
    Case("serve_pty_with_path", ["serve", F3, "--link", "pty://dev/pts/3"], ("pty://", "no path")),
    Case("serve_bad_baud", ["serve", F3, "--link", "loop://", "--baud", "7"], ("loop://", "baud")),
    # --- command-line values and output paths
    Case("sim_out_no_folder", SIM + ["--out", "nodir/x.csv"], ("--out", "nodir/x.csv", "does not exist")),
    Case("sim_out_is_folder", SIM + ["--out", "{folder_csv}"], ("--out", "folder.csv", "folder")),
    Case("sim_out_under_file", SIM + ["--out", "{a_file}/x.csv"], ("--out", "a_file", "not a folder")),
    Case("sim_plot_no_folder", SIM + ["--out", "x.csv", "--plot", "nodir/x.png"], ("--plot", "nodir/x.png")),
    Case("sim_out_in_proc", SIM + ["--out", "/proc/dcrig-x.csv"], ("--out", "/proc")),
    Case("sim_sample_nan", SIM + ["--out", "x.csv", "--sample", "nan"], ("--sample", "nan")),
    Case("sim_sample_inf", SIM + ["--out", "x.csv", "--sample", "inf"], ("--sample", "inf")),
    Case("sim_sample_above_t_end", SIM + ["--out", "x.csv", "--sample", "5"], ("--sample", "--t-end")),
    Case("sim_t_end_nan", ["sim", F3, "--t-end", "nan", "--out", "x.csv"], ("--t-end", "nan")),
    Case("sim_dt_negative", SIM + ["--out", "x.csv", "--dt", "-1"], ("--dt",)),
    Case("sim_terminal_voltage_1e30", SIM + ["--out", "x.csv", "--set-input", "terminal_voltage_V=1e30"],
         ("--set-input", "terminal_voltage_V", "rated voltage")),
    Case("sim_prime_speed_1e30", SIM + ["--out", "x.csv", "--set-input", "prime_speed_rpm=1e30"],
         ("--set-input", "prime_speed_rpm")),
    Case("sim_current_ref_1e12", SIM + ["--out", "x.csv", "--set-input", "current_ref_A=1e12"], ("current_ref_A", "rated current")),
    Case("sim_step_value_out_of_range", SIM + ["--out", "x.csv", "--change", "mains_pu@0.001=1e6"], ("--change", "mains_pu")),
    Case("demo_out_in_proc", ["demo", "--out", "/proc/dcrig-x"], ("--out", "/proc")),
    Case("demo_out_is_file", ["demo", "--out", "{a_file}"], ("--out", "a_file", "not a folder")),
    Case("demo_load_nan", ["demo", "--load", "nan", "--out", "d"], ("--load", "nan")),
    Case("serve_watchdog_zero", SERVE + ["--watchdog", "0"], ("--watchdog", "0")),
    Case("serve_watchdog_negative", SERVE + ["--watchdog", "-5"], ("--watchdog", "-5")),
    Case("serve_load_50", SERVE + ["--load", "50"], ("--load", "50")),
    Case("serve_load_nan", SERVE + ["--load", "nan"], ("--load", "nan")),
    Case("serve_connect_timeout_nan", SERVE + ["--connect-timeout", "nan"], ("--connect-timeout",)),
    Case("serve_out_is_file", SERVE + ["--out", "{a_file}"], ("--out", "a_file")),
    Case("serve_max_error_rate_nan", SERVE + ["--max-error-rate", "nan"], ("--max-error-rate", "nan")),
    Case("serve_peer_timeout_zero", SERVE + ["--peer-timeout", "0"], ("--peer-timeout",)),
    # --- scenario files (docs/scenarios.md)
    Case("scenario_unknown_key", ["scenario", "{scn_unknown_key}", "--out", "runs"],
         ("scn_unknown_key.toml", "scenario.duration_sec", "unknown key", "did you mean 'scenario.duration_s'")),
    Case("scenario_duration_negative", ["scenario", "{scn_duration_negative}", "--out", "runs"],
         ("scn_duration_negative.toml", "scenario.duration_s", "(0, 600]", "-1.2")),
    Case("scenario_machine_missing", ["scenario", "{scn_machine_missing}", "--out", "runs"],
         ("scn_machine_missing.toml", "plant.machine", "file not found", "kestrel_f3_nosuch.toml")),
    Case("scenario_unknown_action", ["scenario", "{scn_unknown_action}", "--out", "runs"],
         ("scn_unknown_action.toml", "timeline[0].action", "load_jump")),
    Case("scenario_fault_without_phase", ["scenario", "{scn_fault_without_phase}", "--out", "runs"],
         ("scn_fault_without_phase.toml", "phase", "required for fault 'phase_loss'")),
    Case("scenario_speed_nan", ["scenario", "{scn_speed_nan}", "--out", "runs"],
         ("scn_speed_nan.toml", "start.speed_rpm", "finite number", "nan")),
    Case("scenario_expect_unknown_kind", ["scenario", "{scn_expect_unknown_kind}", "--out", "runs"],
         ("scn_expect_unknown_kind.toml", "expect[0].kind", "trips")),
    Case("scenario_not_utf8", ["scenario", "{scn_not_utf8}", "--out", "runs"], ("scn_not_utf8.toml", "UTF-8", "0xe9")),
    Case("scenario_deep_nesting", ["scenario", "{scn_deep}", "--out", "runs"], ("scn_deep.toml", "nested too deeply")),
    # --- suite files (docs/scenarios.md)
    Case("suite_unknown_key", ["suite", "{suite_unknown_key}", "--out", "s"],
         ("suite_unknown_key.toml", "suite.nme", "unknown key")),
    Case("suite_scenario_missing", ["suite", "{suite_scenario_missing}", "--out", "s"],
         ("suite_scenario_missing.toml", "run[0].scenario", "file not found", "nosuch_scenario.toml")),
    Case("suite_bad_scenario_inside", ["suite", "{suite_bad_scenario_inside}", "--out", "s"],
         ("scn_duration_negative.toml", "scenario.duration_s", "(0, 600]")),
    Case("suite_must_fail_text", ["suite", "{suite_must_fail_text}", "--out", "s"],
         ("suite_must_fail_text.toml", "run[0].must_fail", "true or false", "'yes'")),
    Case("suite_baseline_negative", ["suite", "{suite_baseline_negative}", "--out", "s"],
         ("suite_baseline_negative.toml", "baseline.ms", ">= 0", "-3.0")),
    Case("suite_no_runs", ["suite", "{suite_no_runs}", "--out", "s"], ("suite_no_runs.toml", "run", "at least one")),
    Case("suite_same_scenario_twice", ["suite", "{suite_same_scenario_twice}", "--out", "s"],
         ("suite_same_scenario_twice.toml", "run[1].scenario", "already run[0]")),
    Case("suite_not_utf8", ["suite", "{suite_not_utf8}", "--out", "s"], ("suite_not_utf8.toml", "UTF-8", "0xff")),
    Case("suite_deep_nesting", ["suite", "{suite_deep}", "--out", "s"], ("suite_deep.toml", "nested too deeply")),
    Case("suite_jobs_zero", ["suite", "{good_suite}", "--jobs", "0", "--out", "s"], ("--jobs", ">= 1", "0")),
]


def _tripwire(what):
    def fail(*_a, **_k):
        raise AssertionError(f"{what} started although the input was bad")

    return fail


def _snapshot(folder: Path) -> dict:
    out = {}
    for dirpath, dirnames, filenames in os.walk(folder):
        for n in dirnames + filenames:
            p = Path(dirpath) / n
            st = p.lstat()
            out[str(p.relative_to(folder))] = (st.st_size, st.st_mtime_ns, p.is_dir())
    return out


def test_table_has_at_least_40_cases():
    assert len(CASES) >= 40
    assert len({c.name for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input_is_one_line_exit_2_and_writes_nothing(case, tmp_path, monkeypatch, capsys):
    import host.controller.process as proc_mod
    import host.link.session as session_mod
    import host.loop as loop_mod
    import host.runner as runner_mod
    import host.scenario.run as scenario_run_mod
    import host.sim as sim_mod
    import host.suite.run as suite_run_mod

    files = _files(tmp_path)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(loop_mod, "warm_kernel", _tripwire("the kernel warm-up"))
    monkeypatch.setattr(sim_mod, "run_offline", _tripwire("the offline run"))
    monkeypatch.setattr(runner_mod, "run_closed_loop", _tripwire("the closed loop"))
    monkeypatch.setattr(session_mod.ControllerSession, "handshake", _tripwire("the controller handshake"))
    monkeypatch.setattr(proc_mod, "_loop", _tripwire("the controller loop"))
    monkeypatch.setattr(scenario_run_mod, "run_scenario", _tripwire("a scenario run"))
    monkeypatch.setattr(suite_run_mod, "run_one", _tripwire("a scenario run of a suite"))
    monkeypatch.setattr(suite_run_mod, "run_suite", _tripwire("the suite run"))
    before = _snapshot(tmp_path)
    argv = [a.format(**files) if "{" in a and "[" not in a else a for a in case.argv]
    code = cli.main(argv)
    out, err = capsys.readouterr()
    assert code == 2, (code, out, err)
    assert out == "", f"stdout must stay empty (no banner before a refusal), got {out!r}"
    lines = err.strip("\n").split("\n")
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert "Traceback" not in err
    for m in case.must:
        assert m.format(**files) in lines[0], f"{m!r} not in {lines[0]!r}"
    assert _snapshot(tmp_path) == before, "the refused run wrote or changed files"
