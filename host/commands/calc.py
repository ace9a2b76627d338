"""`dcrig calc`: the everyday hand checks of the trade, one command each.

Thin: the formulas live in host.identify.formulas (each with its source).
"""

from __future__ import annotations

import argparse
import json
import math

from ..errors import ConfigError

from ..cli import SAFETY

CAUTION = SAFETY + "\n" + (
    "A hand check is no substitute for the measurement it stands for. Resistance and temperature\n"
    "readings are taken on de-energised, locked-out windings under local electrical codes and licensed practice;\n"
    "a field winding broken under current raises a dangerous voltage."
)

CHECKS = {
    "winding-temp": ("winding temperature and rise from a cold and a hot resistance (IEC 60034-1 resistance method, 235 for copper)",
                     "dcrig calc winding-temp --cold-ohm 0.0175 --cold-temp 20 --hot-ohm 0.0228 --coolant 40"),
    "resistance-at": ("a copper winding's resistance at another temperature (IEC 60034-1, 235 for copper)",
                      "dcrig calc resistance-at --ohm 9.9 --from-temp 20 --to-temp 75"),
    "retardation": ("inertia from a run-down: J = P / (w dw/dt) (IEEE Std 113 retardation method)",
                    "dcrig calc retardation --loss-W 18700 --speed-rpm 500 --decel-rpm-per-s 28.5"),
    "emf": ("EMF and flux constant from terminal values: E = Vt - Ia R - Vb (motor), K phi = E / w",
            "dcrig calc emf --vt 440 --ia 1040 --r-ohm 0.0214 --speed-rpm 500"),
    "supply-code": ("the ac supply NEMA MG 1 power-supply code C pairs with a rated dc voltage, and the bridge margin",
                    "dcrig calc supply-code --dc-V 500"),
}


def add_subparser(sub):
    p = sub.add_parser("calc", help="hand checks of the trade (winding temperature, resistance at temperature, "
                       "run-down inertia, EMF, supply code)",
                       description="The everyday hand checks of the trade, one command each.",
                       epilog="examples:\n" + "\n".join(f"  {ex}" for _, ex in CHECKS.values()) + "\n\n" + CAUTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    s = p.add_subparsers(dest="calc_what", metavar="CHECK")
    for name, (help_, example) in CHECKS.items():
        q = s.add_parser(name, help=help_, description=help_ + ".", epilog=f"example:\n  {example}\n\n{CAUTION}",
                         formatter_class=argparse.RawDescriptionHelpFormatter)
        q.add_argument("--json", action="store_true", help="print one JSON object")
        if name == "winding-temp":
            q.add_argument("--cold-ohm", type=float, required=True, help="cold resistance R1, ohm")
            q.add_argument("--cold-temp", type=float, required=True, help="winding temperature at R1 (degC)")
            q.add_argument("--hot-ohm", type=float, required=True, help="hot resistance R2 (at switch-off), ohm")
            q.add_argument("--coolant", type=float, help="coolant temperature at the end of the run (degC) for the rise")
        elif name == "resistance-at":
            q.add_argument("--ohm", type=float, required=True, help="resistance read, ohm")
            q.add_argument("--from-temp", type=float, required=True, help="temperature of that reading (degC)")
            q.add_argument("--to-temp", type=float, required=True, help="temperature wanted (degC)")
        elif name == "retardation":
            q.add_argument("--loss-W", type=float, required=True, help="losses at the speed, W")
            q.add_argument("--speed-rpm", type=float, required=True, help="speed, r/min")
            q.add_argument("--decel-rpm-per-s", type=float, required=True, help="deceleration there, r/min per s (positive)")
        elif name == "emf":
            q.add_argument("--vt", type=float, required=True, help="terminal voltage, V")
            q.add_argument("--ia", type=float, required=True, help="armature current, A")
            q.add_argument("--r-ohm", type=float, required=True, help="armature circuit resistance (hot), ohm")
            q.add_argument("--brush-drop", type=float, default=2.0, help="total brush drop, V (default 2, common practice)")
            q.add_argument("--speed-rpm", type=float, help="speed, r/min (for K phi)")
            q.add_argument("--generator", action="store_true", help="generator: E = Vt + Ia R + Vb")
        elif name == "supply-code":
            q.add_argument("--dc-V", type=float, required=True, help="rated armature voltage, V dc")
        q.set_defaults(calc_name=name)
    p.set_defaults(func=_do_calc, calc_parser=p)


def _num(args, name, positive=False, nonneg=False):
    v = getattr(args, name)
    flag = "--" + name.replace("_", "-")
    if v is None:
        return None
    if not math.isfinite(v):
        raise ConfigError(f"{flag}: must be a finite number, got {v!r}")
    if positive and v <= 0:
        raise ConfigError(f"{flag}: must be > 0, got {v!r}")
    if nonneg and v < 0:
        raise ConfigError(f"{flag}: must be >= 0, got {v!r}")
    return v


def _temp(args, name):
    v = _num(args, name)
    if v is not None and v <= -235.0:
        raise ConfigError(f"--{name.replace('_', '-')}: must be above -235 degC (the copper constant), got {v!r}")
    return v


def _do_calc(args):
    from ..identify import formulas as fm
    from ..identify.nameplate import supply_pairing

    what = getattr(args, "calc_what", None)
    if what is None:
        args.calc_parser.print_help()
        return 2
    out: dict = {}
    if what == "winding-temp":
        r1, r2 = _num(args, "cold_ohm", positive=True), _num(args, "hot_ohm", positive=True)
        t1 = _temp(args, "cold_temp")
        out["winding_temp_C"] = fm.winding_temp_C(r1, t1, r2)
        if args.coolant is not None:
            out["rise_K"] = fm.temperature_rise_K(r1, t1, r2, _temp(args, "coolant"))
        if r2 < r1:
            out["warning"] = "the hot resistance is below the cold one: inconsistent readings"
    elif what == "resistance-at":
        out["resistance_ohm"] = fm.resistance_at(_num(args, "ohm", positive=True), _temp(args, "from_temp"), _temp(args, "to_temp"))
    elif what == "retardation":
        out["inertia_kgm2"] = fm.retardation_inertia_kgm2(_num(args, "loss_W", positive=True), _num(args, "speed_rpm", positive=True),
                                                          _num(args, "decel_rpm_per_s", positive=True))
    elif what == "emf":
        e = fm.armature_emf_V(_num(args, "vt"), _num(args, "ia", nonneg=True), _num(args, "r_ohm", nonneg=True),
                              _num(args, "brush_drop", nonneg=True), motor=not args.generator)
        out["emf_V"] = e
        n = _num(args, "speed_rpm", positive=True)
        if n is not None:
            out["flux_constant_Vs"] = e / (n * fm.RPM)
            out["torque_at_ia_Nm"] = out["flux_constant_Vs"] * args.ia
    elif what == "supply-code":
        dc = _num(args, "dc_V", positive=True)
        out["ac_V"] = fm.nema_code_c_ac_V(dc)
        out["note"] = supply_pairing(dc)
    if args.json:
        print(json.dumps(out, sort_keys=True))
    else:
        for k, v in out.items():
            if k in ("warning",):
                print(f"warning: {v}")
            elif isinstance(v, float):
                print(f"{k} = {v:.6g}")
            else:
                print(f"{k}: {v}" if v is not None else f"{k}: none quoted")
    return 0
