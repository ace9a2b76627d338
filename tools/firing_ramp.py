"""Firing-angle ramps through every demo motor's bridge: discontinuous, continuous, inversion.

For each demo motor this runs `dcrig sim`'s engine (host.sim.run_offline) with a firing-angle
ramp on its switched bridge: from the inversion end down through discontinuous conduction
into continuous conduction (the motor accelerates), then back past 90 deg. Inversion needs a
negative EMF behind a positive bridge current, which each machine gets the way the trade gets
it: the separately excited stand by reversing its field (field-reversal braking), the hoist by
its overhauling load driving it down, the shunt-type machines by an overhauling test load.
Prints one table row per motor and writes one plot per motor.

    python tools/firing_ramp.py [--out DIR]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from host.config import load  # noqa: E402
from host.params import pack  # noqa: E402
from host.shipped import shipped_config  # noqa: E402
from host.sim import parse_change, parse_ramp, plot, run_offline  # noqa: E402
from rtmodel import layout as L  # noqa: E402

CASES = [
    # machine, converter, machine overrides, converter overrides, steps, ramps, t_end
    ("kestrel_f3_stand", "kestrel_f3_bridge", [], ["field.kind=dc_source"],
     ["firing_angle_deg@0=150", "field_voltage_V@0=216", "field_voltage_V@2.2=-216"],
     ["firing_angle_deg@0.1:1.6=150:30", "firing_angle_deg@2.2:2.6=30:125"], 4.0),
    ("kestrel_coil_hoist", "kestrel_hoist_bridge", [], [],
     ["firing_angle_deg@0=150", "load_torque_Nm@0=350"],
     ["firing_angle_deg@0.1:1.2=150:35", "firing_angle_deg@2.0:2.6=35:115"], 4.5),
    ("kestrel_pinch_roll", "kestrel_pinch_bridge", ["mechanics.load=overhauling"], [],
     ["firing_angle_deg@0=150", "load_torque_Nm@0=150"],
     ["firing_angle_deg@0.1:1.5=150:30", "firing_angle_deg@2.5:3.0=30:100"], 4.5),
    ("kestrel_shunt_fan", "kestrel_pinch_bridge", ["mechanics.load=overhauling"], [],
     ["firing_angle_deg@0=150", "load_torque_Nm@0=80"],
     ["firing_angle_deg@0.1:1.5=150:30", "firing_angle_deg@2.5:3.0=30:100"], 4.5),
    ("kestrel_test_stand", "kestrel_pinch_bridge", ["mechanics.load=overhauling"], [],
     ["firing_angle_deg@0=150", "load_torque_Nm@0=60"],
     ["firing_angle_deg@0.1:1.5=150:30", "firing_angle_deg@2.5:3.0=30:100"], 4.5),
]


def run_case(case, out: Path) -> dict:
    machine, conv, m_over, c_over, steps, ramps, t_end = case
    m = load("machine", shipped_config(f"machines/{machine}.toml"), m_over)
    c = load("converter", shipped_config(f"converters/{conv}.toml"), c_over)
    plant = pack(m, c)
    segs = [parse_change(s) for s in steps] + [parse_ramp(r) for r in ramps]
    t, Y = run_offline(plant, t_end, plant.dt_s * 5, segs)
    st = Y[:, L.Y_STATUS].astype(int)
    dcm = (st & L.ST_DISCONTINUOUS) != 0
    alpha = Y[:, L.Y_LAST_FIRE_ANGLE_DEG]
    p_in = Y[:, L.Y_INPUT_POWER_W]
    inverting = (alpha > 90.0) & (p_in < 0.0) & (np.abs(Y[:, L.Y_IA_A]) > 0)
    ccm = (~dcm) & (np.abs(Y[:, L.Y_IA_A]) > 0)
    png = out / f"ramp_{machine}.png"
    plot(png, Y, f"{m['machine.name']}: firing-angle ramp on {c['converter.name']}")
    flags = 0
    for s in st:
        flags |= s
    return {
        "machine": machine,
        "dcm_s": float(dcm.sum() * plant.dt_s * 5),
        "ccm_s": float(ccm.sum() * plant.dt_s * 5),
        "inversion_s": float(inverting.sum() * plant.dt_s * 5),
        "min_power_kW": float(p_in.min() / 1e3),
        "peak_ia_A": float(np.abs(Y[:, L.Y_IA_A]).max()),
        "flags": [n for b, n in L.ST_NAMES.items() if flags & b],
        "plot": png,
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", default="firing-ramps", help="folder for the plots")
    args = ap.parse_args(argv)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    print("| machine | discontinuous (s) | continuous (s) | inverting (s) | most negative input power (kW) | peak Ia (A) | flags |")
    print("| --- | --- | --- | --- | --- | --- | --- |")
    for case in CASES:
        r = run_case(case, out)
        print(f"| {r['machine']} | {r['dcm_s']:.2f} | {r['ccm_s']:.2f} | {r['inversion_s']:.2f} | "
              f"{r['min_power_kW']:.1f} | {r['peak_ia_A']:.0f} | {', '.join(r['flags']) or '-'} |")
    print(f"\nplots in {out}/")
    return 0


if __name__ == "__main__":
    sys.exit(main())
