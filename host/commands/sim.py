"""`dcrig sim`: offline transient of a machine (and converter) with input steps and ramps."""

from __future__ import annotations

import argparse
import math
import os
from pathlib import Path

import numpy as np

from rtmodel import layout as L

from ..cli import SAFETY
from ..errors import ConfigError
from . import add_config_args

EXAMPLE = """examples:
  dcrig sim configs/machines/kestrel_f3_stand.toml --t-end 4 --dt 20e-6 \\
      --step load_torque_Nm@2.5=6000 --out f3.csv --plot f3.png
  dcrig sim configs/machines/kestrel_f3_stand.toml --converter configs/converters/kestrel_f3_bridge.toml \\
      --t-end 3 --set-input firing_angle_deg=150 --ramp firing_angle_deg@0.2:2.5=150:20 --out ramp.csv
  dcrig runs show f3-run            # the record of the first example (every output, every sample)

inputs (NAME for --step/--ramp/--set-input): see `host/sim.py` INPUTS; units are in the names.
"""


def add_subparser(sub):
    p = sub.add_parser("sim", help="offline transient simulation to CSV (and PNG)",
                       description="Run the compiled model offline from standstill with step and ramp inputs; "
                       "write a CSV with unit-suffixed columns and optionally a plot.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_config_args(p)
    p.add_argument("--t-end", type=float, required=True, metavar="S", help="simulated time, s")
    p.add_argument("--dt", type=float, metavar="S", help="model step, s (overrides sim.dt_us)")
    p.add_argument("--sample", type=float, metavar="S", help="output sample interval, s (default: the step when a converter is given, else 1 ms)")
    p.add_argument("--set-input", action="append", default=[], metavar="NAME=VALUE", help="input value from t = 0")
    p.add_argument("--step", action="append", default=[], metavar="NAME@T=VALUE", help="step an input at time T")
    p.add_argument("--ramp", action="append", default=[], metavar="NAME@T0:T1=V0:V1", help="ramp an input linearly")
    p.add_argument("--out", required=True, metavar="FILE.csv",
                   help="CSV output, exported from the run's record (also after Ctrl-C: the rows computed so far)")
    p.add_argument("--run-dir", metavar="DIR",
                   help="run folder for the record (record.sqlite, configs/); default FILE-run beside --out; "
                   "when it exists the run gets DIR-2, DIR-3, ... (never overwritten)")
    p.add_argument("--plot", metavar="FILE.png", help="PNG plot")
    p.set_defaults(func=_do_sim)


def _check_out_path(option: str, path: Path) -> None:
    """Refuse an output path that cannot be written before the run, not after it."""
    folder = path.parent
    if path.is_dir():
        raise ConfigError(f"{option}: {path}: is a folder, expected a file name")
    if not folder.is_dir():
        raise ConfigError(f"{option}: {path}: the folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise ConfigError(f"{option}: {path}: the folder {folder} is not writable")


def _do_sim(args):
    from ..record import RECORD_FILE, new_run_dir, open_record
    from ..record.export import export_frames_csv
    from ..recording import end_status, open_run_record
    from ..sim import CSV_COLUMNS, check_segments, parse_ramp, parse_step, plot, run_offline
    from . import load_plant

    if not (args.t_end > 0 and math.isfinite(args.t_end)):
        raise ConfigError(f"--t-end: must be > 0, got {args.t_end!r}")
    if args.dt is not None:
        if not (args.dt > 0 and math.isfinite(args.dt)):
            raise ConfigError(f"--dt: must be > 0, got {args.dt!r}")
        args.overrides = list(args.overrides) + [f"sim.dt_us={args.dt * 1e6!r}"]
    if args.sample is not None and not (math.isfinite(args.sample) and args.sample > 0):
        raise ConfigError(f"--sample: must be a finite time > 0 s, got {args.sample!r}")
    if args.sample is not None and args.sample > args.t_end:
        raise ConfigError(f"--sample: must not exceed --t-end ({args.t_end:g} s), got {args.sample!r}")
    if not str(args.out).lower().endswith(".csv"):
        raise ConfigError(f"--out: {args.out}: expected a file name ending in .csv")
    if args.plot and not str(args.plot).lower().endswith(".png"):
        raise ConfigError(f"--plot: {args.plot}: expected a file name ending in .png")
    out = Path(args.out)
    _check_out_path("--out", out)
    if args.plot:
        _check_out_path("--plot", Path(args.plot))
    plant = load_plant(args)
    segs = []
    for text in args.set_input:
        if "=" not in text:
            raise ConfigError(f"--set-input: '{text}': expected NAME=VALUE")
        name, val = text.split("=", 1)
        segs.append(parse_step(f"{name}@0={val}"))
    segs += [parse_step(s) for s in args.step] + [parse_ramp(r) for r in args.ramp]
    sample = args.sample
    if sample is None:
        sample = plant.dt_s if plant.converter is not None else max(plant.dt_s, 1e-3)
    if sample < plant.dt_s * 0.999:
        raise ConfigError(f"--sample: must be at least the model step ({plant.dt_s:g} s), got {sample!r}")
    n = args.t_end / sample
    if n > 5e6:
        raise ConfigError(f"--sample: {n:.0f} rows is too many; use a larger --sample")
    check_segments(plant, segs)
    if args.run_dir:
        rd_path = Path(args.run_dir)
        run_dir = new_run_dir(rd_path.parent, rd_path.name, option="--run-dir")
    else:
        run_dir = new_run_dir(out.parent, out.stem + "-run", option="--out")
    # the files this run will write: a stale copy from an earlier run must not pass for this one
    for stale in (out, Path(args.plot) if args.plot else None):
        if stale is not None and stale.is_file():
            stale.unlink()
    columns = [L.OUTPUT_COLUMNS[i] for i in range(L.N_OUTPUT)]
    meta = {"run_kind": "sim", "run_name": "sim", "t_end_s": args.t_end, "sample_s": sample,
            "inputs": [[sg.name, sg.t0_s, sg.t1_s, sg.v0, sg.v1] for sg in segs], "csv": str(out)}
    rec = open_run_record(run_dir, columns, plant, meta, lossless=True)  # offline: wait for the disk, drop nothing
    for sg in segs:
        text = (f"{sg.name} = {sg.v1:g}" if sg.t1_s == sg.t0_s else
                f"{sg.name} ramp {sg.v0:g} -> {sg.v1:g} until {sg.t1_s:g} s")
        rec.event(sg.t0_s, "input", text, name=sg.name, t0_s=sg.t0_s, t1_s=sg.t1_s, v0=sg.v0, v1=sg.v1)
    csv_cols = [L.OUTPUT_COLUMNS[c] for c in CSV_COLUMNS]
    try:
        t, Y = run_offline(plant, args.t_end, sample, segs, on_rows=rec.frame_block)
    except KeyboardInterrupt as err:
        kept = rec.rows_recorded
        rec.event(0.0, "host", "run stopped early: interrupted")
        rec.close(end_status(err))
        with open_record(run_dir) as rd:
            rows = rd.frames()
            export_frames_csv(rd, out, columns=csv_cols)
        t_last = rows[-1, 0] if len(rows) else 0.0
        print(f"interrupted at {t_last:.3f} s of {args.t_end:g} s: kept {kept} rows -> {out}; "
              f"record {run_dir / RECORD_FILE} (status stopped)", flush=True)
        raise
    except BaseException as err:
        rec.close(end_status(err))
        raise
    status = 0
    for s in Y[:, L.Y_STATUS].astype(int):
        status |= s
    flags = [name for bit, name in L.ST_NAMES.items() if status & bit]
    if flags:
        rec.event(float(t[-1]), "model", "model flags seen: " + ", ".join(flags), flags=flags)
    rec.close("error: nonfinite_state" if status & L.ST_NONFINITE else "complete")
    with open_record(run_dir) as rd:
        export_frames_csv(rd, out, columns=csv_cols)
    if args.plot:
        plot(args.plot, Y, plant.machine["machine.name"])
    last = Y[-1]
    print(f"{plant.machine['machine.name']}: {t[-1]:.3f} s simulated, {len(t)} rows -> {args.out}"
          + (f", plot -> {args.plot}" if args.plot else "") + f"; record {run_dir / RECORD_FILE}")
    print(f"  end: speed {last[L.Y_SPEED_RPM]:.1f} r/min, armature {last[L.Y_IA_A]:.1f} A, "
          f"field {last[L.Y_IF_A]:.2f} A, EMF {last[L.Y_EMF_V]:.1f} V, terminal {last[L.Y_VT_MEAN_V]:.1f} V")
    print(f"  peaks: |ia| {np.max(np.abs(Y[:, L.Y_IA_PEAK_A])):.0f} A, speed {np.max(np.abs(Y[:, L.Y_SPEED_RPM])):.0f} r/min")
    print(f"  model flags seen: {', '.join(flags) if flags else 'none'}")
    if status & L.ST_NONFINITE:
        print("error: the model state became non-finite; reduce the step", flush=True)
        return 2
    return 0
