"""Measures the cost of one DriveController.step and prints a table (no assertions).

A measuring aid only; must never import serial, numba, rtmodel or host.link.

    python tools/bench_controller.py [SETTINGS.toml ...] [--frames N]
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from host.controller.drive import DriveController  # noqa: E402
from host.controller.settings import load_settings
from host.errors import DcrigError
from host.shipped import shipped_dir
from host.signals import Feedback

DT = 1.0 / 300.0


def measure(path, frames: int, clock=time.perf_counter_ns) -> dict:
    s = load_settings(path)
    c = DriveController(s)
    kphi = (s["motor.rated_voltage_V"] - s["motor.ra_ohm"] * s["motor.rated_current_A"]) / s["motor.base_speed_rpm"]
    fb = Feedback(field_current_A=s["field.rated_current_A"], mains_voltage_V=s["drive.mains_voltage_V"],
                  op_run=1, op_speed_ref_rpm=0.5 * s["motor.base_speed_rpm"])
    samples = []
    for k in range(frames):
        # a running drive: speed creeping up, current and voltage consistent with it
        n = min(k * 0.5, 0.5 * s["motor.base_speed_rpm"])
        fb.tacho_voltage_V = n * s["tacho.volts_per_rpm"]
        fb.armature_voltage_V = kphi * n + 10.0
        fb.armature_current_A = 0.3 * s["motor.rated_current_A"] * (1.0 + 0.1 * math.sin(k * 0.1))
        fb.mains_angle_deg = (fb.mains_angle_deg + 60.0) % 360.0
        t0 = clock()
        cmd = c.step(fb, DT)
        samples.append(clock() - t0)
        fb.contactor_closed = cmd.contactor
    run = samples[frames // 10:]  # skip the start-up frames
    run.sort()
    return {"settings": Path(path).name, "frames": len(run), "state": c.signals.state,
            "median_us": statistics.median(run) / 1e3, "p99_us": run[int(0.99 * len(run))] / 1e3,
            "max_us": run[-1] / 1e3}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m host.controller.timing")
    ap.add_argument("settings", nargs="*", default=sorted(shipped_dir("controllers").glob("*.toml")))
    ap.add_argument("--frames", type=int, default=30000)
    args = ap.parse_args(argv)
    try:
        rows = [measure(p, args.frames) for p in args.settings]
    except DcrigError as err:
        print(f"error: {err}", file=sys.stderr)
        return 2
    print(f"{'settings':34} {'frames':>7} {'state':>9} {'median us':>10} {'p99 us':>8} {'max us':>8}")
    for r in rows:
        print(f"{r['settings']:34} {r['frames']:7d} {r['state']:>9} {r['median_us']:10.1f} "
              f"{r['p99_us']:8.1f} {r['max_us']:8.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
