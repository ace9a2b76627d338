"""Loading and validating machine and converter configs (TOML) against host.schema.

Owns: reading files, `--set KEY=VALUE` overrides, every validation rule, and the resolved
config (a flat dict "section.key" -> value with defaults filled in). Every rule failure is a
ConfigError whose message is one line: "FILE: KEY: rule, got VALUE". Imports no rtmodel.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import ConfigError
from .schema import KEYS_BY_KIND, REQUIRED, Key


@dataclass
class Config:
    """A validated config: `values` maps 'section.key' to a value; defaults filled in."""

    kind: str  # "machine" or "converter"
    source: str  # file name, for messages
    values: dict[str, Any]
    warnings: list[str] = field(default_factory=list)

    def __getitem__(self, path: str) -> Any:
        return self.values[path]

    def get(self, path: str, default: Any = None) -> Any:
        v = self.values.get(path)
        return default if v is None else v


def _flatten(table: dict, prefix: str, out: dict, sections: set[str]) -> None:
    for k, v in table.items():
        path = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            _flatten(v, path, out, sections)
        else:
            out[path] = v


def parse_override(text: str) -> tuple[str, Any]:
    """'machine.ra_ohm=0.03' -> ('machine.ra_ohm', 0.03). Values are read as TOML values;
    anything TOML cannot read is kept as a string."""
    if "=" not in text:
        raise ConfigError(f"--set: '{text}': expected KEY=VALUE, e.g. machine.ra_ohm=0.03")
    key, raw = text.split("=", 1)
    key = key.strip()
    raw = raw.strip()
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw
    except RecursionError as err:
        raise ConfigError(f"--set: {key}: nested more deeply than a config value can be, got '{raw[:20]}...'") from err
    return key, value


def _rule_fail(src: str, path: str, rule: str, value: Any) -> ConfigError:
    return ConfigError(f"{src}: {path}: {rule}, got {value!r}")


# Plausible magnitudes of any number in a config, in the units of its key. Beyond them a
# value is a typing slip (1e308 H, 5e-324 A), and the model's arithmetic would overflow or
# divide by zero long before physics had anything to say.
MAGNITUDE_MAX = 1e9
MAGNITUDE_MIN = 1e-9
INT_MAX = 2**31 - 1
FRAME_PERIOD_MAX_US = 100_000.0


def _short(value: Any) -> Any:
    """A value as a message shows it: a huge integer by its digit count, not its digits."""
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > 10**15:
        return f"a {len(str(abs(value)))}-digit integer"
    return value


def _check_type(src: str, key: Key, value: Any) -> Any:
    kind = key.kind
    if kind == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise _rule_fail(src, key.path, "must be a number", value)
        try:
            value = float(value)
        except OverflowError:
            raise _rule_fail(src, key.path, "must be a finite number (too large for a float)", _short(value)) from None
        if not math.isfinite(value):
            raise _rule_fail(src, key.path, "must be finite", value)
        _check_magnitude(src, key.path, value)
        return value
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise _rule_fail(src, key.path, "must be a whole number", value)
        if abs(value) > INT_MAX:
            raise _rule_fail(src, key.path, f"must be a whole number within +-{INT_MAX}", _short(value))
        return value
    if kind == "bool":
        if not isinstance(value, bool):
            raise _rule_fail(src, key.path, "must be true or false", value)
        return value
    if kind == "str":
        if not isinstance(value, str):
            raise _rule_fail(src, key.path, "must be a string", value)
        return value
    if kind == "floats":
        if not isinstance(value, (list, tuple)) or any(
            isinstance(v, bool) or not isinstance(v, (int, float)) for v in value
        ):
            raise _rule_fail(src, key.path, "must be a list of numbers", value)
        try:
            out = tuple(float(v) for v in value)
        except OverflowError:
            raise _rule_fail(src, key.path, "must hold finite numbers (one is too large for a float)",
                             "a list") from None
        if not all(math.isfinite(v) for v in out):
            raise _rule_fail(src, key.path, "must hold finite numbers", value)
        for v in out:
            _check_magnitude(src, key.path, v)
        return out
    raise AssertionError(kind)


def _check_magnitude(src: str, path: str, value: float) -> None:
    a = abs(value)
    if a > MAGNITUDE_MAX or (a != 0.0 and a < MAGNITUDE_MIN):
        raise _rule_fail(src, path, f"magnitude must be 0 or from {MAGNITUDE_MIN:g} to {MAGNITUDE_MAX:g} "
                         "(a plausible value in this key's unit)", value)


def _check_rule(src: str, key: Key, value: Any) -> None:
    rule = key.rule
    if not rule or value is None:
        return
    if rule == "gt0" and not value > 0:
        raise _rule_fail(src, key.path, "must be > 0", value)
    if rule == "ge0" and not value >= 0:
        raise _rule_fail(src, key.path, "must be >= 0", value)
    if rule.startswith("range:"):
        lo, hi = (float(v) for v in rule.split(":")[1:])
        if not lo <= value <= hi:
            raise _rule_fail(src, key.path, f"must be within [{lo:g}, {hi:g}]", value)
    if rule.startswith("choice:"):
        choices = rule.split(":", 1)[1].split("|")
        if value not in choices:
            hint = difflib.get_close_matches(str(value), choices, n=1)
            more = f"; did you mean '{hint[0]}'?" if hint else ""
            raise ConfigError(f"{src}: {key.path}: expected one of {choices}, got {value!r}{more}")


def resolve(kind: str, data: dict, src: str, overrides: list[str] | tuple[str, ...] = ()) -> Config:
    """Validate a parsed TOML table (plus overrides) and fill in defaults."""
    keys = KEYS_BY_KIND[kind]
    by_path = {k.path: k for k in keys}
    flat: dict[str, Any] = {}
    _flatten(data, "", flat, set())
    for text in overrides:
        path, value = parse_override(text)
        if path not in by_path:
            hint = difflib.get_close_matches(path, list(by_path), n=1)
            more = f"; did you mean '{hint[0]}'?" if hint else ""
            raise ConfigError(f"--set: {path}: unknown key{more}")
        flat[path] = value
    for path in flat:
        if path not in by_path:
            hint = difflib.get_close_matches(path, list(by_path), n=1, cutoff=0.6)
            more = f"; did you mean '{hint[0]}'?" if hint else ""
            raise ConfigError(f"{src}: {path}: unknown key{more}")
    values: dict[str, Any] = {}
    for key in keys:
        if key.path in flat:
            value = _check_type(src, key, flat[key.path])
            _check_rule(src, key, value)
        elif key.default is REQUIRED:
            raise ConfigError(f"{src}: {key.path}: required key is missing")
        else:
            value = key.default
        values[key.path] = value
    cfg = Config(kind=kind, source=src, values=values)
    if kind == "machine":
        _check_machine(cfg)
    else:
        _check_converter(cfg)
    return cfg


def load(kind: str, path: str | Path, overrides: list[str] | tuple[str, ...] = ()) -> Config:
    """Read and validate a config file. Raises ConfigError with one line on any problem."""
    src = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as err:
        raise ConfigError(f"{src}: cannot read file ({err.strerror})") from err
    except UnicodeDecodeError as err:
        raise ConfigError(f"{src}: (file): must be UTF-8 text (TOML), got byte 0x{err.object[err.start]:02x} "
                          f"at offset {err.start}") from err
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{src}: not valid TOML ({err})") from err
    except RecursionError as err:
        raise ConfigError(f"{src}: (file): arrays or tables nested too deeply to be a config") from err
    if kind not in data and kind == "machine":
        raise ConfigError(f"{src}: machine: required table is missing (is this a machine config?)")
    if kind == "converter" and "converter" not in data:
        raise ConfigError(f"{src}: converter: required table is missing (is this a converter config?)")
    return resolve(kind, data, src, overrides)


def _strictly_increasing(seq) -> bool:
    return all(b > a for a, b in zip(seq, seq[1:]))


def _check_machine(cfg: Config) -> None:
    src = cfg.source
    v = cfg.values
    conn = v["machine.connection"]
    series_like = conn == "series"
    compound = conn.startswith("compound")
    need = []
    if not series_like:
        need += ["machine.rated_field_current_A", "machine.field_resistance_ohm"]
    need.append("machine.field_inductance_H")
    if series_like or compound:
        need.append("machine.series_resistance_ohm")
    if compound:
        need.append("machine.series_turns_ratio")
    for path in need:
        if v[path] is None:
            raise ConfigError(f"{src}: {path}: required for connection '{conn}'")
    p_x = "machine.magnetization.field_current_A"
    p_e = "machine.magnetization.emf_V"
    p_at = "machine.magnetization.ampere_turns"
    p_n = "machine.magnetization.speed_rpm"
    k_flux = v["machine.flux_constant_Vs"]
    if k_flux is not None:
        if series_like:
            raise ConfigError(f"{src}: machine.flux_constant_Vs: a series machine's flux follows its current; give its curve, got {k_flux!r}")
        if v[p_x] or v[p_at] or v[p_e]:
            raise ConfigError(f"{src}: machine.flux_constant_Vs: give either a flux constant or a magnetization curve, not both, got {k_flux!r}")
        # the straight line through the rated point, E = K phi w (i / I_f,rated), with no residual
        n_c = v[p_n] or v["machine.rated_speed_rpm"]
        i_r = v["machine.rated_field_current_A"]
        v[p_n] = n_c
        v[p_x] = (0.0, 2.0 * i_r)
        v[p_e] = (0.0, 2.0 * k_flux * n_c * math.pi / 30.0)
    elif v[p_at]:
        if v[p_x]:
            raise ConfigError(f"{src}: {p_at}: give the curve in field amperes or in ampere-turns, not both, got both")
        turns = v["machine.field_turns_per_pole"]
        if turns is None:
            raise ConfigError(f"{src}: machine.field_turns_per_pole: required with {p_at} (to turn ampere-turns into amperes)")
        v[p_x] = tuple(at / turns for at in v[p_at])
        p_x = p_at  # rule failures below name the key the user wrote
    if not v["machine.magnetization.field_current_A"]:
        raise ConfigError(f"{src}: machine.magnetization.field_current_A: required (or ampere_turns, or machine.flux_constant_Vs)")
    if v[p_n] is None:
        raise ConfigError(f"{src}: {p_n}: required key is missing")
    xs = v["machine.magnetization.field_current_A"]
    es = v[p_e]
    if len(xs) < 2:
        raise _rule_fail(src, p_x, "needs at least 2 points", list(xs))
    if len(xs) > 32:
        raise _rule_fail(src, p_x, "allows at most 32 points", len(xs))
    if len(es) != len(xs):
        raise ConfigError(f"{src}: {p_e}: must have as many points as {p_x} ({len(xs)}), got {len(es)}")
    if xs[0] != 0.0:
        raise _rule_fail(src, p_x, "must start at 0 (the residual point)", xs[0])
    if not _strictly_increasing(xs):
        raise _rule_fail(src, p_x, "must be strictly increasing", list(xs))
    if es[0] < 0.0:
        raise _rule_fail(src, p_e, "residual EMF (first value) must be >= 0", es[0])
    if not _strictly_increasing(es):
        raise _rule_fail(src, p_e, "must be strictly increasing (a monotone curve)", list(es))
    ax = v["machine.armature_reaction.armature_current_A"]
    ay = v["machine.armature_reaction.field_equivalent_A"]
    if len(ax) != len(ay):
        raise ConfigError(
            f"{src}: machine.armature_reaction.field_equivalent_A: must have as many points as "
            f"armature_current_A ({len(ax)}), got {len(ay)}"
        )
    if len(ax) > 8:
        raise _rule_fail(src, "machine.armature_reaction.armature_current_A", "allows at most 8 points", len(ax))
    if ax and (ax[0] <= 0.0 or not _strictly_increasing(ax)):
        raise _rule_fail(src, "machine.armature_reaction.armature_current_A", "must be positive and strictly increasing", list(ax))
    if any(y < 0.0 for y in ay):
        raise _rule_fail(src, "machine.armature_reaction.field_equivalent_A", "must be >= 0", list(ay))
    # rated values must agree with each other and with the curve
    vr = v["machine.rated_voltage_V"]
    ir = v["machine.rated_current_A"]
    pr = (v["machine.rated_power_kW"] or 0.0) * 1e3
    nr = v["machine.rated_speed_rpm"]
    if not pr:
        cfg.warnings.append("machine.rated_power_kW not given: the rating cross-check (power against rated voltage x current) is skipped")
    elif pr > vr * ir * 1.0001:
        raise ConfigError(
            f"{src}: machine.rated_power_kW: must not exceed rated voltage x rated current "
            f"({vr * ir / 1e3:.1f} kW), got {pr / 1e3:g}"
        )
    if pr and pr < 0.3 * vr * ir:
        raise ConfigError(
            f"{src}: machine.rated_power_kW: below 30 % of rated voltage x rated current "
            f"({vr * ir / 1e3:.1f} kW) is not a plausible rating, got {pr / 1e3:g}"
        )
    mx = v["machine.max_speed_rpm"]
    if mx is not None and mx < nr:
        raise _rule_fail(src, "machine.max_speed_rpm", f"must be >= rated_speed_rpm ({nr:g})", mx)
    r_series = v["machine.series_resistance_ohm"] or 0.0
    drop = ir * (v["machine.ra_ohm"] + r_series) + v["machine.brush_drop_V"]
    if v["machine.duty"] == "motor" and drop >= vr:
        raise ConfigError(
            f"{src}: machine.ra_ohm: armature drop at rated current ({drop:.1f} V) must be below "
            f"rated voltage ({vr:g} V), got {v['machine.ra_ohm']!r}"
        )
    top = es[-1] * nr / v["machine.magnetization.speed_rpm"]
    if top < 0.5 * vr:
        raise ConfigError(
            f"{src}: {p_e}: the curve reaches only {top:.0f} V at rated speed, below half the rated "
            f"voltage ({vr:g} V): curve and ratings disagree, got last point {es[-1]:g}"
        )
    if conn != "series":
        fr = v["machine.field_resistance_ohm"]
        if not v["machine.resistances_as_measured"]:
            fr *= (235.0 + v["machine.field_temp_C"]) / (235.0 + v["machine.resistance_ref_C"])
        vf = (fr + v["machine.field_rheostat_ohm"]) * v["machine.rated_field_current_A"]
        if conn != "separate" and vf > 1.2 * vr:
            raise ConfigError(
                f"{src}: machine.rated_field_current_A: a shunt field cannot carry it from the rated "
                f"voltage ({vr:g} V): field circuit with rheostat needs {vf:.0f} V, "
                f"got {v['machine.rated_field_current_A']!r}"
            )
    # rated excitation must lie on the measured curve, not on its extrapolation
    rated_exc_key = "machine.rated_current_A" if series_like else "machine.rated_field_current_A"
    if v[rated_exc_key] > xs[-1]:
        raise ConfigError(
            f"{src}: {rated_exc_key}: beyond the magnetization curve's last point ({xs[-1]:g} A): "
            f"the EMF there would be extrapolated, got {v[rated_exc_key]!r}"
        )
    # keys that the connection ignores: said by `check`, not refused (templates share them)
    if not compound and v["machine.series_turns_ratio"] is not None:
        cfg.warnings.append(f"machine.series_turns_ratio is used by compound connections only; '{conn}' ignores it")
    s_open, s_close = v["machine.series_short_open_rpm"], v["machine.series_short_close_rpm"]
    if s_open is None and s_close is not None:
        raise ConfigError(f"{src}: machine.series_short_close_rpm: needs machine.series_short_open_rpm (the speed at which the short opens), got {s_close!r}")
    if s_open == 0.0 and s_close is not None:
        cfg.warnings.append("machine.series_short_close_rpm: ignored, machine.series_short_open_rpm is 0 (no shorting contactor)")
    elif s_open is not None and s_close is not None and not s_close < s_open:
        raise ConfigError(f"{src}: machine.series_short_close_rpm: must be below series_short_open_rpm ({s_open:g}), got {s_close!r}")
    if not compound and s_open:
        cfg.warnings.append(f"machine.series_short_open_rpm is used by compound connections only; '{conn}' ignores it")
    if series_like:
        for path in ("machine.rated_field_current_A", "machine.field_resistance_ohm"):
            if v[path] is not None:
                cfg.warnings.append(f"{path}: a series machine has no shunt field; the value is ignored")


def _check_converter(cfg: Config) -> None:
    src = cfg.source
    v = cfg.values
    period = v["frame.period_us"]
    if period is not None and period < 50.0:
        raise ConfigError(f"{src}: frame.period_us: must be at least 50 us (a few model steps), got {period!r}")
    if period is not None and period > FRAME_PERIOD_MAX_US:
        # a frame is one kernel call and one firing-angle update: beyond 0.1 s the controller
        # would see the bridge once every few mains cycles, and the model runs seconds per call
        raise ConfigError(f"{src}: frame.period_us: must be at most {FRAME_PERIOD_MAX_US:g} us (0.1 s), got {period!r}")
    if v["bridge.alpha_min_deg"] >= v["bridge.alpha_max_deg"]:
        raise ConfigError(
            f"{src}: bridge.alpha_max_deg: must exceed alpha_min_deg ({v['bridge.alpha_min_deg']:g}), "
            f"got {v['bridge.alpha_max_deg']!r}"
        )
