"""`dcrig demo`: host and emulated controller over the virtual cable, start to stop."""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

from ..cli import DEFER_TO_CODES, SAFETY
from ..errors import ConfigError, LinkError

# the folder that holds the host package: the checkout root, or site-packages when installed;
# the controller process gets it on its path so it runs this same copy of dcrig
CODE_ROOT = Path(__file__).resolve().parents[2]
# shipped demo plant configs (host.shipped), by their names inside the configs folder
DEFAULT_MACHINE = "machines/kestrel_f3_stand.toml"
DEFAULT_CONVERTER = "converters/kestrel_f3_dual.toml"
DEFAULT_CONTROLLER = "controllers/kestrel_f3_dual.toml"

EXAMPLE = """examples:
  dcrig demo                       # F3 stand motor, lockstep, run folder ./dcrig-demo/ (then dcrig-demo-2, ...)
  dcrig demo --paced --out /tmp/f3 # the same at the wall-clock frame rate
  dcrig runs show dcrig-demo       # the run's summary, read back from its record

The demo plant's configs (the invented Kestrel Bay mill) ship with dcrig, in
  {where}
(in Python: host.shipped.shipped_config("machines/kestrel_f3_stand.toml") -> its path).
"""


def _shipped_where() -> str:
    from ..shipped import shipped_dir

    try:
        return str(shipped_dir())
    except ConfigError as err:  # a broken install: say so in the help, fail only when run
        return f"(not found: {err})"


def add_subparser(sub):
    p = sub.add_parser("demo", help="closed-loop demo: model + emulated controller over a virtual cable",
                       description="Run the host and the emulated drive controller (a separate process) over a "
                       "pseudo-terminal pair: field up, start, accelerate to rated speed, load step, stop. "
                       "Prints a summary and writes the frame record, events and a plot.",
                       epilog=EXAMPLE.format(where=_shipped_where()) + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--machine", metavar="MACHINE.toml", help=f"machine config (default: the shipped {DEFAULT_MACHINE})")
    p.add_argument("--converter", metavar="CONVERTER.toml", help=f"converter config (default: the shipped {DEFAULT_CONVERTER})")
    p.add_argument("--settings", metavar="SETTINGS.toml",
                   help=f"emulated controller settings (default: the shipped {DEFAULT_CONTROLLER})")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE")
    p.add_argument("--encoding", choices=("fixed", "float32"), default="fixed")
    p.add_argument("--paced", action="store_true", help="paced real time instead of lockstep")
    p.add_argument("--load", type=float, default=0.6, metavar="PU", help="load step as a fraction of rated torque")
    p.add_argument("--out", default="dcrig-demo", metavar="DIR",
                   help="run folder: record.sqlite, configs/, frames.csv, events.csv, run.png; when DIR exists "
                   "the run gets DIR-2, DIR-3, ... (a run folder is never overwritten)")
    p.add_argument("--no-plot", action="store_true")
    p.set_defaults(func=_do_demo)


def _do_demo(args):
    from ..controller.settings import load_settings
    from ..link import VirtualCable
    from ..loop import warm_kernel
    from ..outputs import check_output_dir
    from ..record.rundir import discard_if_empty, new_run_dir
    from ..runner import default_timeline, run_closed_loop
    from . import check_load_pu, load_plant

    from ..shipped import shipped_config

    # every argument and file is checked before the banner: a refusal is its one line alone
    check_load_pu(args.load)
    check_output_dir("--out", args.out)
    args.machine = args.machine or str(shipped_config(DEFAULT_MACHINE))
    args.converter = args.converter or str(shipped_config(DEFAULT_CONVERTER))
    args.settings = args.settings or str(shipped_config(DEFAULT_CONTROLLER))
    plant = load_plant(args)
    settings = load_settings(args.settings)  # validate before spawning anything
    timeline = default_timeline(plant, args.load)
    out = Path(args.out)
    run_dir = new_run_dir(out.parent, out.name)  # before the compile: a bad folder is refused first
    try:
        print(SAFETY + "\n")
        print("loading the model kernel (the first run on a machine compiles it: 15-30 s, longer on a busy machine) ...", flush=True)
        took = warm_kernel(plant)
        if took > 2.0:
            print(f"compiled in {took:.0f} s; later runs load it from the cache")
        with VirtualCable() as cable:
            env = dict(os.environ)
            env["PYTHONPATH"] = str(CODE_ROOT) + os.pathsep + env.get("PYTHONPATH", "")
            proc = subprocess.Popen(
                [sys.executable, "-m", "host.cli", "controller", "--link", cable.slave_path,
                 "--settings", args.settings, "--quiet", "--idle-timeout", "10", "--handshake-timeout", "30"],
                env=env,
                # its own session: a Ctrl-C at the terminal reaches the host only, which stops the
                # run, keeps the record and says bye; the controller then ends on the bye (or on
                # the closed cable) and never prints an interrupt of its own
                start_new_session=True,
            )
            try:
                loop = run_closed_loop(plant, cable.host_link(hold_far_end=True), encoding=args.encoding, paced=args.paced,
                                       timeline=timeline, run_dir=run_dir, plot=not args.no_plot,
                                       meta={"run_name": "demo", "controller": "emulated (separate process)"},
                                       extra_configs={"controller": settings}, peer_exit=proc.poll)
            finally:
                try:
                    proc.wait(timeout=10)
                except subprocess.TimeoutExpired:
                    proc.kill()
                    proc.wait()
    finally:
        discard_if_empty(run_dir)
    if loop.stats.frames == 0:
        raise LinkError("demo: the controller answered no command frame")
    print("\nThis was a model: it proves the controller's logic, not its wiring, sensors or the real")
    print("machine. " + DEFER_TO_CODES)
    return 0
