"""`dcrig sim`: offline transient of a machine (and converter) with input changes and ramps.

`--step` is the old name of `--change`, kept for one release as a hidden alias."""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

from rtmodel import layout as L

from ..cli import SAFETY
from ..errors import ConfigError
from . import add_config_args

EXAMPLE = """examples:
  dcrig sim configs/machines/kestrel_f3_stand.toml --t-end 4 --dt 20e-6 \\
      --change load_torque_Nm@2.5=6000 --out f3.csv --plot f3.png
  dcrig sim configs/machines/kestrel_f3_stand.toml --converter configs/converters/kestrel_f3_bridge.toml \\
      --t-end 3 --set-input firing_angle_deg=150 --ramp firing_angle_deg@0.2:2.5=150:20 --out ramp.csv
  dcrig runs show f3-run            # the record of the first example (every output, every sample)

inputs (NAME for --change/--ramp/--set-input): see `host/sim.py` INPUTS; units are in the names.
"""


def add_subparser(sub):
    p = sub.add_parser("sim", help="offline transient simulation to CSV (and PNG)",
                       description="Run the compiled model offline from standstill (or, with --from-steady, running "
                       "in steady state) with input changes and ramps; "
                       "write a CSV with unit-suffixed columns and optionally a plot.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_config_args(p)
    p.add_argument("--t-end", type=float, required=True, metavar="S", help="simulated time, s")
    p.add_argument("--dt", type=float, metavar="S", help="model step, s (overrides sim.dt_us)")
    p.add_argument("--sample", type=float, metavar="S", help="output sample interval, s (default: the step when a converter is given, else 1 ms)")
    p.add_argument("--set-input", action="append", default=[], metavar="NAME=VALUE", help="input value from t = 0")
    p.add_argument("--change", action="append", default=[], metavar="NAME@T=VALUE",
                   help="change an input to VALUE at time T (repeatable)")
    # the old spelling, hidden from --help for its last release; kept apart to name it in errors
    p.add_argument("--step", dest="old_step", action="append", default=[], help=argparse.SUPPRESS)
    p.add_argument("--ramp", action="append", default=[], metavar="NAME@T0:T1=V0:V1", help="ramp an input linearly")
    p.add_argument("--from-steady", action="store_true",
                   help="start running in steady state (field up, at the speed where the motor meets its load on the DC "
                   "source) instead of from rest")
    p.add_argument("--out", required=True, metavar="FILE.csv",
                   help="CSV output, exported from the run's record (also after Ctrl-C: the rows computed so far)")
    p.add_argument("--run-dir", metavar="DIR",
                   help="run folder for the record (record.sqlite, configs/); default FILE-run beside --out; "
                   "when it exists the run gets DIR-2, DIR-3, ... (never overwritten)")
    p.add_argument("--plot", metavar="FILE.png", help="PNG plot")
    p.set_defaults(func=_do_sim)


def _do_sim(args):
    from ..outputs import check_output_file
    from ..record import RECORD_FILE, new_run_dir, open_record
    from ..record.export import export_frames_csv
    from ..recording import end_status, open_run_record, tell_export_again
    from ..sim import (CSV_COLUMNS, check_inputs, check_segments, overspeed_limit_rpm, parse_change, parse_ramp, plot,
                       run_offline)
    from . import load_plant

    if not (args.t_end > 0 and math.isfinite(args.t_end)):
        raise ConfigError(f"--t-end: must be > 0, got {args.t_end!r}")
    if args.dt is not None:
        if not (args.dt > 0 and math.isfinite(args.dt)):
            raise ConfigError(f"--dt: must be > 0, got {args.dt!r}")
        args.overrides = list(args.overrides) + [f"sim.dt_us={args.dt * 1e6!r}"]
    check_output_file("--out", args.out, ".csv")
    if args.plot:
        check_output_file("--plot", args.plot, ".png")
    if args.sample is not None and not (math.isfinite(args.sample) and args.sample > 0):
        raise ConfigError(f"--sample: must be a finite number of seconds > 0, got {args.sample!r}")
    if args.sample is not None and args.sample > args.t_end:
        raise ConfigError(f"--sample: must not exceed --t-end ({args.t_end:g} s), got {args.sample!r}")
    out = Path(args.out)
    plant = load_plant(args)
    segs = []
    where = {}
    for text in args.set_input:
        if "=" not in text:
            raise ConfigError(f"--set-input: '{text}': expected NAME=VALUE")
        name, val = text.split("=", 1)
        segs.append(parse_change(f"{name}@0={val}", "--set-input"))
        where[name] = "--set-input"
    if args.old_step:
        print("note: --step is renamed to --change; the old name goes in the next release", file=sys.stderr)
    for text, option in [(s, "--change") for s in args.change] + [(s, "--step") for s in args.old_step]:
        segs.append(parse_change(text, option))
        where.setdefault(segs[-1].name, option)
    for text in args.ramp:
        segs.append(parse_ramp(text))
        where.setdefault(segs[-1].name, "--ramp")
    check_inputs(plant, segs, where)
    sample = args.sample
    if sample is None:
        sample = plant.dt_s if plant.converter is not None else max(plant.dt_s, 1e-3)
    if sample < plant.dt_s * 0.999:
        raise ConfigError(f"--sample: must be at least the model step ({plant.dt_s:g} s), got {sample!r}")
    n = args.t_end / sample
    if n > 5e6:
        raise ConfigError(f"--sample: {n:.0f} rows is too many; use a larger --sample")
    check_segments(plant, segs)
    x0 = None
    if args.from_steady:
        from ..sim import steady_start_state

        x0 = steady_start_state(plant)
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
        t, Y = run_offline(plant, args.t_end, sample, segs, x=x0, on_rows=rec.frame_block)
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
    n_limit = overspeed_limit_rpm(plant)
    over = np.nonzero(np.abs(Y[:, L.Y_SPEED_RPM]) > n_limit)[0]
    if len(over):
        flags.append("overspeed")
    if flags:
        rec.event(float(t[-1]), "model", "model flags seen: " + ", ".join(flags), flags=flags)
    rec.close("error: nonfinite_state" if status & L.ST_NONFINITE else "complete")
    try:
        with open_record(run_dir) as rd:
            export_frames_csv(rd, out, columns=csv_cols)
        if args.plot:
            plot(args.plot, Y, plant.machine["machine.name"])
    except KeyboardInterrupt:
        tell_export_again(run_dir)  # a Ctrl-C after the run: say the record is whole
        raise
    last = Y[-1]
    print(f"{plant.machine['machine.name']}: {t[-1]:.3f} s simulated, {len(t)} rows -> {args.out}"
          + (f", plot -> {args.plot}" if args.plot else "") + f"; record {run_dir / RECORD_FILE}")
    print(f"  end: speed {last[L.Y_SPEED_RPM]:.1f} r/min, armature {last[L.Y_IA_A]:.1f} A, "
          f"field {last[L.Y_IF_A]:.2f} A, EMF {last[L.Y_EMF_V]:.1f} V, terminal {last[L.Y_VT_MEAN_V]:.1f} V")
    print(f"  peaks: |ia| {np.max(np.abs(Y[:, L.Y_IA_PEAK_A])):.0f} A, speed {np.max(np.abs(Y[:, L.Y_SPEED_RPM])):.0f} r/min")
    print(f"  model flags seen: {', '.join(flags) if flags else 'none'}")
    if len(over):
        peak = float(np.max(np.abs(Y[:, L.Y_SPEED_RPM])))
        print(f"warning: overspeed: {peak:.0f} r/min from t = {Y[over[0], L.Y_TIME_S]:.3f} s, above the "
              f"machine's limit {n_limit:.0f} r/min (machine.max_speed_rpm, default 1.2 x rated); on a real machine "
              "its overspeed protection must trip long before this.", file=sys.stderr, flush=True)
    if status & L.ST_NONFINITE:
        bad = int(np.argmax(Y[:, L.Y_STATUS].astype(int) & L.ST_NONFINITE != 0))
        print(f"error: the model state became non-finite at t = {Y[bad, L.Y_TIME_S]:.6g} s; the rows up "
              f"to it are in {args.out}. Check the inputs and faults given, or reduce the step "
              f"(sim.dt_us {plant.dt_s * 1e6:g} us)", file=sys.stderr, flush=True)
        return 2
    return 0
