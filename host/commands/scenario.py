"""`dcrig scenario`: run one scenario file, judge it, print the verdict, write record and plots."""

from __future__ import annotations

import argparse

from ..cli import SAFETY

EXAMPLE = """examples:
  dcrig scenario configs/scenarios/f3_field_rheostat.toml
  dcrig scenario configs/scenarios/f3_tacho_loss.toml --out /tmp/runs
  dcrig scenario configs/scenarios/f3_phase_loss.toml --link socket://192.0.2.10:5020   # a real controller
  dcrig scenario configs/scenarios/f3_replay_bite_dip.toml   # a recorded bite and mains dip, closed loop

exit status: 0 PASS, 1 FAIL, 2 bad input (one line naming file, key and rule)
"""


def add_subparser(sub):
    p = sub.add_parser("scenario", help="run one scenario and judge it (expectations, machine-harm checks)",
                       description="Run one scenario file lockstep - the plant, its controller (the emulated one "
                       "by default, or a real one on --link), the start state and the timed operator inputs, load "
                       "changes and faults, or a recorded event replayed closed loop ([replay]: a CSV, COMTRADE or "
                       "dcrig trace of disturbances and operator inputs) - then judge the record: each expectation PASS or FAIL with its measured "
                       "figure and margin, and the machine-harm checks. Writes the record, verdict.json and plots "
                       "to a new folder under --out. File format: docs/scenarios.md.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("file", metavar="SCENARIO.toml")
    p.add_argument("--link", metavar="URL", help="run against the controller on this port or URL instead of the "
                   "scenario's own (socket://..., /dev/ttyUSB0, accept://HOST:PORT)")
    p.add_argument("--out", default="dcrig-scenarios", metavar="DIR", help="parent folder of the run folder")
    p.add_argument("--no-plot", action="store_true", help="skip the plots")
    p.set_defaults(func=_do_scenario)


def _do_scenario(args):
    from ..scenario import load_scenario
    from ..suite.run import run_one

    load_scenario(args.file)  # bad input: one line, exit 2, before the banner and before anything runs
    print(SAFETY + "\n")
    try:
        row = run_one(args.file, args.out, args.link, plots=not args.no_plot)
    except KeyboardInterrupt as err:
        run_dir = getattr(err, "run_dir", None)
        if run_dir is not None:  # say where the record is, as sim and demo do
            if getattr(err, "run_complete", False):
                print(f"\ninterrupted while judging or plotting; the run itself is complete in its record: "
                      f"{run_dir}", flush=True)
            else:
                print(f"\ninterrupted: the record so far is kept (status stopped): {run_dir}", flush=True)
        raise
    if row["outcome"] == "error":
        from ..errors import DcrigError

        raise DcrigError(f"{args.file}: {row['error']}")
    print(format_row(row))
    return 0 if row["passed"] else 1


def format_row(row) -> str:
    v = row["verdict"]
    speed = row["model_s"] / max(row["wall_s"], 1e-9)
    speed_text = f"{speed:.0f}" if speed >= 10.0 else f"{speed:.2g}"  # a first run compiles: 0.13, not 0
    lines = [f"{row['name']}: {'PASS' if row['passed'] else 'FAIL'}  ({row['model_s']:.2f} s model time in "
             f"{row['wall_s']:.2f} s wall, {speed_text} x real time)"]
    for e in v["expectations"]:
        lines.append(f"  {'PASS' if e['passed'] else 'FAIL'}  {e['name']}: {e['text']}")
    flagged = [h for h in v["harm"] if h["flagged"]]
    lines.append("  machine-harm checks: " + ("none flagged" if not flagged else f"{len(flagged)} flagged"))
    for h in flagged:
        tag = "accepted" if h["accepted"] else "HARM"
        lines.append(f"  {tag:8s} {h['check']}: {h['text']}")
    if row.get("run_dir"):
        lines.append(f"  record, verdict and plots: {row['run_dir']}")
    return "\n".join(lines)
