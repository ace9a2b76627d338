"""Bad input: every rule of host/config.py and host/params.py, through the library and the CLI.

Each case copies a demo config into tmp_path, breaks one thing, and checks that
- `host.config.load` (+ `host.params.pack` for the packing rules) raises ConfigError whose
  message is one line naming the file, the key and the rule, and
- `dcrig check ...` (host.cli.main) exits 2 with exactly one stderr line "error: ...", naming
  the same file and key, nothing on stdout, no traceback.
The project rule (bad input: one clear line naming file, key and rule, exit status 2) is the
reference here; the electrical limits behind the consistency rules are common practice, no
source (P <= V I: a machine cannot deliver more than it draws; armature drop below the rated
voltage; a shunt field must be fed from the armature voltage).
Nothing is written under configs/.
"""

from __future__ import annotations

import copy
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import pytest

from host.cli import main
from host.config import load
from host.errors import ConfigError
from host.params import pack
from host.shipped import shipped_config, shipped_dir

MACHINES = shipped_dir("machines")
CONVERTERS = shipped_dir("converters")
F3 = MACHINES / "kestrel_f3_stand.toml"


# ---------------------------------------------------------------- a small TOML writer
def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v)  # JSON string escapes are valid TOML basic-string escapes
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    raise TypeError(v)


def dump_toml(data: dict) -> str:
    lines: list[str] = []

    def table(d: dict, name: str) -> None:
        scalars = {k: v for k, v in d.items() if not isinstance(v, dict)}
        if name:
            lines.append(f"\n[{name}]")
        for k, v in scalars.items():
            lines.append(f"{k} = {_value(v)}")
        for k, v in d.items():
            if isinstance(v, dict):
                table(v, f"{name}.{k}" if name else k)

    table(data, "")
    return "\n".join(lines) + "\n"


def test_toml_writer_round_trips_every_demo_config():
    for path in sorted(MACHINES.glob("*.toml")) + sorted(CONVERTERS.glob("*.toml")):
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        assert tomllib.loads(dump_toml(data)) == data, path.name


# ---------------------------------------------------------------- cases
@dataclass
class Case:
    id: str
    base: str  # "machines/<stem>" or "converters/<stem>"
    mutate: Callable[[dict], None] | None = None  # edit the parsed table in place
    raw: str | None = None  # or: write this text instead
    overrides: tuple[str, ...] = ()  # --set KEY=VALUE
    key: str | None = None  # the key the message must name
    words: tuple[str, ...] = ()  # further fragments the message must contain
    machine_for_converter: str = "machines/kestrel_f3_stand"
    names_file: bool = True
    packing: bool = False  # rule lives in host.params.pack
    extra: dict = field(default_factory=dict)


def _set(path: str, value):
    def f(d):
        *tables, name = path.split(".")
        t = d
        for s in tables:
            t = t.setdefault(s, {})
        t[name] = value

    return f


def _del(path: str):
    def f(d):
        *tables, name = path.split(".")
        t = d
        for s in tables:
            t = t[s]
        del t[name]

    return f


def _both(*fs):
    def f(d):
        for g in fs:
            g(d)

    return f


MAG_X = "machine.magnetization.field_current_A"
MAG_E = "machine.magnetization.emf_V"
AR_X = "machine.armature_reaction.armature_current_A"
AR_Y = "machine.armature_reaction.field_equivalent_A"
F3_X = [0.0, 2.0, 4.0, 6.0, 8.0, 10.0, 12.0, 14.0, 16.0, 18.0, 20.0, 24.0, 28.0]
F3_E = [9.0, 95.0, 180.0, 255.0, 310.0, 345.0, 370.0, 388.0, 401.0, 412.0, 421.0, 435.0, 446.0]

CASES = [
    # --- connection-dependent rules added after the first review
    Case("compound_field_cannot_carry_rated", "machines/kestrel_pinch_roll",
         _set("machine.field_rheostat_ohm", 900.0),
         key="machine.rated_field_current_A", words=("cannot carry it", "with rheostat")),
    Case("rated_field_beyond_curve", "machines/kestrel_f3_stand", _set("machine.rated_field_current_A", 30.0),
         key="machine.rated_field_current_A", words=("beyond the magnetization curve", "28 A")),
    Case("frame_period_too_short", "converters/kestrel_f3_bridge", _set("frame.period_us", 10.0),
         key="frame.period_us", words=("at least 50 us",)),
    # --- value types (host.config._check_type)
    Case("float_not_a_number", "machines/kestrel_f3_stand", _set("machine.ra_ohm", "0.02"),
         key="machine.ra_ohm", words=("must be a number",)),
    Case("float_not_finite", "machines/kestrel_f3_stand", _set("machine.la_H", math.inf),
         key="machine.la_H", words=("must be finite",)),
    Case("int_not_whole", "machines/kestrel_f3_stand", _set("sensors.encoder_ppr", 1024.5),
         key="sensors.encoder_ppr", words=("whole number",)),
    Case("bool_not_bool", "machines/kestrel_f3_stand", _set("machine.thermal.frozen", "yes"),
         key="machine.thermal.frozen", words=("true or false",)),
    Case("str_not_str", "machines/kestrel_f3_stand", _set("machine.name", 5),
         key="machine.name", words=("must be a string",)),
    Case("list_not_numbers", "machines/kestrel_f3_stand", _set(MAG_E, "9, 95, 180"),
         key=MAG_E, words=("list of numbers",)),
    Case("list_not_finite", "machines/kestrel_f3_stand", _set(MAG_E, F3_E[:-1] + [math.nan]),
         key=MAG_E, words=("finite",)),
    # --- single-key rules (host.config._check_rule)
    Case("resistance_negative", "machines/kestrel_f3_stand", _set("machine.ra_ohm", -0.01),
         key="machine.ra_ohm", words=("must be >= 0", "-0.01")),
    Case("resistance_negative", "machines/kestrel_shunt_fan", _set("machine.field_resistance_ohm", -185.0),
         key="machine.field_resistance_ohm", words=("must be > 0", "-185")),
    Case("inertia_zero", "machines/kestrel_pinch_roll", _set("mechanics.inertia_kgm2", 0.0),
         key="mechanics.inertia_kgm2", words=("must be > 0",)),
    Case("inertia_negative", "machines/kestrel_pinch_roll", _set("mechanics.inertia_kgm2", -2.8),
         key="mechanics.inertia_kgm2", words=("must be > 0", "-2.8")),
    Case("ge0_negative", "machines/kestrel_shunt_fan", _set("machine.brush_drop_V", -2.0),
         key="machine.brush_drop_V", words=("must be >= 0",)),
    Case("load_inertia_negative", "machines/kestrel_shunt_fan", _set("mechanics.load_inertia_kgm2", -6.0),
         key="mechanics.load_inertia_kgm2", words=("must be >= 0",)),
    Case("range_above", "machines/kestrel_f3_stand", _set("machine.resistance_ref_C", 300.0),
         key="machine.resistance_ref_C", words=("within [-40, 200]", "300")),
    Case("range_step_below", "machines/kestrel_f3_stand", _set("sim.dt_us", 0.1),
         key="sim.dt_us", words=("within [0.5, 1000]",)),
    Case("choice_with_suggestion", "machines/kestrel_shunt_fan", _set("machine.connection", "shunted"),
         key="machine.connection",
         words=("expected one of", "'separate'", "'shunt'", "'series'", "'compound_long'", "'compound_short'",
                "did you mean 'shunt'?")),
    Case("choice_load_law", "machines/kestrel_shunt_fan", _set("mechanics.load", "fan"),
         key="mechanics.load", words=("expected one of", "'quadratic'", "'prime_mover'", "'fan'")),
    Case("choice_converter_kind", "converters/kestrel_f3_bridge", _set("converter.kind", "dual-bridge"),
         key="converter.kind", words=("'bridge'", "'dual_bridge'", "'averaged_bridge'", "'current_source'",
                                      "did you mean 'dual_bridge'?")),
    # --- keys: unknown, missing (host.config.resolve / load)
    Case("unknown_key_suggestion", "machines/kestrel_f3_stand",
         _both(_del("machine.ra_ohm"), _set("machine.ra_ohms", 0.0175)),
         key="machine.ra_ohms", words=("unknown key", "did you mean 'machine.ra_ohm'?")),
    Case("unknown_section_key_suggestion", "machines/kestrel_f3_stand", _set("mechanics.inertia_kg_m2", 62.0),
         key="mechanics.inertia_kg_m2", words=("unknown key", "did you mean 'mechanics.inertia_kgm2'?")),
    Case("unknown_converter_key", "converters/kestrel_f3_bridge", _set("bridge.alpha_minimum_deg", 5.0),
         key="bridge.alpha_minimum_deg", words=("unknown key", "did you mean 'bridge.alpha_min_deg'?")),
    Case("missing_required", "machines/kestrel_f3_stand", _del("machine.rated_current_A"),
         key="machine.rated_current_A", words=("required key is missing",)),
    Case("missing_required_converter", "converters/kestrel_f3_bridge", _del("mains.inductance_H"),
         key="mains.inductance_H", words=("required key is missing",)),
    Case("missing_machine_table", "machines/kestrel_f3_stand", raw="[mechanics]\ninertia_kgm2 = 1.0\n",
         key="machine", words=("required table is missing",)),
    Case("missing_converter_table", "converters/kestrel_f3_bridge", raw="[mains]\nvoltage_V = 415.0\n",
         key="converter", words=("required table is missing",)),
    # --- connection-dependent required keys (host.config._check_machine)
    Case("shunt_needs_field_current", "machines/kestrel_shunt_fan", _del("machine.rated_field_current_A"),
         key="machine.rated_field_current_A", words=("required for connection 'shunt'",)),
    Case("separate_needs_field_resistance", "machines/kestrel_f3_stand", _del("machine.field_resistance_ohm"),
         key="machine.field_resistance_ohm", words=("required for connection 'separate'",)),
    Case("needs_field_inductance", "machines/kestrel_coil_hoist", _del("machine.field_inductance_H"),
         key="machine.field_inductance_H", words=("required for connection 'series'",)),
    Case("series_needs_series_resistance", "machines/kestrel_coil_hoist", _del("machine.series_resistance_ohm"),
         key="machine.series_resistance_ohm", words=("required for connection 'series'",)),
    Case("compound_needs_series_resistance", "machines/kestrel_pinch_roll", _del("machine.series_resistance_ohm"),
         key="machine.series_resistance_ohm", words=("required for connection 'compound_long'",)),
    Case("compound_needs_turns_ratio", "machines/kestrel_test_stand", _del("machine.series_turns_ratio"),
         key="machine.series_turns_ratio", words=("required for connection 'compound_short'",)),
    Case("shunt_to_compound_needs_turns_ratio", "machines/kestrel_shunt_fan",
         _both(_set("machine.connection", "compound_long"), _set("machine.series_resistance_ohm", 0.02)),
         key="machine.series_turns_ratio", words=("required for connection 'compound_long'",)),
    # --- magnetization curve
    Case("curve_too_short", "machines/kestrel_f3_stand",
         _both(_set(MAG_X, [0.0]), _set(MAG_E, [9.0])),
         key=MAG_X, words=("at least 2 points",)),
    Case("curve_too_long", "machines/kestrel_f3_stand",
         _both(_set(MAG_X, [float(i) for i in range(33)]), _set(MAG_E, [9.0 + 14.0 * i for i in range(33)])),
         key=MAG_X, words=("at most 32 points", "33")),
    Case("curve_lengths_differ", "machines/kestrel_f3_stand", _set(MAG_E, F3_E[:-1]),
         key=MAG_E, words=("as many points as", "(13)", "got 12")),
    Case("curve_not_from_zero", "machines/kestrel_f3_stand", _set(MAG_X, [1.0] + F3_X[1:]),
         key=MAG_X, words=("must start at 0", "got 1.0")),
    Case("curve_x_not_increasing", "machines/kestrel_f3_stand",
         _set(MAG_X, F3_X[:5] + [7.0] + F3_X[6:]),  # 0,2,4,6,8,7,12...
         key=MAG_X, words=("strictly increasing",)),
    Case("curve_x_repeated", "machines/kestrel_f3_stand", _set(MAG_X, F3_X[:5] + [8.0] + F3_X[6:]),
         key=MAG_X, words=("strictly increasing",)),
    Case("curve_residual_negative", "machines/kestrel_f3_stand", _set(MAG_E, [-3.0] + F3_E[1:]),
         key=MAG_E, words=("residual EMF", ">= 0", "-3.0")),
    Case("curve_e_not_increasing", "machines/kestrel_f3_stand", _set(MAG_E, F3_E[:8] + [385.0] + F3_E[9:]),
         key=MAG_E, words=("strictly increasing", "monotone")),
    # --- armature reaction table
    Case("reaction_lengths_differ", "machines/kestrel_f3_stand",
         _both(_set(AR_X, [500.0, 1040.0]), _set(AR_Y, [0.1, 0.4, 0.9])),
         key=AR_Y, words=("as many points as", "(2)", "got 3")),
    Case("reaction_too_long", "machines/kestrel_f3_stand",
         _both(_set(AR_X, [100.0 * (i + 1) for i in range(9)]), _set(AR_Y, [0.05 * i for i in range(9)])),
         key=AR_X, words=("at most 8 points",)),
    Case("reaction_x_not_positive", "machines/kestrel_f3_stand",
         _both(_set(AR_X, [0.0, 1040.0]), _set(AR_Y, [0.0, 0.4])),
         key=AR_X, words=("positive and strictly increasing",)),
    Case("reaction_x_not_increasing", "machines/kestrel_f3_stand",
         _both(_set(AR_X, [1040.0, 500.0]), _set(AR_Y, [0.4, 0.1])),
         key=AR_X, words=("positive and strictly increasing",)),
    Case("reaction_y_negative", "machines/kestrel_f3_stand",
         _both(_set(AR_X, [500.0, 1040.0]), _set(AR_Y, [0.1, -0.4])),
         key=AR_Y, words=("must be >= 0",)),
    # --- rated values that disagree
    Case("power_above_v_times_i", "machines/kestrel_f3_stand", _set("machine.rated_power_kW", 480.0),
         key="machine.rated_power_kW", words=("must not exceed rated voltage x rated current", "457.6", "480")),
    Case("power_implausibly_low", "machines/kestrel_f3_stand", _set("machine.rated_power_kW", 120.0),
         key="machine.rated_power_kW", words=("below 30 %", "120")),
    Case("max_speed_below_rated", "machines/kestrel_f3_stand", _set("machine.max_speed_rpm", 400.0),
         key="machine.max_speed_rpm", words=("must be >= rated_speed_rpm (500)", "400")),
    Case("armature_drop_above_rated_voltage", "machines/kestrel_coil_hoist", _set("machine.ra_ohm", 1.2),
         key="machine.ra_ohm", words=("armature drop at rated current", "must be below rated voltage (240 V)", "1.2")),
    Case("curve_far_below_rated_voltage", "machines/kestrel_f3_stand",
         _set(MAG_E, [round(e / 3.0, 3) for e in F3_E]),
         key=MAG_E, words=("below half the rated voltage", "curve and ratings disagree")),
    Case("shunt_field_cannot_carry_rated_current", "machines/kestrel_shunt_fan",
         _set("machine.field_rheostat_ohm", 200.0),
         key="machine.rated_field_current_A", words=("shunt field cannot carry it", "440 V", "1.8")),
    # --- converter
    Case("alpha_min_not_below_alpha_max", "converters/kestrel_f3_bridge",
         _both(_set("bridge.alpha_min_deg", 90.0), _set("bridge.alpha_max_deg", 90.0)),
         key="bridge.alpha_max_deg", words=("must exceed alpha_min_deg (90)",)),
    Case("alpha_max_out_of_range", "converters/kestrel_f3_bridge", _set("bridge.alpha_max_deg", 185.0),
         key="bridge.alpha_max_deg", words=("within [90, 180]",)),
    Case("mains_frequency_out_of_range", "converters/kestrel_pinch_bridge", _set("mains.frequency_Hz", 5.0),
         key="mains.frequency_Hz", words=("within [10, 400]",)),
    # --- packing (host.params.pack)
    Case("step_above_stability_limit", "machines/kestrel_shunt_fan",
         _both(_set("machine.la_H", 1e-5), _set("sim.dt_us", 200.0)),
         key="sim.dt_us", words=("stability limit", "got 200.0"), packing=True),
    Case("field_bridge_on_shunt_machine", "converters/kestrel_f3_bridge", None,
         key="field.kind", words=("separately excited machines only", "'shunt'", "'averaged_half_bridge'"),
         machine_for_converter="machines/kestrel_shunt_fan", packing=True),
    Case("field_half_bridge_on_compound_machine", "converters/kestrel_pinch_bridge",
         _set("field.kind", "half_bridge"),
         key="field.kind", words=("separately excited machines only", "'compound_long'"),
         machine_for_converter="machines/kestrel_pinch_roll", packing=True),
]


def _write_case(case: Case, tmp_path: Path) -> Path:
    kind_dir, stem = case.base.split("/")
    src = shipped_config(f"{kind_dir}/{stem}.toml")
    dst = tmp_path / f"{case.id}.toml"
    if case.raw is not None:
        dst.write_text(case.raw, encoding="utf-8")
    else:
        data = tomllib.loads(src.read_text(encoding="utf-8"))
        if case.mutate:
            data = copy.deepcopy(data)
            case.mutate(data)
        dst.write_text(dump_toml(data), encoding="utf-8")
    return dst


def _paths(case: Case, tmp_path: Path) -> tuple[Path, Path | None, Path]:
    """(machine file, converter file or None, the broken file)."""
    broken = _write_case(case, tmp_path)
    if case.base.startswith("converters/"):
        mkind, mstem = case.machine_for_converter.split("/")
        return shipped_config(f"{mkind}/{mstem}.toml"), broken, broken
    return broken, None, broken


def _check_message(msg: str, case: Case, broken: Path) -> None:
    assert "\n" not in msg, msg
    assert "Traceback" not in msg
    if case.names_file:
        assert str(broken) in msg, msg
    if case.key:
        assert case.key in msg, msg
    for w in case.words:
        assert w in msg, f"{w!r} not in {msg!r}"


def _load_and_pack(machine: Path, converter: Path | None, overrides=()):
    m = load("machine", machine, list(overrides))
    c = load("converter", converter) if converter else None
    return pack(m, c)


def _cli(capsys, argv: list[str]) -> tuple[int, str, str]:
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def _check_cli(rc: int, out: str, err: str) -> str:
    assert rc == 2, (rc, out, err)
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert "Traceback" not in err and "Traceback" not in out
    assert out == "", out
    return lines[0]


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_library_refuses(case, tmp_path):
    machine, converter, broken = _paths(case, tmp_path)
    if case.packing:
        # loading alone accepts it; packing the plant must refuse
        load("machine", machine)
        if converter:
            load("converter", converter)
    with pytest.raises(ConfigError) as exc:
        _load_and_pack(machine, converter, case.overrides)
    _check_message(str(exc.value), case, broken)


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_cli_check_refuses(case, tmp_path, capsys):
    machine, converter, broken = _paths(case, tmp_path)
    argv = ["check", str(machine)]
    if converter:
        argv += ["--converter", str(converter)]
    for o in case.overrides:
        argv += ["--set", o]
    line = _check_cli(*_cli(capsys, argv))
    _check_message(line[len("error: "):], case, broken)


def test_every_demo_config_is_accepted(capsys):
    """The cases above must fail because of the one edit, not because the base is broken."""
    bases = {c.base for c in CASES} | {c.machine_for_converter for c in CASES}
    for base in sorted(bases):
        kind_dir, stem = base.split("/")
        path = shipped_config(f"{kind_dir}/{stem}.toml")
        argv = ["check", str(path)] if kind_dir == "machines" else ["check", str(F3), "--converter", str(path)]
        rc, out, err = _cli(capsys, argv)
        assert rc == 0, (base, err)
        assert "error" not in err


def test_writer_keeps_the_base_valid(tmp_path):
    """A case written with no edit loads and packs: the writer itself breaks nothing."""
    for base in ("machines/kestrel_f3_stand", "machines/kestrel_test_stand", "converters/kestrel_f3_dual"):
        case = Case("unchanged_" + base.split("/")[1], base)
        machine, converter, _ = _paths(case, tmp_path)
        _load_and_pack(machine, converter)


# ---------------------------------------------------------------- file-level and command-line errors
def test_bad_toml_syntax(tmp_path, capsys):
    bad = tmp_path / "broken_syntax.toml"
    text = F3.read_text(encoding="utf-8").replace("ra_ohm = 0.0175", "ra_ohm = 0.0175 ohm", 1)
    assert text != F3.read_text(encoding="utf-8")
    bad.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError) as exc:
        load("machine", bad)
    msg = str(exc.value)
    assert str(bad) in msg and "not valid TOML" in msg and "line" in msg and "\n" not in msg
    line = _check_cli(*_cli(capsys, ["check", str(bad)]))
    assert str(bad) in line and "not valid TOML" in line


def test_bad_toml_duplicate_key(tmp_path, capsys):
    bad = tmp_path / "duplicate.toml"
    bad.write_text(F3.read_text(encoding="utf-8").replace("la_H = 0.00085", "la_H = 0.00085\nla_H = 0.001", 1),
                   encoding="utf-8")
    line = _check_cli(*_cli(capsys, ["check", str(bad)]))
    assert str(bad) in line and "not valid TOML" in line


def test_missing_file(tmp_path, capsys):
    gone = tmp_path / "no_such_machine.toml"
    with pytest.raises(ConfigError) as exc:
        load("machine", gone)
    assert str(gone) in str(exc.value) and "cannot read file" in str(exc.value)
    line = _check_cli(*_cli(capsys, ["check", str(gone)]))
    assert str(gone) in line and "cannot read file" in line


def test_missing_converter_file(tmp_path, capsys):
    gone = tmp_path / "no_such_bridge.toml"
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--converter", str(gone)]))
    assert str(gone) in line and "cannot read file" in line


def test_directory_instead_of_file(tmp_path, capsys):
    line = _check_cli(*_cli(capsys, ["check", str(tmp_path)]))
    assert str(tmp_path) in line and "cannot read file" in line


@pytest.mark.parametrize("text", ["machine.ra_ohm", "machine.ra_ohm 0.02", "machine.ra_ohm:0.02"])
def test_set_without_equals(text, capsys):
    with pytest.raises(ConfigError) as exc:
        load("machine", F3, [text])
    assert "--set" in str(exc.value) and "KEY=VALUE" in str(exc.value)
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--set", text]))
    assert line.startswith("error: --set: ") and text in line and "expected KEY=VALUE" in line


def test_set_unknown_key_suggests(capsys):
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--set", "machine.ra_ohms=0.02"]))
    assert "--set" in line and "machine.ra_ohms" in line and "unknown key" in line
    assert "did you mean 'machine.ra_ohm'?" in line


def test_set_value_breaks_rule(capsys):
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--set", "machine.ra_ohm=-0.01"]))
    assert str(F3) in line and "machine.ra_ohm" in line and "must be >= 0" in line


def test_set_value_wrong_type(capsys):
    # TOML cannot read 'abc', so it stays a string and fails the number rule
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--set", "machine.ra_ohm=abc"]))
    assert "machine.ra_ohm" in line and "must be a number" in line and "'abc'" in line


def test_set_converter_key_without_converter(capsys):
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--set", "bridge.alpha_min_deg=10"]))
    assert "--set" in line and "bridge.alpha_min_deg" in line and "no --converter" in line


def test_set_converter_key_breaks_converter_rule(capsys):
    conv = CONVERTERS / "kestrel_f3_bridge.toml"
    # the ranges (alpha_min 0..90, alpha_max 90..180) meet at 90 deg: only equality is left to refuse
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--converter", str(conv),
                                     "--set", "bridge.alpha_min_deg=90", "--set", "bridge.alpha_max_deg=90"]))
    assert str(conv) in line and "bridge.alpha_max_deg" in line and "must exceed alpha_min_deg (90)" in line
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--converter", str(conv), "--set", "bridge.alpha_min_deg=160"]))
    assert str(conv) in line and "bridge.alpha_min_deg" in line and "within [0, 90]" in line


def test_converter_given_as_machine(capsys):
    conv = CONVERTERS / "kestrel_f3_bridge.toml"
    line = _check_cli(*_cli(capsys, ["check", str(conv)]))
    assert str(conv) in line and "machine" in line and "is this a machine config?" in line


def test_machine_given_as_converter(capsys):
    line = _check_cli(*_cli(capsys, ["check", str(F3), "--converter", str(F3)]))
    assert str(F3) in line and "is this a converter config?" in line


def test_debug_flag_shows_the_traceback_instead(tmp_path):
    """--debug is the documented way to see the cause; without it the line above is all."""
    gone = tmp_path / "absent.toml"
    with pytest.raises(ConfigError):
        main(["--debug", "check", str(gone)])


def test_ignored_keys_are_warned_by_check(tmp_path, capsys):
    """A key the connection ignores is accepted but named by `dcrig check` (not refused)."""
    src = shipped_config("machines/kestrel_shunt_fan.toml").read_text()
    path = tmp_path / "fan.toml"
    path.write_text(src.replace("[machine]\n", "[machine]\nseries_turns_ratio = 0.01\n", 1))
    rc = main(["check", str(path)])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "warning: machine.series_turns_ratio is used by compound connections only" in out
