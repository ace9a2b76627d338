"""`dcrig runs`: list run folders, show a run's summary from its record, export a window of it."""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from ..cli import SAFETY

EXAMPLE = """examples:
  dcrig runs                                   # run folders under the current folder
  dcrig runs list /data/f3-commissioning       # ... under another folder
  dcrig runs show dcrig-demo                   # status, duration, trips, flags, counters
  dcrig runs export dcrig-demo --format csv    # frames.csv and events.csv from the record
  dcrig runs export dcrig-demo --format comtrade --revision 2013 --binary   # around each trip
  dcrig runs export dcrig-demo --format comtrade --around operator:load --pre 0.2 --post 2
  dcrig runs export dcrig-demo --format comtrade --from 5.5 --to 7.5
  dcrig runs replay dcrig-demo                 # open loop: the recorded commands drive the model again
  dcrig runs replay dcrig-demo --set machine.ra_ohm=0.02 --tolerance speed_rpm=2
  dcrig runs replay --trace site/f3-trip.csv --map site/f3-map.toml \\
      --machine configs/machines/kestrel_f3_stand.toml --converter configs/converters/kestrel_f3_dual.toml
  dcrig runs replay dcrig-demo --closed-loop   # the recorded operator/load timeline, a live controller
  dcrig runs replay dcrig-demo --closed-loop --link socket://192.0.2.10:5020   # ... against a real one

A record is read, never changed. A run killed before its end shows status `unfinished`:
its rows up to the last commit (at most 100 ms before the kill) are there, nothing after.
"""


def add_subparser(sub):
    p = sub.add_parser("runs", help="list runs, show a run's summary, export a window (CSV, COMTRADE)",
                       description="Read run records (record.sqlite in a run folder): list them, summarise one, "
                       "or export a window of one as CSV or COMTRADE (IEEE C37.111-1999 or -2013 / IEC 60255-24).",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--base", default=".", metavar="DIR", help="folder to list when no action is given (default .)")
    p.set_defaults(func=_do_list, base_pos=None)
    acts = p.add_subparsers(dest="runs_action", metavar="ACTION")
    fmt = argparse.RawDescriptionHelpFormatter
    lp = acts.add_parser("list", help="list the run folders under a folder", epilog=EXAMPLE + "\n" + SAFETY,
                         formatter_class=fmt, description="List run folders (those holding record.sqlite) under "
                         "BASE and one level below, oldest first.")
    lp.add_argument("base_pos", nargs="?", default=None, metavar="BASE")
    lp.set_defaults(func=_do_list)
    sp = acts.add_parser("show", help="a run's summary, read from its record", epilog=EXAMPLE + "\n" + SAFETY,
                         formatter_class=fmt, description="Summarise one run from its record: status (complete, "
                         "stopped, error, unfinished), duration, trips, model flags, counters, configs.")
    sp.add_argument("run", metavar="RUN", help="run folder or record.sqlite")
    sp.set_defaults(func=_do_show)
    ep = acts.add_parser("export", help="export a window of a run as CSV or COMTRADE", epilog=EXAMPLE + "\n" + SAFETY,
                         formatter_class=fmt, description="Export from a run's record. COMTRADE: one .cfg/.dat pair "
                         "per window; by default a window around each trip (the whole run when nothing tripped). "
                         "Analog channels carry units and a, b scaling; flag bits and trips are status channels.")
    ep.add_argument("run", metavar="RUN", help="run folder or record.sqlite")
    ep.add_argument("--format", required=True, choices=("csv", "comtrade"))
    ep.add_argument("--revision", choices=("1999", "2013"), default="1999", help="COMTRADE revision (default 1999)")
    ep.add_argument("--binary", action="store_true", help="COMTRADE binary (16-bit) data instead of ASCII")
    win = ep.add_mutually_exclusive_group()
    win.add_argument("--around", metavar="EVENT",
                     help="event kind (trip, operator, link, ...) or KIND:WORDS (the event's text contains WORDS)")
    ep.add_argument("--from", dest="t_from", type=float, metavar="S", help="window start, model time s")
    ep.add_argument("--to", dest="t_to", type=float, metavar="S", help="window end, model time s")
    ep.add_argument("--pre", type=float, default=0.5, metavar="S", help="time before the event (default 0.5 s)")
    ep.add_argument("--post", type=float, default=1.0, metavar="S", help="time after the event (default 1.0 s)")
    ep.add_argument("--into", metavar="DIR", help="output folder (default RUN/exports)")
    ep.set_defaults(func=_do_export)
    rp = acts.add_parser("replay", help="open-loop replay: the recorded commands drive the model, compared with the record",
                         epilog=EXAMPLE + "\n" + SAFETY, formatter_class=fmt,
                         description="Replay a closed-loop run open loop: its recorded command trace (firing angles or "
                         "voltage references, field commands, contactor) and operator/load timeline drive the model with "
                         "no controller, from the run's own resolved configs (plus --set changes); the response is "
                         "compared with the recorded one column by column. Prints where and by how much it departs; "
                         "exit status 1 when a column leaves its tolerance. The replay is recorded in RUN/replays/.")
    rp.add_argument("run", metavar="RUN", nargs="?", help="run folder or record.sqlite of a demo or serve run")
    rp.add_argument("--trace", metavar="FILE", help="replay a trace from another recorder instead of a run: a CSV, "
                    "or a COMTRADE .cfg beside its .dat (needs --map and --machine)")
    rp.add_argument("--map", metavar="MAP.toml", help="channel map of the trace: time, commands, inputs, feedback "
                    "(docs/record.md)")
    rp.add_argument("--machine", metavar="MACHINE.toml", help="machine config for a trace replay")
    rp.add_argument("--converter", metavar="CONVERTER.toml", help="converter config for a trace replay")
    rp.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                    help="change a config key for the replay, e.g. --set machine.ra_ohm=0.02 (repeatable)")
    rp.add_argument("--compare", metavar="COL,COL", help="columns to compare (default: armature and field current, "
                    "terminal voltage, speed, torque)")
    rp.add_argument("--tolerance", action="append", default=[], metavar="COL=ABS",
                    help="absolute tolerance of a column in its unit (default 1 %% of its recorded peak)")
    rp.add_argument("--closed-loop", action="store_true",
                    help="closed loop instead: the run's recorded operator and load timeline drives the model while "
                    "a live controller answers (the emulated one as a process by default; --controller, --link); "
                    "recorded in RUN/replays/closed-loop, judged (harm checks) and compared frame for frame. For a "
                    "CSV or COMTRADE disturbance trace write a scenario with [replay] (docs/scenarios.md)")
    rp.add_argument("--controller", choices=("process", "emulated"), default="process",
                    help="--closed-loop: the emulated controller as a separate process over a virtual cable (as "
                    "`dcrig demo` runs it: the same frames) or in-process (no fixed-point link encoding, so the frames differ)")
    rp.add_argument("--link", metavar="URL", help="--closed-loop against the controller on this port or URL "
                    "(it must drive no power stage)")
    rp.set_defaults(func=_do_replay)


def _run_dirs(base: Path) -> list[Path]:
    from ..record import RECORD_FILE

    found = []
    for cand in [base, *sorted(p for p in base.iterdir() if p.is_dir())]:
        if (cand / RECORD_FILE).is_file():
            found.append(cand)
        elif cand != base:
            found += [q for q in sorted(cand.iterdir()) if q.is_dir() and (q / RECORD_FILE).is_file()]
    return found


def _duration(rd) -> tuple[int, float, float]:
    rows = rd.frames()
    if not len(rows) or "time_s" not in rd.R:
        return len(rows), math.nan, math.nan
    t = rows[:, rd.R["time_s"]]
    return len(rows), float(t[0]), float(t[-1])


def _do_list(args):
    from ..errors import ConfigError
    from ..record import RecordError, open_record

    base = Path(args.base_pos or args.base)
    if not base.is_dir():
        raise ConfigError(f"{base}: not a folder")
    dirs = _run_dirs(base)
    if not dirs:
        print(f"no runs under {base}")
        return 0
    print(f"{'run':40s} {'status':12s} {'kind':12s} {'started (UTC)':21s} {'frames':>8s} {'model s':>8s}  machine")
    for d in dirs:
        try:
            with open_record(d) as rd:
                n, t0, t1 = _duration(rd)
                m = rd.meta
                print(f"{str(d):40s} {rd.status[:12]:12s} {str(m.get('run_kind', '?')):12s} "
                      f"{str(m.get('start_utc', '?')):21s} {n:8d} {t1 - t0:8.2f}  {m.get('machine', '?')}")
        except RecordError as err:  # one unreadable record does not hide the others
            print(f"{str(d):40s} {'unreadable':12s} {err}")
    return 0


def summary_lines(rd) -> list[str]:
    """What `runs show` prints; also used after a run."""
    import numpy as np

    m = rd.meta
    n, t0, t1 = _duration(rd)
    lines = [f"status: {rd.status}" + ("  (the process ended without closing the record: killed or power lost; "
                                       "rows up to its last commit are here)" if rd.status == "unfinished" else "")]
    lines.append(f"run: {m.get('run_kind', '?')} '{m.get('run_name', '')}', started {m.get('start_utc', '?')} UTC, "
                 f"dcrig {m.get('software_version', '?')}, pid {m.get('pid', '?')} on {m.get('host', '?')}")
    lines.append(f"plant: {m.get('machine', '?')} on {m.get('converter', '?')}")
    if "link" in m:
        lines.append(f"link: {m['link']} ({m.get('encoding', '?')}, {'paced' if m.get('paced') else 'lockstep'}, "
                     f"frame {m.get('frame_period_us', '?')} us)")
    lines.append(f"frames: {n} rows, model time {t0:.3f} .. {t1:.3f} s ({t1 - t0:.3f} s)"
                 + (f"; the recorder dropped {rd.end.dropped}" if rd.end and rd.end.dropped else ""))
    events = rd.events(with_data=True)
    trips = [e for e in events if e[1] == "trip"]
    lines.append("trips: " + ("; ".join(f"{e[2]} at {e[0]:.3f} s" for e in trips) if trips else "none"))
    rows = rd.frames()
    flags = []
    for col, bits in m.get("status_bits", {}).items():
        if col in rd.R and len(rows):
            seen = int(np.bitwise_or.reduce(rows[:, rd.R[col]].astype(np.int64)))
            flags += [f"{name}" if col in ("model_status", "status") else f"{col}.{name}"
                      for b, name in sorted(bits.items(), key=lambda kv: int(kv[0])) if seen >> int(b) & 1]
    lines.append("flags seen: " + (", ".join(flags) if flags else "none"))
    for col, label in (("armature_current_peak_A", "peak armature current"), ("speed_rpm", "peak speed")):
        if col in rd.R and len(rows):
            lines.append(f"{label}: {np.max(np.abs(rows[:, rd.R[col]])):.1f} {'A' if col.endswith('_A') else 'r/min'}")
    counters = [e[3] for e in events if e[1] == "counters"]
    if counters:
        c = counters[-1]
        lines.append("counters: " + ", ".join(f"{k} {v:.2f}" if isinstance(v, float) else f"{k} {v}"
                                              for k, v in c.items()))
    stops = [e for e in events if e[1] == "host" and "stopped early" in e[2]]
    for e in stops:
        lines.append(f"stopped: {e[2]} at {e[0]:.3f} s")
    kinds = {}
    for e in events:
        kinds[e[1]] = kinds.get(e[1], 0) + 1
    lines.append("events: " + (", ".join(f"{k} {v}" for k, v in kinds.items()) if kinds else "none"))
    hashes = m.get("config_sha256", {})
    if hashes:
        lines.append("configs: " + ", ".join(f"{k} {v[:12]}" for k, v in hashes.items())
                     + " (sha256 of the resolved copies in configs/)")
    return lines


def _do_show(args):
    from ..record import open_record

    with open_record(args.run) as rd:
        print(f"{rd.path}")
        for line in summary_lines(rd):
            print("  " + line)
    return 0


def _do_export(args):
    from ..record import RecordError, open_record
    from ..record.export import (export_comtrade, export_events_csv, export_frames_csv, resolution, windows)

    for name, v in (("--from", args.t_from), ("--to", args.t_to), ("--pre", args.pre), ("--post", args.post)):
        if v is not None and not math.isfinite(v):
            raise RecordError(f"{args.run}: {name}: must be a finite time in s, got {v!r}")
    with open_record(args.run) as rd:
        run_dir = rd.path.parent
        into = Path(args.into) if args.into else run_dir / "exports"
        try:
            into.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise RecordError(f"--into: {into}: cannot create the folder ({err.strerror or err})") from err
        if rd.status not in ("complete",):
            print(f"note: the run's status is '{rd.status}': the export holds what was recorded")
        if args.format == "csv":
            if args.around is not None or args.t_from is not None or args.t_to is not None:
                w = windows(rd, around=args.around, t_from_s=args.t_from, t_to_s=args.t_to,
                            pre_s=args.pre, post_s=args.post)
                for win in w:
                    f = export_frames_csv(rd, into / f"frames-{win.name}.csv", t_from_s=win.t_from_s, t_to_s=win.t_to_s)
                    e = export_events_csv(rd, into / f"events-{win.name}.csv", t_from_s=win.t_from_s, t_to_s=win.t_to_s)
                    print(f"{win.why}: {win.t_from_s:.3f} .. {win.t_to_s:.3f} s -> {f}, {e}")
            else:
                f = export_frames_csv(rd, into / "frames.csv")
                e = export_events_csv(rd, into / "events.csv")
                print(f"whole run -> {f}, {e}")
            return 0
        w = windows(rd, around=args.around, t_from_s=args.t_from, t_to_s=args.t_to, pre_s=args.pre, post_s=args.post)
        tag = f"{args.revision}{'-bin' if args.binary else ''}"
        for win in w:
            named = type(win)(f"{win.name}-{tag}", win.t_from_s, win.t_to_s, win.trigger_s, win.why)
            cfg, dat = export_comtrade(rd, into, named, revision=args.revision, binary=args.binary)
            res = resolution(rd, win)
            worst = max(res.items(), key=lambda kv: kv[1]) if res else ("-", 0.0)
            print(f"{win.why}: {win.t_from_s:.3f} .. {win.t_to_s:.3f} s -> {cfg}, {dat} "
                  f"(C37.111-{args.revision}, {'binary' if args.binary else 'ASCII'}; coarsest step "
                  f"{worst[1]:.3g} on {worst[0]})")
    return 0


def _do_replay(args):
    from ..errors import ConfigError
    from ..replay import DEFAULT_COMPARE, open_loop_replay

    columns = tuple(c.strip() for c in args.compare.split(",") if c.strip()) if args.compare else DEFAULT_COMPARE
    tolerances = {}
    for text in args.tolerance:
        col, sep, val = text.partition("=")
        try:
            tolerances[col.strip()] = float(val)
        except ValueError as err:
            raise ConfigError(f"--tolerance: '{text}': expected COLUMN=VALUE, e.g. speed_rpm=2") from err
        if not sep:
            raise ConfigError(f"--tolerance: '{text}': expected COLUMN=VALUE, e.g. speed_rpm=2")
    if args.closed_loop:
        from ..scenario.replay import closed_loop_replay

        if args.trace or args.map or args.machine or args.converter or not args.run:
            raise ConfigError("--closed-loop: give a RUN (it brings its configs and timeline) and no --trace, --map, "
                              "--machine or --converter; a CSV or COMTRADE trace goes in a scenario's [replay]")
        res = closed_loop_replay(args.run, args.controller, args.link, args.overrides, columns, tolerances)
        print(f"closed-loop replay of {res.source}: {res.frames} frames against "
              f"{args.link or 'the emulated controller (' + args.controller + ')'}"
              + (f" with {', '.join(args.overrides)}" if args.overrides else "") + f"; record {res.run_dir}")
        if res.identical:
            print("  reproduces the record frame for frame (every compared value equal to the bit)")
        for d in res.departures:
            print("  " + d.line())
        flagged = [h for h in res.row["verdict"]["harm"] if h["flagged"]]
        print("  machine-harm checks: " + ("none flagged" if not flagged else
                                           "; ".join(f"{h['check']}: {h['text']}" for h in flagged)))
        return 1 if res.departs or flagged else 0
    if args.controller != "process" or args.link:
        raise ConfigError("--controller and --link go with --closed-loop")
    if args.trace:
        from ..replay import trace_replay

        if args.run or not (args.map and args.machine):
            raise ConfigError("--trace: give the trace with --map MAP.toml and --machine MACHINE.toml, and no RUN")
        res = trace_replay(args.trace, args.map, args.machine, args.converter, args.overrides, tolerances)
    elif not args.run:
        raise ConfigError("replay: give a RUN (run folder or record.sqlite) or --trace FILE.csv")
    else:
        if args.map or args.machine or args.converter:
            raise ConfigError("replay: --map, --machine and --converter go with --trace; a RUN brings its own configs")
        res = open_loop_replay(args.run, args.overrides, columns, tolerances)
    print(f"open-loop replay of {res.source}: {res.frames} frames"
          + (f" with {', '.join(args.overrides)}" if args.overrides else "") + f"; record {res.run_dir}")
    if res.identical:
        print("  reproduces the record frame for frame (every compared value equal to the bit)")
    for d in res.departures:
        print("  " + d.line())
    return 1 if res.departs else 0
