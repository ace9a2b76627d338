"""Reading commissioning test records: CSV with unit-suffixed columns and '# key = value' lines.

Owns the record file format (docs/identify.md describes every record kind) and every rule a
record must meet. A record is

    # any comment line
    # speed_rpm = 500            <- test conditions: '# KEY = NUMBER' before the header
    field_current_A,emf_V        <- header: column names with their unit in the name
    0.0,9.1
    2.0,95.3

Each failure is one ConfigError line "FILE: KEY: rule, got VALUE" (the CLI prints it and exits
2). Imports nothing of rtmodel.
"""

from __future__ import annotations

import csv
import difflib
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ConfigError


@dataclass(frozen=True)
class Column:
    name: str  # with unit suffix, e.g. "field_current_A"
    doc: str
    required: bool = True


@dataclass(frozen=True)
class Meta:
    name: str
    doc: str
    default: float | None = None  # None: required unless optional
    optional: bool = False
    rule: str = ""  # "gt0", "ge0", "range:a:b"


@dataclass(frozen=True)
class RecordSpec:
    kind: str  # the record kind, also its subcommand name
    title: str
    columns: tuple[Column, ...]
    meta: tuple[Meta, ...] = ()
    min_rows: int = 2
    increasing: str | None = None  # column that must be strictly increasing (time)
    one_of: tuple[tuple[str, ...], ...] = ()  # groups: at least one of these columns


@dataclass
class Record:
    source: str
    spec: RecordSpec
    columns: dict[str, np.ndarray]
    meta: dict[str, float]
    lines: list[int] = field(default_factory=list)  # file line of each data row

    def __getitem__(self, name: str) -> np.ndarray:
        return self.columns[name]

    def has(self, name: str) -> bool:
        return name in self.columns

    @property
    def n(self) -> int:
        return len(self.lines)


def _quantity(name: str) -> str:
    """'field_current_A' -> 'field_current'; 'speed_rpm' -> 'speed'; 't_s' -> 't'."""
    return name.rsplit("_", 1)[0] if "_" in name else name


def _fail(src: str, key: str, rule: str, value) -> ConfigError:
    return ConfigError(f"{src}: {key}: {rule}, got {value!r}")


def _check_meta_rule(src: str, m: Meta, value: float) -> None:
    if m.rule == "gt0" and not value > 0:
        raise _fail(src, m.name, "must be > 0", value)
    if m.rule == "ge0" and not value >= 0:
        raise _fail(src, m.name, "must be >= 0", value)
    if m.rule.startswith("range:"):
        lo, hi = (float(x) for x in m.rule.split(":")[1:])
        if not lo <= value <= hi:
            raise _fail(src, m.name, f"must be within [{lo:g}, {hi:g}]", value)


def read_record(path: str | Path, spec: RecordSpec) -> Record:
    """Read and check one record file against its spec. Raises ConfigError (one line)."""
    src = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as err:
        raise ConfigError(f"{src}: cannot read file ({err.strerror})") from err
    except UnicodeDecodeError as err:
        raise ConfigError(f"{src}: not a UTF-8 text file ({err.reason})") from err
    meta_raw: dict[str, tuple[str, int]] = {}
    header: list[str] | None = None
    header_line = 0
    rows: list[tuple[int, list[str]]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            body = stripped[1:].strip()
            if "=" in body and header is None:
                key, val = body.split("=", 1)
                key = key.strip()
                if key and " " not in key:
                    if key in meta_raw:
                        raise _fail(src, key, f"given twice (line {meta_raw[key][1]} and {lineno})", val.strip())
                    meta_raw[key] = (val.split("#", 1)[0].strip(), lineno)
            continue
        cells = next(csv.reader([stripped]))
        cells = [c.strip() for c in cells]
        if header is None:
            header = cells
            header_line = lineno
        else:
            rows.append((lineno, cells))
    if header is None:
        raise ConfigError(f"{src}: header: the file is empty (no header line with column names), got 0 lines of data")
    # --- header: known names, no duplicates, units as the spec says
    known = {c.name: c for c in spec.columns}
    seen = set()
    for name in header:
        if name in seen:
            raise _fail(src, name, f"column given twice (line {header_line})", header)
        seen.add(name)
    for name in header:
        if name in known:
            continue
        # same quantity, other unit: the known name's quantity followed by another unit suffix
        same_q = [c for c in known if name.startswith(_quantity(c) + "_")]
        if same_q:
            others = [n for n in header if n != name and n.startswith(_quantity(same_q[0]) + "_")]
            if others:
                raise _fail(src, name, f"mixed units: the file also has {others[0]}; give {same_q[0]} only", name)
            raise _fail(src, name, f"unit not accepted: this column is {same_q[0]}", name)
        hint = difflib.get_close_matches(name, list(known), n=1, cutoff=0.6)
        more = f"; did you mean '{hint[0]}'?" if hint else ""
        raise ConfigError(
            f"{src}: {name}: unknown column for a {spec.kind} record{more} "
            f"(known: {', '.join(known)}), got {name!r}"
        )
    for c in spec.columns:
        if c.required and c.name not in seen:
            raise ConfigError(f"{src}: {c.name}: required column is missing (header line {header_line}), got {header}")
    for group in spec.one_of:
        if not any(g in seen for g in group):
            raise ConfigError(f"{src}: {group[0]}: one of the columns {list(group)} is required, got {header}")
    # --- rows: numbers, finite, right width
    data = {name: [] for name in header}
    lines = []
    for lineno, cells in rows:
        if len(cells) != len(header):
            raise _fail(src, f"line {lineno}", f"must have {len(header)} values like the header", ",".join(cells))
        for name, cell in zip(header, cells):
            try:
                value = float(cell)
            except ValueError:
                raise _fail(src, name, f"must be a number (line {lineno})", cell) from None
            if not math.isfinite(value):
                raise _fail(src, name, f"must be finite (line {lineno})", cell)
            data[name].append(value)
        lines.append(lineno)
    if len(lines) < spec.min_rows:
        raise _fail(src, header[0], f"too few points: a {spec.kind} record needs at least {spec.min_rows} rows", len(lines))
    cols = {name: np.asarray(vals, dtype=float) for name, vals in data.items()}
    if spec.increasing and spec.increasing in cols:
        t = cols[spec.increasing]
        bad = np.nonzero(np.diff(t) <= 0.0)[0]
        if bad.size:
            k = int(bad[0]) + 1
            raise _fail(src, spec.increasing, f"must be strictly increasing (line {lines[k]})", float(t[k]))
    # --- metadata
    known_meta = {m.name: m for m in spec.meta}
    meta: dict[str, float] = {}
    for key, (raw, lineno) in meta_raw.items():
        if key == "record":
            if raw.strip("'\"") != spec.kind:
                raise _fail(src, "record", f"this file is not a {spec.kind} record (line {lineno})", raw)
            continue
        if key not in known_meta:
            hint = difflib.get_close_matches(key, list(known_meta), n=1, cutoff=0.6)
            more = f"; did you mean '{hint[0]}'?" if hint else ""
            raise ConfigError(f"{src}: {key}: unknown test condition for a {spec.kind} record{more} (line {lineno}), got {raw!r}")
        try:
            value = float(raw)
        except ValueError:
            raise _fail(src, key, f"must be a number (line {lineno})", raw) from None
        if not math.isfinite(value):
            raise _fail(src, key, f"must be finite (line {lineno})", raw)
        _check_meta_rule(src, known_meta[key], value)
        meta[key] = value
    for m in spec.meta:
        if m.name not in meta:
            if m.default is not None:
                meta[m.name] = m.default
            elif not m.optional:
                raise ConfigError(f"{src}: {m.name}: required test condition is missing (a line '# {m.name} = VALUE' before the header)")
    return Record(source=src, spec=spec, columns=cols, meta=meta, lines=lines)


def check_positive(rec: Record, name: str, allow_zero: bool = True) -> None:
    """Every value of a column >= 0 (or > 0)."""
    v = rec[name]
    bad = np.nonzero(v < 0.0 if allow_zero else v <= 0.0)[0]
    if bad.size:
        k = int(bad[0])
        rule = "must be >= 0" if allow_zero else "must be > 0"
        raise _fail(rec.source, name, f"{rule} (line {rec.lines[k]})", float(v[k]))


# ---------------------------------------------------------------- the record kinds

OPEN_CIRCUIT = RecordSpec(
    "open-circuit", "Open-circuit saturation test (IEEE Std 113; IEC 60034-4)",
    (
        Column("field_current_A", "current in the curve winding (shunt/separate field, or the series field fed separately), A"),
        Column("emf_V", "armature terminal voltage on open circuit, V"),
        Column("speed_rpm", "speed at this point, r/min; optional when the whole test ran at the speed_rpm condition", required=False),
    ),
    (
        Meta("speed_rpm", "test speed when no speed column is given, r/min", optional=True, rule="gt0"),
        Meta("reference_speed_rpm", "speed the curve is normalised to, r/min; default the median test speed", optional=True, rule="gt0"),
    ),
    min_rows=4,
)

ARMATURE_VI = RecordSpec(
    "resistance", "Resistance from standstill voltage-current points (IEEE Std 113 resistance measurement; IEC 60034-1 temperature correction)",
    (
        Column("current_A", "direct current through the winding at standstill, A"),
        Column("voltage_V", "voltage across the winding terminals (for the armature: across the brushes' terminals, so the brush drop is in it), V"),
    ),
    (
        Meta("winding_temp_C", "winding temperature during the test (at rest long enough: the coolant temperature), degC", rule="range:-40:250"),
        Meta("brushes", "1: the voltage includes a brush contact drop (armature), 0: a field winding", default=1.0, rule="range:0:1"),
    ),
    min_rows=2,
)

TEMPERATURE = RecordSpec(
    "temperature", "Winding temperature by the resistance method (IEC 60034-1)",
    (
        Column("t_after_stop_s", "time after switch-off when the hot resistance was read, s (one row per reading)"),
        Column("resistance_ohm", "hot winding resistance, ohm"),
    ),
    (
        Meta("cold_resistance_ohm", "winding resistance before the heat run, ohm", rule="gt0"),
        Meta("cold_temp_C", "winding temperature at the cold reading (= coolant temperature after a long rest), degC", rule="range:-40:100"),
        Meta("coolant_temp_C", "coolant (ambient air) temperature at the end of the heat run, degC", rule="range:-40:100"),
        Meta("test_current_A", "armature current of the heat run, A (a rated-current run gives the rated rise)", optional=True, rule="gt0"),
    ),
    min_rows=1,
    increasing="t_after_stop_s",
)

FIELD_STEP = RecordSpec(
    "field-step", "Field-current response to a field-voltage step (armature open, rotor at rest)",
    (
        Column("t_s", "time, s"),
        Column("field_voltage_V", "voltage across the field winding terminals, V"),
        Column("field_current_A", "field current, A"),
    ),
    (Meta("winding_temp_C", "field winding temperature during the test, degC", rule="range:-40:250"),),
    min_rows=20,
    increasing="t_s",
)

ARMATURE_STEP = RecordSpec(
    "armature-step", "Armature-current rise after a voltage step (rotor locked, field off)",
    (
        Column("t_s", "time, s"),
        Column("armature_voltage_V", "armature terminal voltage, V"),
        Column("armature_current_A", "armature current, A"),
    ),
    (Meta("winding_temp_C", "armature temperature during the test, degC", optional=True, rule="range:-40:250"),),
    min_rows=20,
    increasing="t_s",
)

AUTOTUNE = RecordSpec(
    "autotune", "A drive's current-loop autotune result (values the drive reports)",
    (
        Column("armature_resistance_ohm", "armature circuit resistance the drive measured, ohm", required=False),
        Column("armature_inductance_H", "armature circuit inductance the drive measured, H"),
    ),
    (Meta("winding_temp_C", "armature temperature at the autotune, degC", optional=True, rule="range:-40:250"),),
    min_rows=1,
)

RUN_DOWN = RecordSpec(
    "run-down", "Retardation (run-down) test: armature opened at speed, field held (IEEE Std 113)",
    (
        Column("t_s", "time from opening the armature circuit, s"),
        Column("speed_rpm", "speed, r/min"),
    ),
    (
        Meta("coupled", "1: the load was coupled during the run-down (the result is motor + load inertia), 0: the motor alone", default=0.0, rule="range:0:1"),
    ),
    min_rows=20,
    increasing="t_s",
)

NO_LOAD_LOSSES = RecordSpec(
    "losses", "Rotational losses at speed from no-load runs (armature input less armature copper and brush loss)",
    (
        Column("speed_rpm", "steady no-load speed, r/min"),
        Column("loss_W", "rotational loss at this speed, W (if computed by hand)", required=False),
        Column("armature_voltage_V", "armature terminal voltage, V", required=False),
        Column("armature_current_A", "armature current, A", required=False),
    ),
    (
        Meta("armature_circuit_ohm", "armature circuit resistance during the runs, ohm (for the copper loss)", optional=True, rule="ge0"),
        Meta("brush_drop_V", "total brush drop, V", default=2.0, rule="ge0"),
    ),
    min_rows=1,
    one_of=(("loss_W", "armature_voltage_V"),),
)

ACCELERATION = RecordSpec(
    "acceleration", "Acceleration at known armature current (field held)",
    (
        Column("t_s", "time, s"),
        Column("speed_rpm", "speed, r/min"),
        Column("armature_current_A", "armature current, A"),
        Column("armature_voltage_V", "armature terminal voltage, V"),
    ),
    (
        Meta("armature_circuit_ohm", "armature circuit resistance during the test, ohm", rule="ge0"),
        Meta("brush_drop_V", "total brush drop, V", default=2.0, rule="ge0"),
        Meta("coupled", "1: load coupled, 0: motor alone", default=0.0, rule="range:0:1"),
    ),
    min_rows=20,
    increasing="t_s",
)

LOAD_TEST = RecordSpec(
    "load-test", "Steady load points of a series or compound machine (for the series-field turns ratio)",
    (
        Column("armature_voltage_V", "terminal voltage, V"),
        Column("armature_current_A", "armature current, A"),
        Column("field_current_A", "shunt field current, A (0 for a series machine)"),
        Column("speed_rpm", "steady speed, r/min"),
    ),
    (
        Meta("armature_circuit_ohm", "armature resistance during the test (hot), ohm", rule="ge0"),
        Meta("series_ohm", "series field resistance during the test (hot), ohm", rule="ge0"),
        Meta("brush_drop_V", "total brush drop, V", default=2.0, rule="ge0"),
        Meta("short_shunt", "1: short shunt (the series field carries the line current), 0: long shunt", default=0.0, rule="range:0:1"),
    ),
    min_rows=2,
)

NAMEPLATE = RecordSpec(
    "nameplate", "Nameplate data (one row)",
    (
        Column("rated_power_kW", "rated output, kW"),
        Column("rated_voltage_V", "rated armature voltage, V"),
        Column("rated_current_A", "rated armature current, A"),
        Column("rated_speed_rpm", "base speed, r/min"),
        Column("max_speed_rpm", "top speed, r/min", required=False),
        Column("field_voltage_V", "rated field voltage, V (not for series machines)", required=False),
        Column("field_current_A", "rated field current, A (not for series machines)", required=False),
    ),
    min_rows=1,
)

SPECS = {s.kind: s for s in (OPEN_CIRCUIT, ARMATURE_VI, TEMPERATURE, FIELD_STEP, ARMATURE_STEP,
                             AUTOTUNE, RUN_DOWN, NO_LOAD_LOSSES, ACCELERATION, LOAD_TEST, NAMEPLATE)}
