"""Write the demo test records of configs/records/ (invented data of the Kestrel Bay plant).

The records are what a commissioning engineer would bring back from the test bay for the F3
stand motor and the exit pinch roll motor, made here by running dcrig's own model on their
demo configs with seeded measurement noise (host.identify.simulate). They are invented: no
real machine was measured. Rerun after a model change:

    PYTHONPATH=. python tools/make_kestrel_records.py [--out configs/records] [--seed 11]

and commit the changed CSV files; `dcrig identify build` on them must still give the config's
speeds within 1 % (tests/test_identify_roundtrip.py and tests/test_identify_cli.py).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from host.config import load  # noqa: E402
from host.identify import simulate as S  # noqa: E402
from host.params import pack  # noqa: E402


def machine_path(name: str) -> Path:
    """The demo machine configs, as shipped with the package."""
    from host.shipped import shipped_config

    return shipped_config(f"machines/{name}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(ROOT / "configs" / "records"))
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--noise-pct", type=float, default=0.2, help="relative measurement noise (default 0.2 %)")
    args = ap.parse_args(argv)
    out = Path(args.out)
    f3 = machine_path("kestrel_f3_stand.toml")
    recs = S.separate_machine_records(f3, out, seed=args.seed, noise_pct=args.noise_pct,
                                      converter_path=ROOT / "configs" / "converters" / "kestrel_current_source.toml")
    # the pinch roll (compound, long shunt): open-circuit curve and load points for the turns ratio
    pinch = machine_path("kestrel_pinch_roll.toml")
    v = load("machine", pinch).values
    rng = np.random.default_rng(args.seed + 1)
    xs = v["machine.magnetization.field_current_A"]
    name = "kestrel_pinch_roll"
    note = ("invented demo data: made by running dcrig's model with seeded noise",)
    S.write_record(out / f"{name}_open_circuit.csv", "open-circuit",
                   S.open_circuit(pinch, [0.0] + list(np.linspace(xs[-1] / 12, xs[-1], 12)), [v["machine.rated_speed_rpm"]], rng, args.noise_pct),
                   notes=note + ("shunt field fed separately at rated speed",))
    t_rated = pack(load("machine", pinch)).derived["rated_torque_Nm"]
    temp = v["machine.thermal.ambient_C"]
    rse_hot = v["machine.series_resistance_ohm"] * (235 + v["machine.field_temp_C"]) / (235 + v["machine.resistance_ref_C"])
    S.write_record(out / f"{name}_load_test.csv", "load-test",
                   S.load_test(pinch, [f * t_rated for f in (0.25, 0.5, 0.75, 1.0)], temp, rng, args.noise_pct),
                   {"armature_circuit_ohm": S.ra_at(v, temp), "series_ohm": rse_hot, "brush_drop_V": 2.0, "short_shunt": 0},
                   notes=note + ("steady load points at rated voltage; resistances from the resistance records, hot",))
    S.write_record(out / f"{name}_nameplate.csv", "nameplate", {k: [x] for k, x in S._nameplate_row(v).items()}, notes=note)
    n = sum(len(p) for p in recs.values()) + 3
    print(f"{n} records written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
