"""`dcrig check`: validate configs and print the derived quantities of the plant."""

from __future__ import annotations

import json
import math

from ..cli import SAFETY
from . import add_config_args, load_plant

EXAMPLE = """example:
  dcrig check configs/machines/kestrel_f3_stand.toml --converter configs/converters/kestrel_f3_bridge.toml
"""


def add_subparser(sub):
    import argparse

    p = sub.add_parser("check", help="validate configs and print derived quantities",
                       description="Validate a machine (and converter) config and print rated EMF, flux constant, "
                       "time constants, no-load speed, critical field resistance, step limits and warnings.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_config_args(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_do_check)


def _fmt(v):
    if isinstance(v, float) and math.isinf(v):
        return "unbounded"
    return f"{v:.6g}" if isinstance(v, float) else str(v)


def warnings_for(plant) -> list[str]:
    d = plant.derived
    v = plant.machine.values
    out = list(plant.machine.warnings) + (list(plant.converter.warnings) if plant.converter else [])
    dt_us = v["sim.dt_us"]
    if dt_us > d["accurate_step_us"]:
        out.append(f"sim.dt_us {dt_us:g} us is above the accurate step {d['accurate_step_us']:.1f} us")
    conn = v["machine.connection"]
    if conn == "series":
        out.append("series machine: never run unloaded or uncoupled - the speed rises without bound")
    if conn in ("separate", "shunt"):
        e = d.get("emf_curve_at_rated_field_V")
        if e and abs(e - d["rated_emf_V"]) > 0.05 * d["rated_emf_V"]:
            out.append(f"curve EMF at rated field and speed ({e:.0f} V) differs from the rated EMF ({d['rated_emf_V']:.0f} V) by more than 5 %")
    if plant.converter is not None:
        vr = v["machine.rated_voltage_V"]
        vdo = d["vdo_V"]
        if vr > 0.95 * vdo:
            out.append(f"rated armature voltage {vr:g} V needs more than 95 % of the bridge's Vdo {vdo:.0f} V: no control margin")
        if not math.isfinite(d.get("rated_alpha_deg", 0.0)):
            out.append("the bridge cannot reach rated voltage at rated current")
    return out


def _do_check(args):
    plant = load_plant(args)
    d = dict(plant.derived)
    warns = warnings_for(plant)
    if args.json:
        flat = {k: v for k, v in d.items() if k != "time_constants_s"}
        flat.update({f"tau_{k}": v for k, v in d["time_constants_s"].items()})
        flat = {k: (None if isinstance(v, float) and not math.isfinite(v) else float(v)) for k, v in flat.items()}
        flat["warnings"] = warns
        print(json.dumps(flat, sort_keys=True))
        return 0
    v = plant.machine.values
    print(f"{plant.machine.source}: {v['machine.name']} ({v['machine.connection']}, {v['machine.duty']}) - valid")
    if plant.converter is not None:
        print(f"{plant.converter.source}: {plant.converter['converter.name']} ({plant.converter['converter.kind']}) - valid")
    rows = [
        ("rated EMF", d["rated_emf_V"], "V"),
        ("flux constant K*phi at rated", d["flux_constant_Vs"], "V s/rad"),
        ("rated torque", d["rated_torque_Nm"], "N m"),
        ("armature resistance, hot", d["ra_hot_ohm"], "ohm"),
    ]
    for k, val in d["time_constants_s"].items():
        rows.append((f"time constant, {k[:-2].replace('_', ' ')}", val * 1e3, "ms"))
    if "no_load_speed_rpm" in d:
        rows.append(("no-load speed at rated voltage", d["no_load_speed_rpm"], "r/min"))
    if "critical_field_ohm_at_rated_speed" in d:
        rows.append(("critical field resistance at rated speed (tangent from the origin)", d["critical_field_ohm_at_rated_speed"], "ohm"))
        rows.append(("field circuit resistance, hot", d["field_circuit_ohm"], "ohm"))
    rows.append(("fastest time constant", d["tau_min_s"] * 1e6, "us"))
    rows.append(("largest stable step (2 tau_min, Heun)", d["stable_step_us"], "us"))
    rows.append(("largest accurate step (tau_min/20)", d["accurate_step_us"], "us"))
    rows.append(("model step", v["sim.dt_us"], "us"))
    if plant.converter is not None:
        rows.append(("bridge Vdo = 1.35 V_LL", d["vdo_V"], "V"))
        rows.append(("firing angle at rated duty", d["rated_alpha_deg"], "deg"))
        rows.append(("frame period", d["frame_period_us"], "us"))
    width = max(len(r[0]) for r in rows)
    for name, val, unit in rows:
        print(f"  {name:<{width}}  {_fmt(float(val)):>12} {unit}")
    for w in warns:
        print(f"warning: {w}")
    return 0
