"""`dcrig steady`: the steady-state operating point of a machine (and the firing angle its bridge needs).

Owns argument checking and the printed table; the solving is host.opoint. `dcrig op`, the
old name, still reaches this command for one release (host.cli.HIDDEN_ALIASES). Never imports the
step kernel itself (host.opoint runs it lazily, only for a switched-bridge continuity check).
"""

from __future__ import annotations

import argparse
import json
import math

from ..errors import ConfigError
from . import add_config_args

EXAMPLE = """examples:
  dcrig steady configs/machines/kestrel_f3_stand.toml --vt 440 --load-torque 8000
  dcrig steady configs/machines/kestrel_f3_stand.toml --converter configs/converters/kestrel_f3_bridge.toml \\
      --vt 400 --speed 450 --json
  dcrig steady configs/machines/kestrel_exciter.toml --speed 1450 --load-ohm 2.4
  dcrig steady configs/machines/kestrel_exciter.toml --speed 1450            (open-circuit build-up)

motor:     --vt plus exactly one of --load-torque, --line-current, --armature-current, --speed
generator: --speed plus --load-ohm, --load-current, or neither (open circuit)
field:     --field-voltage (separately excited only), else the config's field rheostat
exit status: 0 found, 1 no operating point exists (the reason is printed), 2 bad input
"""


def add_subparser(sub):
    _configure(sub.add_parser(
        "steady",
        help="steady-state operating point (motor or generator, self-excited build-up, firing angle)",
        **_parser_text(),
    ))


def _parser_text() -> dict:
    from ..cli import SAFETY
    from ..opoint import REPORT_CONVENTIONS

    return dict(
        description="Solve the DC steady state of the model's machine equations: speed, currents, EMF, torque, "
        "power balance and losses. With --converter also the firing angle (overlap drop included) and whether "
        "the bridge current is continuous.",
        epilog=EXAMPLE + "\n" + REPORT_CONVENTIONS + "\n" + SAFETY,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )


def _configure(p):
    add_config_args(p)
    p.add_argument("--vt", type=float, metavar="V", help="terminal (armature supply) voltage: makes it a motor point")
    p.add_argument("--load-torque", type=float, metavar="NM", help="torque the load takes from the shaft, N m")
    p.add_argument("--line-current", type=float, metavar="A", help="line current into the + terminal, A")
    p.add_argument("--armature-current", type=float, metavar="A", help="armature current, A")
    p.add_argument("--speed", type=float, metavar="RPM", help="speed, r/min (motor: with --vt; generator: alone or with a load)")
    p.add_argument("--load-ohm", type=float, metavar="OHM", help="generator: load resistor across the terminals, ohm")
    p.add_argument("--load-current", type=float, metavar="A", help="generator: current delivered to the load, A")
    p.add_argument("--field-voltage", type=float, metavar="V", help="separately excited: field supply voltage, V")
    p.add_argument("--field-reversed", action="store_true", help="self-excited: field connected against the residual magnetism")
    p.add_argument("--arm-temp", type=float, metavar="C", help="armature temperature, degC (default: the config's initial/ambient)")
    p.add_argument("--no-kernel", action="store_true", help="with a switched bridge: use the ripple estimate for continuity instead of a short kernel run")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_do_steady)


def _check_combination(args):
    motor_only = [("--load-torque", args.load_torque), ("--line-current", args.line_current),
                  ("--armature-current", args.armature_current)]
    gen_only = [("--load-ohm", args.load_ohm), ("--load-current", args.load_current)]
    given_m = [n for n, v in motor_only if v is not None]
    given_g = [n for n, v in gen_only if v is not None]
    if args.vt is not None:
        if given_g:
            raise ConfigError(f"steady: {given_g[0]} is a generator option; with --vt give a motor quantity instead "
                              "(a negative --load-torque for regeneration)")
        n = len(given_m) + (args.speed is not None)
        if n != 1:
            raise ConfigError("steady: with --vt give exactly one of --load-torque, --line-current, --armature-current, "
                              f"--speed; got {n}")
        if args.field_reversed:
            raise ConfigError("steady: --field-reversed applies to a generator point (--speed without --vt)")
        return "motor"
    if given_m:
        raise ConfigError(f"steady: {given_m[0]} needs --vt (a motor point)")
    if args.speed is None:
        raise ConfigError("steady: give --vt and one motor quantity, or --speed for a generator point")
    if len(given_g) > 1:
        raise ConfigError("steady: give at most one of --load-ohm, --load-current")
    return "generator"


def solve_from_args(args):
    from .. import opoint
    from . import load_plant

    kind = _check_combination(args)
    for name in ("vt", "load_torque", "line_current", "armature_current", "speed", "load_ohm",
                 "load_current", "field_voltage", "arm_temp"):
        v = getattr(args, name)
        if v is not None and not math.isfinite(v):
            raise ConfigError(f"--{name.replace('_', '-')}: must be a finite number, got {v!r}")
    plant = load_plant(args)
    if kind == "motor":
        op = opoint.solve_motor(plant, args.vt, load_torque_Nm=args.load_torque, line_current_A=args.line_current,
                                armature_current_A=args.armature_current, speed_rpm=args.speed,
                                field_voltage_V=args.field_voltage, arm_temp_C=args.arm_temp)
        op = opoint.with_converter(op, use_kernel=not args.no_kernel)
    else:
        if plant.converter is not None:
            raise ConfigError("steady: --converter feeds the armature, so give --vt and a motor quantity "
                              "(a negative --load-torque for regeneration through a dual bridge)")
        op = opoint.solve_generator(plant, args.speed, load_ohm=args.load_ohm, load_current_A=args.load_current,
                                    field_voltage_V=args.field_voltage, arm_temp_C=args.arm_temp,
                                    field_reversed=args.field_reversed)
    return op


def _jsonable(v):
    if isinstance(v, dict):
        return {k: _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, (int, float)):
        v = float(v)
        return v if math.isfinite(v) else None
    return str(v)


def _do_steady(args):
    op = solve_from_args(args)
    rep = op.report()
    if args.json:
        print(json.dumps(_jsonable(rep), sort_keys=True))
        return 0 if op.found else 1
    _print_table(rep)
    return 0 if op.found else 1


def _fmt(v, nd=4):
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        if not math.isfinite(v):
            return "-"
        return f"{v:.{nd}g}" if abs(v) < 1e4 else f"{v:.0f}"
    return str(v)


def _print_table(rep):
    head = f"{rep['machine']} ({rep['connection']}): {rep['request']} point, given {rep['given'].replace('_', ' ')}"
    print(head)
    if not rep["operating_point_found"]:
        print(f"  NO OPERATING POINT: {rep['reason']}")
    if "speed_rpm" in rep:
        if not rep["operating_point_found"]:
            print(f"  {rep.get('state_shown', '')}:")
        rows = [
            ("speed", rep["speed_rpm"], "r/min"),
            ("terminal voltage", rep["terminal_voltage_V"], "V"),
            ("EMF", rep["emf_V"], "V"),
            ("armature current", rep["armature_current_A"], "A"),
            ("line current", rep["line_current_A"], "A"),
            ("shunt/separate field current", rep["field_current_A"], "A"),
            ("series field current", rep["series_field_current_A"], "A"),
            ("field voltage", rep["field_voltage_V"], "V"),
            ("flux constant K*phi", rep["flux_constant_Vs"], "V s/rad"),
            ("electromagnetic torque", rep["torque_Nm"], "N m"),
            ("shaft torque", rep["shaft_torque_Nm"], "N m"),
        ]
        if rep["operating_point_found"]:
            rows += [
                ("input power", rep["input_power_W"] / 1e3, "kW"),
                ("output power", rep["output_power_W"] / 1e3, "kW"),
                ("efficiency", None if rep["efficiency"] is None else rep["efficiency"] * 100.0, "%"),
            ]
            names = {"armature_copper_W": "armature copper", "field_copper_W": "field copper",
                     "field_rheostat_W": "field rheostat", "series_field_copper_W": "series field copper",
                     "brush_W": "brush contact", "friction_W": "friction", "total_W": "total losses"}
            for k, label in names.items():
                val = rep["losses_W"][k]
                if val != 0.0 or k == "total_W":
                    rows.append((f"  loss: {label}", val / 1e3, "kW"))
        conv = rep.get("converter")
        if conv:
            rows += [
                ("firing angle", conv.get("firing_angle_deg"), "deg"),
                ("overlap angle", conv.get("overlap_deg"), "deg"),
                ("critical current (continuity edge)", conv.get("critical_current_A"), "A"),
            ]
            if conv.get("field_firing_angle_deg") is not None:
                rows.append(("field bridge firing angle", conv["field_firing_angle_deg"], "deg"))
        width = max(len(r[0]) for r in rows)
        for name, val, unit in rows:
            if val is None and unit in ("A", "V") and "field" in name:
                continue
            print(f"  {name:<{width}}  {_fmt(val):>12} {unit}")
        if conv and conv.get("continuous") is not None:
            print(f"  conduction: {'continuous' if conv['continuous'] else 'DISCONTINUOUS'} ({conv.get('continuity_basis', '')})")
        print(f"  duty: {rep.get('duty', '-')}, sign convention: {rep['convention']} (see dcrig steady --help)")
    se = rep.get("self_excitation")
    if se and se.get("critical_field_ohm") is not None and se.get("field_circuit_ohm") is not None:
        print(f"  field circuit {se['field_circuit_ohm']:.4g} ohm, critical {se['critical_field_ohm']:.4g} ohm at this speed "
              "(tangent from the origin)")
    for n in rep["notes"]:
        print(f"  note: {n}")
    for ctn in rep["cautions"]:
        print(f"CAUTION: {ctn}")
