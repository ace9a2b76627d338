"""The combining step: nameplate + fitted records -> a machine TOML the model runs.

Owns: which record fills which config key (and in what order of preference), the origin of
every value (record / nameplate / estimate / default / user) with its fit quality, writing the
TOML with the origin of each value as a comment beside it, the machine-readable sidecar report
(JSON), and the closing checks (the config loads, packs, and gives a no-load and a rated-load
speed).

Why comments plus a sidecar, not a provenance table in the config schema: the model must not
depend on where a value came from, the loader rejects unknown keys on purpose, and a
provenance table would have to be kept in step with every key of the schema. A comment keeps
the origin beside the value where an engineer reads it; the sidecar keeps it for tools. A
config edited by hand afterwards stays a valid config (its comments may then be stale: the
sidecar records the values as built).
"""

from __future__ import annotations

import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from ..config import resolve
from ..errors import ConfigError
from . import fits as F
from .formulas import resistance_at
from .nameplate import Nameplate, estimate
from .records import SPECS, read_record

# sections and key order of the written TOML (a subset of host.schema, all of it documented there)
LAYOUT = (
    ("machine", ("name", "connection", "compound", "duty", "rated_power_kW", "rated_voltage_V", "rated_current_A",
                 "rated_speed_rpm", "max_speed_rpm", "rated_field_current_A", "ra_ohm", "la_H", "brush_drop_V",
                 "field_resistance_ohm", "field_rheostat_ohm", "field_inductance_H", "field_leakage_H",
                 "series_resistance_ohm", "series_turns_ratio", "resistance_ref_C", "field_temp_C")),
    ("machine.magnetization", ("speed_rpm", "field_current_A", "emf_V")),
    ("machine.thermal", ("ambient_C", "rated_rise_K", "time_constant_s", "insulation_class")),
    ("mechanics", ("inertia_kgm2", "load_inertia_kgm2", "viscous_Nm_per_rad_s", "coulomb_Nm", "load", "load_torque_Nm")),
)


@dataclass
class Origin:
    value: object
    origin: str  # record | nameplate | estimate | default | user
    source: str  # file name or the rule
    quality: dict = field(default_factory=dict)

    def comment(self) -> str:
        q = ", ".join(f"{k} {_short(v)}" for k, v in self.quality.items())
        return f"{self.origin}: {self.source}" + (f" ({q})" if q else "")


def _short(v):
    if isinstance(v, float):
        return f"{v:.3g}"
    return str(v)


@dataclass
class Built:
    values: dict[str, Origin]
    fits: list
    warnings: list[str]
    toml: str = ""
    checks: dict = field(default_factory=dict)


def _fmt_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_fmt_value(x) for x in v) + "]"
    if isinstance(v, int):
        return str(v)
    return f"{float(v):.6g}" if abs(float(v)) >= 1e-4 or v == 0 else f"{float(v):.6e}"


def _quality(fit) -> dict:
    keep = ("rms_residual_V", "scatter_V", "rms_residual_pct", "rms_residual_rpm", "rms_residual_A", "rms_residual_W",
            "rms_residual_Nm", "spread_pct", "points_used", "points_flagged", "resistance_std_error_pct",
            "inductance_rms_residual_pct")
    return {k: fit.quality[k] for k in keep if k in fit.quality}


def _read(kind: str, path) -> object:
    return read_record(path, SPECS[kind])


def build(np_: Nameplate, name: str, records: dict[str, list], reference_C: float = 20.0,
          insulation_class: str = "F") -> Built:
    """Combine nameplate and records. records maps a record kind to a list of file paths."""
    vals: dict[str, Origin] = {}
    fits: list = []
    warns: list[str] = []

    def put(path, value, origin, source, quality=None):
        vals[path] = Origin(value, origin, source, dict(quality or {}))

    def one(kind):
        paths = records.get(kind) or []
        return paths[0] if paths else None

    # --- the plate and the user's choices
    put("machine.name", name, "user", "--name")
    put("machine.connection", np_.connection, "user", "--connection")
    put("machine.duty", np_.duty, "user", "--duty")
    for key in ("rated_power_kW", "rated_voltage_V", "rated_current_A", "rated_speed_rpm"):
        put(f"machine.{key}", getattr(np_, key), "nameplate", "rating plate")
    if np_.max_speed_rpm:
        put("machine.max_speed_rpm", np_.max_speed_rpm, "nameplate", "rating plate")
    put("machine.resistance_ref_C", reference_C, "user", "--ref-temp (resistances below are at this temperature)")
    put("machine.field_temp_C", 75.0, "default", "field winding held at 75 degC in runs (dcrig default)")
    put("machine.field_leakage_H", 0.0, "default", "no field-step record with an open-circuit curve to split it")
    put("machine.thermal.ambient_C", 40.0, "default", "dcrig default coolant temperature")
    put("machine.thermal.rated_rise_K", 80.0, "default", "dcrig default")
    put("machine.thermal.time_constant_s", 1800.0, "default", "dcrig default")
    put("machine.thermal.insulation_class", insulation_class, "user" if insulation_class != "F" else "default", "--insulation")
    put("mechanics.load_inertia_kgm2", 0.0, "default", "no coupled run-down")
    put("mechanics.viscous_Nm_per_rad_s", 0.0, "default", "no losses record")
    put("mechanics.load", "constant", "default", "dcrig default (set the real load law by hand)")
    put("mechanics.load_torque_Nm", 0.0, "default", "no load")
    try:
        est = estimate(np_, reference_C)
    except ValueError as err:
        raise ConfigError(f"nameplate: field_current_A: required for a '{np_.connection}' machine (not series), got none") from err
    for path, (value, origin, why) in est.items():
        put(path, value, origin, why)
    if np_.connection.startswith("compound"):
        put("machine.compound", "cumulative", "default", "assumed cumulative (no load test)")

    # --- open-circuit curve
    occ = None
    if one("open-circuit"):
        occ = F.fit_open_circuit(_read("open-circuit", one("open-circuit")))
        fits.append(occ)
        q = _quality(occ)
        src = Path(occ.source).name
        put("machine.magnetization.speed_rpm", occ.values["reference_speed_rpm"], "record", f"{src} (reference speed)")
        put("machine.magnetization.field_current_A", occ.extra["field_current_A"], "record", src, q)
        put("machine.magnetization.emf_V", occ.extra["emf_V"], "record", f"{src}; residual {occ.quality['residual']}", q)
    curve = (occ.extra["field_current_A"], occ.extra["emf_V"]) if occ else None

    # --- armature resistance and brush drop
    ra_fit = None
    if one("resistance"):
        ra_fit = F.fit_resistance(_read("resistance", one("resistance")), reference_C)
        fits.append(ra_fit)
        src = Path(ra_fit.source).name
        put("machine.ra_ohm", ra_fit.values["resistance_ohm"], "record",
            f"{src}, corrected from {ra_fit.values['test_temp_C']:g} degC by IEC 60034-1 (235)", _quality(ra_fit))
        if "brush_drop_V" in ra_fit.values:
            put("machine.brush_drop_V", ra_fit.values["brush_drop_V"], "record", f"{src} (intercept of V = Vb + R I)", _quality(ra_fit))
    if one("series-resistance"):
        se = F.fit_resistance(_read("resistance", one("series-resistance")), reference_C, winding="series")
        fits.append(se)
        put("machine.series_resistance_ohm", se.values["resistance_ohm"], "record",
            f"{Path(se.source).name}, corrected by IEC 60034-1 (235)", _quality(se))

    # --- field winding
    if one("field-step"):
        fs = F.fit_field_step(_read("field-step", one("field-step")), reference_C, curve=curve)
        fits.append(fs)
        src = Path(fs.source).name
        q = _quality(fs)
        put("machine.field_resistance_ohm", fs.values["field_resistance_ohm"], "record",
            f"{src}, V/I settled, corrected from {fs.values['test_temp_C']:g} degC by IEC 60034-1 (235)", q)
        put("machine.field_inductance_H", fs.values["field_inductance_H"], "record", f"{src} (flux linkage; {fs.quality['inductance_split']})", q)
        if "field_leakage_H" in fs.values:
            put("machine.field_leakage_H", fs.values["field_leakage_H"], "record", f"{src} (split by the curve slope)", q)
    if np_.connection in ("shunt", "compound_long", "compound_short"):
        vf = np_.field_voltage_V or np_.rated_voltage_V
        rf_hot = resistance_at(vals["machine.field_resistance_ohm"].value, reference_C, vals["machine.field_temp_C"].value)
        rheo = vf / np_.field_current_A - rf_hot
        if rheo > 0:
            put("machine.field_rheostat_ohm", rheo, "estimate", "rheostat trimmed for rated field current from the rated field voltage")

    # --- armature inductance
    brush = vals["machine.brush_drop_V"].value
    if one("armature-step"):
        rec = _read("armature-step", one("armature-step"))
        r_step = None
        if ra_fit is not None and "winding_temp_C" in rec.meta:
            r_step = resistance_at(vals["machine.ra_ohm"].value, reference_C, rec.meta["winding_temp_C"])
            if np_.connection in ("series", "compound_long", "compound_short"):
                r_step = None  # the step loop holds the series field too: take R from the step itself
        st = F.fit_armature_step(rec, brush_drop_V=brush, r_ohm=r_step)
        fits.append(st)
        put("machine.la_H", st.values["la_H"], "record", f"{Path(st.source).name} (flux linkage over the current step)", _quality(st))
    elif one("autotune"):
        at = F.fit_autotune(_read("autotune", one("autotune")))
        fits.append(at)
        put("machine.la_H", at.values["la_H"], "record", f"{Path(at.source).name} (the drive's autotune)", {})

    # --- temperature rise
    if one("temperature"):
        tr = F.fit_temperature(_read("temperature", one("temperature")))
        fits.append(tr)
        src = Path(tr.source).name
        put("machine.thermal.ambient_C", tr.values["coolant_temp_C"], "record", f"{src} (coolant temperature)")
        if tr.quality["consistent"] == "yes":
            i_test = tr.values.get("test_current_A")
            if i_test is None:
                tr.warnings.append(f"{tr.source}: no test_current_A: the heat run is taken as a rated-current run")
                put("machine.thermal.rated_rise_K", tr.values["rise_K"], "record", f"{src} (resistance method, IEC 60034-1)", _quality(tr))
            elif abs(i_test / np_.rated_current_A - 1) <= 0.05:
                put("machine.thermal.rated_rise_K", tr.values["rise_K"], "record", f"{src} (resistance method, IEC 60034-1)", _quality(tr))
            else:
                scaled = tr.values["rise_K"] * (np_.rated_current_A / i_test) ** 2
                put("machine.thermal.rated_rise_K", scaled, "estimate",
                    f"{src}: rise at {i_test:g} A scaled by (I_rated/I)^2 (copper loss; common practice, no source)")

    # --- losses, inertia
    losses = None
    if one("losses"):
        rec = _read("losses", one("losses"))
        r_hint = ra_fit.values["resistance_at_test_ohm"] if ra_fit is not None else None
        losses = F.fit_losses(rec, r_hint)
        fits.append(losses)
        src = Path(losses.source).name
        put("mechanics.coulomb_Nm", losses.values["coulomb_Nm"], "record", f"{src} (P = Tc w + b w^2)", _quality(losses))
        put("mechanics.viscous_Nm_per_rad_s", losses.values["viscous_Nm_per_rad_s"], "record", f"{src} (P = Tc w + b w^2)", _quality(losses))
    rotor = total = None
    for path in records.get("run-down") or []:
        if losses is None:
            raise ConfigError(f"{path}: run-down: the retardation method needs the losses at speed (a losses record), got none")
        rd = F.fit_run_down(_read("run-down", path), losses)
        fits.append(rd)
        if rd.values["coupled"] >= 0.5:
            total = (rd.values["inertia_total_kgm2"], Path(rd.source).name, _quality(rd))
        else:
            rotor = (rd.values["inertia_total_kgm2"], Path(rd.source).name, _quality(rd))
    if one("acceleration"):
        ac = F.fit_acceleration(_read("acceleration", one("acceleration")), losses)
        fits.append(ac)
        item = (ac.values["inertia_total_kgm2"], Path(ac.source).name + " (acceleration)", _quality(ac))
        if ac.values["coupled"] >= 0.5:
            total = total or item
        else:
            if rotor is not None and abs(item[0] / rotor[0] - 1) > 0.05:
                warns.append(f"inertia: run-down gives {rotor[0]:.4g} kg m^2, acceleration {item[0]:.4g} kg m^2 (more than 5 % apart)")
            rotor = rotor or item
    if rotor is not None:
        put("mechanics.inertia_kgm2", rotor[0], "record", f"{rotor[1]} (retardation method, IEEE Std 113)" if "accel" not in rotor[1] else rotor[1], rotor[2])
        if total is not None:
            put("mechanics.load_inertia_kgm2", max(total[0] - rotor[0], 0.0), "record", f"{total[1]} less the motor alone", total[2])
    elif total is not None:
        put("mechanics.inertia_kgm2", total[0], "record", f"{total[1]} (motor and load together; no uncoupled record)", total[2])
        warns.append("inertia: only a coupled test: the whole inertia is written as the motor's, load_inertia_kgm2 = 0")

    # --- series field turns ratio
    if one("load-test"):
        if curve is None:
            raise ConfigError(f"{one('load-test')}: load-test: the turns ratio needs the open-circuit curve (an open-circuit record), got none")
        lt = F.fit_turns_ratio(_read("load-test", one("load-test")), curve, vals["machine.magnetization.speed_rpm"].value)
        fits.append(lt)
        src = Path(lt.source).name
        if np_.connection.startswith("compound"):
            put("machine.series_turns_ratio", lt.values["series_turns_ratio"], "record", f"{src} (curve read backwards)", _quality(lt))
            put("machine.compound", lt.extra["compound"], "record", f"{src} (sign of the series ampere-turns)")
        else:
            warns.append(f"{lt.source}: a turns ratio is used by compound machines only; '{np_.connection}' ignores it")

    for f in fits:
        warns.extend(f.warnings)
    if np_.connection == "series":
        for k in ("machine.field_resistance_ohm", "machine.rated_field_current_A", "machine.field_rheostat_ohm"):
            vals.pop(k, None)
    if not np_.connection.startswith("compound"):
        vals.pop("machine.series_turns_ratio", None)
        vals.pop("machine.compound", None)
    if np_.connection in ("separate", "shunt"):
        vals.pop("machine.series_resistance_ohm", None)
    built = Built(values=vals, fits=fits, warnings=warns)
    built.toml = to_toml(built)
    return built


def to_toml(built: Built) -> str:
    vals = built.values
    counts = {}
    for o in vals.values():
        counts[o.origin] = counts.get(o.origin, 0) + 1
    lines = [
        f"# {vals['machine.name'].value}: machine model built by `dcrig identify build`.",
        "# Each value's origin is in the comment beside it: record (fitted from a test record, with",
        "# its fit quality), nameplate, estimate (a typical ratio: docs/identify.md), default (dcrig's),",
        "# user (a command-line choice). The same, machine-readable, is in the .identify.json sidecar.",
        "# Origins here: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items())) + ".",
        "# CAUTION: a model from estimates shows a plausible machine, not this one; prove protections",
        "# on the real machine under local electrical codes and licensed practice.",
    ]
    for section, keys in LAYOUT:
        present = [k for k in keys if f"{section}.{k}" in vals]
        if not present:
            continue
        lines.append("")
        lines.append(f"[{section}]")
        for k in present:
            o = vals[f"{section}.{k}"]
            if isinstance(o.value, (list, tuple)):
                lines.append(f"# {k}: {o.comment()}")
                lines.append(f"{k} = {_fmt_value(o.value)}")
            else:
                lines.append(f"{k} = {_fmt_value(o.value)}  # {o.comment()}")
    return "\n".join(lines) + "\n"


def verify(built: Built, src: str = "built config") -> dict:
    """Load the written TOML as `dcrig check` would, pack it, and solve the no-load and the
    rated-load steady state at rated voltage (host.opoint). Raises ConfigError if not valid."""
    from ..opoint import solve_motor
    from ..params import pack

    cfg = resolve("machine", tomllib.loads(built.toml), src)
    plant = pack(cfg)
    d = plant.derived
    out = {"rated_emf_V": d["rated_emf_V"], "flux_constant_Vs": d["flux_constant_Vs"],
           "rated_torque_Nm": d["rated_torque_Nm"]}
    v = cfg.values
    if v["machine.duty"] == "motor" and v["machine.connection"] != "series":
        vr = v["machine.rated_voltage_V"]
        nl = solve_motor(plant, vr, load_torque_Nm=0.0)
        rl = solve_motor(plant, vr, armature_current_A=v["machine.rated_current_A"])
        out["no_load_speed_rpm"] = nl.state.w * 30 / math.pi if nl.state is not None else math.nan
        out["rated_load_speed_rpm"] = rl.state.w * 30 / math.pi if rl.state is not None else math.nan
    built.checks = out
    return out


def sidecar(built: Built, config_path: str) -> dict:
    return {
        "config": config_path,
        "values": {k: {"value": o.value, "origin": o.origin, "source": o.source, "quality": o.quality}
                   for k, o in built.values.items()},
        "fits": [{"kind": f.kind, "source": f.source, "values": f.values, "quality": f.quality,
                  "warnings": f.warnings} for f in built.fits],
        "warnings": built.warnings,
        "checks": built.checks,
    }


def write(built: Built, out_path: Path) -> Path:
    """Write the TOML and its sidecar NAME.identify.json next to it; returns the sidecar path."""
    out_path = Path(out_path)
    out_path.write_text(built.toml, encoding="utf-8")
    side = out_path.with_suffix(".identify.json")
    side.write_text(json.dumps(sidecar(built, out_path.name), indent=2, default=_json_default) + "\n", encoding="utf-8")
    return side


def _json_default(o):
    try:
        return float(o)
    except (TypeError, ValueError):
        return str(o)
