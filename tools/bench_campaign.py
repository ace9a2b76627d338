"""Campaign speed: runs per minute on Dask with 1 worker and with every local core, against the
same runs in a plain loop in this process, side by side in one run; plus the scheduler's own
cost per task, from which the scaling beyond one machine is estimated.

    PYTHONPATH=. python tools/bench_campaign.py            # the CI demo campaign, 2 passes
    PYTHONPATH=. python tools/bench_campaign.py --quick    # fewer runs (smoke test)

Prints markdown tables; asserts nothing (project rule: no timed assertions in tests). Run
records are off in every row (records = "none") so that every row does the same work.
"""

from __future__ import annotations

import argparse
import logging
import os
import platform
import shutil
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_model import cpu_model as cpu_name, load_avg  # noqa: E402  (shared report helpers, as bench_link)


def _noop(i):
    return i


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--campaign", default=str(ROOT / "configs" / "campaigns" / "kestrel_f3_tolerance.toml"))
    ap.add_argument("--runs", type=int, default=48, help="use N runs spread over the campaign (default 48)")
    ap.add_argument("--quick", action="store_true", help="4 runs, 200 no-op tasks")
    args = ap.parse_args(argv)

    from distributed import Client, LocalCluster

    from host.campaign.engine import execute_run, run_campaign, warm_kernel_arrays
    from host.campaign.spec import load_campaign
    from host.campaign.transient import load_plant

    camp = load_campaign(args.campaign)
    camp.records = "none"
    runs = camp.runs()
    n = min(len(runs), 4 if args.quick else args.runs)
    runs = [runs[round(i * len(runs) / n)] for i in range(n)]  # every scenario and controller
    cores = os.cpu_count() or 1
    n_noop = 200 if args.quick else 2000

    la_before = load_avg()
    # warm the kernel and the scenario/controller imports here, so the plain loop pays no compile
    if runs[0].machine is not None:
        plant = load_plant(runs[0].machine, runs[0].converter, runs[0].overrides())
        warm_kernel_arrays(plant.p, plant.new_state(), plant.new_inputs())
    else:
        from host.campaign.scenario_kind import warmup_arrays

        warm_kernel_arrays(*warmup_arrays(runs[0]))
    execute_run(runs[0], None, "none")

    rows = []
    t0 = time.perf_counter()
    for spec in runs:
        execute_run(spec, None, "none")
    plain_s = time.perf_counter() - t0
    per_run_s = plain_s / n
    rows.append(("plain loop, this process", 1, "-", plain_s, n / plain_s * 60, "-", f"{per_run_s * 1e3:.0f}", "-"))

    noop = {}
    for workers in sorted({1, cores}):
        t_start = time.perf_counter()
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0",
                               silence_logs=logging.CRITICAL)
        client = Client(cluster)
        startup_s = time.perf_counter() - t_start
        out = Path(tempfile.mkdtemp(prefix="dcrig-bench-"))
        try:
            t0 = time.perf_counter()
            o = run_campaign(camp, out / "c", client=client, progress=False, runs=runs)
            wall = time.perf_counter() - t0
            assert o.errors == 0, [r.get("error") for r in o.rows if r["status"] == "error"][:3]
            # engine overhead per run: the wall time beyond the plain loop's work divided over
            # the workers, per run (negative would mean the workers ran faster than this process)
            overhead_ms = (wall - plain_s / workers) / n * workers * 1e3
            inside_ms = sum(r["wall_s"] for r in o.rows) / n * 1e3
            outside_ms = wall * workers / n * 1e3 - inside_ms
            rows.append((f"Dask LocalCluster, {workers} worker{'s' if workers > 1 else ''}", workers,
                         f"{startup_s:.1f}", wall, n / wall * 60, f"{overhead_ms:+.1f}",
                         f"{inside_ms:.0f}", f"{outside_ms:+.0f}"))
            # the scheduler's own cost per task: no-op tasks, submitted and gathered
            t0 = time.perf_counter()
            futs = client.map(_noop, range(n_noop), pure=False)
            client.gather(futs)
            noop[workers] = (time.perf_counter() - t0) / n_noop
        finally:
            client.close()
            cluster.close()
            shutil.rmtree(out, ignore_errors=True)
    la_after = load_avg()

    print(f"dcrig campaign speed - {cpu_name()}, {cores} logical CPUs; Python {platform.python_version()}; "
          f"load average before {la_before}, after {la_after}")
    print(f"campaign {camp.name}: {n} runs ({camp.kind}); records off; single runs (the machine may be shared)\n")
    print("| execution | workers | cluster start s | wall s | runs/min | worker-time per run beyond the plain loop, ms "
          "| time inside a run, ms | worker-time per run outside runs, ms |")
    print("|---|---|---|---|---|---|---|---|")
    for name, w, st, wall, rpm, ov, inside, outside in rows:
        print(f"| {name} | {w} | {st} | {wall:.2f} | {rpm:.1f} | {ov} | {inside} | {outside} |")
    print()
    print("| quantity | value |")
    print("|---|---|")
    print(f"| cost of one run, plain loop | {per_run_s * 1e3:.0f} ms |")
    for w, t in noop.items():
        print(f"| scheduler cost per no-op task ({n_noop} submitted at once, gathered), {w} worker(s) | {t * 1e3:.2f} ms |")
    t_task = min(noop.values())
    print(f"| runs per second one scheduler can hand out (1 / no-op cost) | {1 / t_task:.0f} |")
    print(f"| workers one scheduler keeps busy at this run cost (run cost / no-op cost) | {per_run_s / t_task:.0f} |")
    for machines in (1, 4, 16, 64):
        k = machines * cores
        rate = min(k / per_run_s, 1 / t_task)
        print(f"| estimate: {machines} machine(s) x {cores} cores | {rate * 60:.0f} runs/min "
              f"({'scheduler-bound' if k / per_run_s > 1 / t_task else 'worker-bound'}) |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
