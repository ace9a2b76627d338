"""Benchmark of the demo suite: wall time per scenario, scenarios per minute with 1 and with all
cores, the lockstep real-time factor, and the verdict engine's cost per recorded frame.

    python tools/bench_suite.py [SUITE.toml] [--repeat N]

Prints tables (figures for the README). Runs without plots (the report's plots are a separate
cost, printed once at the end) and writes records to a temporary folder. Both pool sizes run in
this one invocation, so their ratio is fair on a shared machine.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

TARGET_FAST_PATH_X = 200.0  # issue 12: a demo scenario in process, x real time
FAST_PATH_SCENARIO = "f3_start_stop"  # the demo suite's start-stop cycle: run, ramp, load profile, quick stop


def fast_path_breakdown(scenario_path: str, repeats: int = 5) -> dict:
    """The in-process lockstep run of one scenario, best of `repeats`, and where a frame's
    time goes: the kernel call and the emulated controller's step, timed by wrapping them in
    the same runs (one clock pair each per frame), the rest being loop, feedback and record."""
    import time

    from host.controller.drive import DriveController
    from host.params import Plant
    from host.scenario import load_scenario
    from host.scenario.run import run_scenario

    scn = load_scenario(scenario_path)
    run_scenario(scn)  # warm
    clock = time.perf_counter_ns
    spent = {"kernel": 0, "controller": 0}
    plant_kernel = Plant.kernel
    ctrl_step = DriveController.step

    def kernel(self):
        f = plant_kernel(self)

        def timed(x, p, u, y, n_sub):
            t = clock()
            st = f(x, p, u, y, n_sub)
            spent["kernel"] += clock() - t
            return st

        return timed

    def step(self, fb, dt_s):
        t = clock()
        cmd = ctrl_step(self, fb, dt_s)
        spent["controller"] += clock() - t
        return cmd

    best = None
    try:
        for timed_parts in (False,) * repeats + (True,) * repeats:
            if timed_parts:
                Plant.kernel, DriveController.step = kernel, step
            spent["kernel"] = spent["controller"] = 0
            t0 = clock()
            rec = run_scenario(scn)
            wall = clock() - t0
            frames = len(rec.frames)
            key = "timed" if timed_parts else "plain"
            r = {"wall_s": wall * 1e-9, "model_s": rec.stats["model_s"], "frames": frames,
                 "kernel_us": spent["kernel"] * 1e-3 / frames, "controller_us": spent["controller"] * 1e-3 / frames,
                 "frame_us": wall * 1e-3 / frames}
            if best is None:
                best = {}
            if key not in best or r["wall_s"] < best[key]["wall_s"]:
                best[key] = r
    finally:
        Plant.kernel, DriveController.step = plant_kernel, ctrl_step
    return best


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("suite", nargs="?", default=str(ROOT / "configs" / "suites" / "kestrel_demo.toml"))
    ap.add_argument("--repeat", type=int, default=1, help="verdict timing repeats per scenario")
    args = ap.parse_args(argv)

    import numpy as np

    from host.scenario.run import run_scenario
    from host.suite import load_suite
    from host.suite.run import run_suite
    from host.verdict import judge

    suite = load_suite(args.suite)
    cores = os.cpu_count() or 1
    with tempfile.TemporaryDirectory() as tmp:
        run_suite(suite, None, jobs=1, progress=False, plots=False)  # warm: kernel cache, imports
        results = {}
        for jobs in sorted({1, cores}):
            t0 = time.perf_counter()
            rows = run_suite(suite, str(Path(tmp) / f"j{jobs}"), jobs=jobs, progress=False, plots=False)
            results[jobs] = (time.perf_counter() - t0, rows)
        # in-memory runs for the pure loop speed and the verdict's cost per frame
        per = []
        for r in suite.runs:
            scn = r.scenario
            t0 = time.perf_counter()
            rec = run_scenario(scn)
            run_s = time.perf_counter() - t0
            t1 = time.perf_counter()
            for _ in range(args.repeat):
                judge(rec.frames, rec.columns, rec.events, rec.meta, scn.expects)
            j_s = (time.perf_counter() - t1) / args.repeat
            per.append((scn.name, scn.controller_kind, rec.stats["model_s"], run_s, len(rec.frames), j_s))
        t0 = time.perf_counter()
        from host.suite.run import run_one

        run_one(str(suite.runs[1].scenario.path), str(Path(tmp) / "plots"), plots=True)
        plot_s = time.perf_counter() - t0

    print(f"suite {suite.name}: {len(suite.runs)} scenarios, {cores} cores\n")
    print("| workers | wall s | scenarios per minute | ratio to 1 worker |")
    print("|---|---|---|---|")
    w1 = results[1][0]
    for jobs, (wall, rows) in results.items():
        print(f"| {jobs} | {wall:.1f} | {60 * len(rows) / wall:.1f} | {w1 / wall:.2f} |")
    print("\nper scenario (in-memory record, lockstep, one process):\n")
    print("| scenario | controller | model s | wall s | x real time | frames | verdict us/frame |")
    print("|---|---|---|---|---|---|---|")
    for name, kind, model_s, wall_s, frames, j_s in per:
        print(f"| {name} | {kind} | {model_s:.2f} | {wall_s:.2f} | {model_s / wall_s:.1f} | {frames} | "
              f"{1e6 * j_s / max(frames, 1):.2f} |")
    tot_model = sum(p[2] for p in per)
    tot_wall = sum(p[3] for p in per)
    jf = [1e6 * p[5] / max(p[4], 1) for p in per]
    fp = fast_path_breakdown(str(ROOT / "configs" / "scenarios" / f"{FAST_PATH_SCENARIO}.toml"))
    plain, timed = fp["plain"], fp["timed"]
    x_rt = plain["model_s"] / plain["wall_s"]
    budget_us = 1e6 * plain["model_s"] / plain["frames"] / TARGET_FAST_PATH_X
    rest = timed["frame_us"] - timed["kernel_us"] - timed["controller_us"]
    print(f"\nin-process fast path, {FAST_PATH_SCENARIO} (the demo suite's start-stop cycle), best of 5: {plain['frame_us']:.1f} us per "
          f"frame, {x_rt:.0f} x real time; with the parts timed (best of 5): kernel {timed['kernel_us']:.1f} us + "
          f"emulated controller {timed['controller_us']:.1f} us + loop, feedback and record {rest:.1f} us = "
          f"{timed['frame_us']:.1f} us")
    print(f"target (issue 12) the start-stop cycle in process >= {TARGET_FAST_PATH_X:.0f} x real time: measured {x_rt:.0f} x -> "
          + ("MET" if x_rt >= TARGET_FAST_PATH_X else
             f"NOT MET: {TARGET_FAST_PATH_X:.0f} x leaves {budget_us:.1f} us per frame, and the kernel alone takes "
             f"{timed['kernel_us']:.1f} us of it"))
    print(f"\ntotal {tot_model:.1f} s model time in {tot_wall:.1f} s wall = {tot_model / tot_wall:.1f} x real time; "
          f"verdict median {np.median(jf):.2f} us per frame; one scenario's run + plots + record: {plot_s:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
