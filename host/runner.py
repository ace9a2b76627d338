"""A whole closed-loop session: handshake, operator timeline, loop, live status, summary, files.

Owns what `dcrig serve` and `dcrig demo` share: the operator/load timeline of a run, the live
terminal status line, the end-of-run summary (speed settling, peaks, trips, link health,
timing) and the output files (frame record CSV, events, plot). The model runs in host.loop.
"""

from __future__ import annotations

import csv
import math
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rtmodel import layout as L

from . import signals as sig
from .controller.protection import trip_label
from .errors import DcrigError
from .loop import REC_COLUMNS, R, HostLoop, jitter_table


@dataclass
class TimelineStep:
    t_s: float
    what: str  # "run", "stop", "speed_ref_rpm", "load_torque_Nm", "input:<name>"
    value: float = 0.0


@dataclass
class Timeline:
    """Operator inputs and load changes at model times; applied by a loop hook."""

    steps: list[TimelineStep] = field(default_factory=list)
    _next: int = 0

    def __post_init__(self):
        # applied in time order whatever order they were listed in (stable for equal times)
        self.steps = sorted(self.steps, key=lambda st: st.t_s)

    def __call__(self, loop: HostLoop) -> None:
        t = loop.y[L.Y_TIME_S]
        while self._next < len(self.steps) and self.steps[self._next].t_s <= t + 1e-12:
            st = self.steps[self._next]
            self._next += 1
            op = loop.operator
            if st.what == "run":
                op.run, op.stop = 1, 0
            elif st.what == "stop":
                op.run, op.stop = 0, 1
            elif st.what == "speed_ref_rpm":
                op.speed_ref_rpm = st.value
            elif st.what == "load_torque_Nm":
                loop.u[L.U_LOAD_TORQUE_NM] = st.value
            elif st.what.startswith("input:"):
                from .sim import INPUTS

                idx, scale = INPUTS[st.what[6:]]
                loop.u[idx] = st.value * scale
            loop.event("operator", f"{st.what} {st.value:g}" if st.what not in ("run", "stop") else st.what)

    @property
    def end_s(self) -> float:
        return self.steps[-1].t_s if self.steps else 0.0


def default_timeline(plant, rated_fraction_load: float = 0.6) -> Timeline:
    """Start, accelerate to rated speed, load step, stop: the demo's duty cycle."""
    v = plant.machine.values
    n_rated = v["machine.rated_speed_rpm"]
    t_rated = plant.derived["rated_torque_Nm"]
    return Timeline([
        TimelineStep(0.1, "run"),
        TimelineStep(0.1, "speed_ref_rpm", 0.0),
        TimelineStep(0.6, "speed_ref_rpm", n_rated),
        TimelineStep(6.0, "load_torque_Nm", rated_fraction_load * t_rated),
        TimelineStep(9.0, "load_torque_Nm", 0.0),
        TimelineStep(9.5, "speed_ref_rpm", 0.0),
        TimelineStep(12.5, "stop"),
        TimelineStep(14.0, "stop"),
    ])  # fmt: skip


class StatusLine:
    """Live status on the terminal, refreshed at most every `every_s` of wall time."""

    def __init__(self, out=None, every_s: float = 0.4):
        self.out = out if out is not None else sys.stdout
        self.every_s = every_s
        self.tty = hasattr(out, "isatty") and out.isatty()
        self._last = 0.0

    def __call__(self, loop: HostLoop) -> None:
        now = time.perf_counter()
        if now - self._last < self.every_s:
            return
        self._last = now
        y = loop.y
        s = loop.session.stats() if loop.session is not None else {}
        bad = s.get("crc_errors", 0) + s.get("bad_frames", 0)
        text = (f"t={y[L.Y_TIME_S]:6.2f}s  n={y[L.Y_SPEED_RPM]:7.1f} r/min (ref {loop.operator.speed_ref_rpm:6.1f})"
                f"  Ia={y[L.Y_IA_MEAN_A]:7.1f} A  If={y[L.Y_IF_A]:5.2f} A  Va={y[L.Y_VT_MEAN_V]:6.1f} V"
                f"  alpha={y[L.Y_LAST_FIRE_ANGLE_DEG]:5.1f}  link {'LOST' if loop._link_lost else 'ok'}"
                f" bad={bad} missed={loop.stats.missed_commands} late={loop.stats.deadline_misses}"
                f"{'  TRIP ' + trip_label(loop.last_cmd.trip_code) if loop.last_cmd.trip else ''}")
        if self.tty:
            self.out.write("\r" + text[:150].ljust(150))
        else:
            self.out.write(text + "\n")
        self.out.flush()

    def close(self) -> None:
        if self.tty:
            self.out.write("\n")
            self.out.flush()


def settling_report(rows: np.ndarray, t_from: float, t_to: float, band: float = 0.01) -> dict:
    """Speed error against the operator reference over [t_from, t_to]: final error, and the time
    after which the error stays within band x reference."""
    t = rows[:, R["time_s"]]
    sel = (t >= t_from) & (t <= t_to)
    if not np.any(sel):
        return {}
    n = rows[sel, R["speed_rpm"]]
    ref = rows[sel, R["op_speed_ref_rpm"]]
    err = np.abs(n - ref)
    tol = band * np.maximum(np.abs(ref), 1.0)
    outside = np.nonzero(err > tol)[0]
    ts = t[sel]
    settled_at = ts[outside[-1] + 1] if len(outside) and outside[-1] + 1 < len(ts) else (ts[0] if not len(outside) else math.nan)
    return {"final_error_rpm": float(n[-1] - ref[-1]), "settled_at_s": float(settled_at),
            "max_error_rpm_after_settling": float(np.max(err[outside[-1] + 1:])) if len(outside) and outside[-1] + 1 < len(ts) else float(np.max(err))}


def write_outputs(loop: HostLoop, out_dir: Path, title: str, plot: bool = True) -> dict:
    out_dir.mkdir(parents=True, exist_ok=True)
    rows = loop.rows()
    rec = out_dir / "frames.csv"
    with rec.open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(REC_COLUMNS)
        for r in rows:
            w.writerow([f"{v:.6g}" for v in r])
    ev = out_dir / "events.csv"
    with ev.open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["time_s", "kind", "text"])
        for e in loop.events:
            w.writerow([f"{e[0]:.6f}", e[1], e[2]])
    files = {"frames": rec, "events": ev}
    if plot:
        files["plot"] = out_dir / "run.png"
        plot_run(rows, files["plot"], title)
    return files


def plot_run(rows: np.ndarray, path: Path, title: str) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    t = rows[:, R["time_s"]]
    fig, ax = plt.subplots(4, 1, sharex=True, figsize=(9, 9))
    ax[0].plot(t, rows[:, R["speed_rpm"]], label="speed")
    ax[0].plot(t, rows[:, R["op_speed_ref_rpm"]], "--", label="operator reference")
    ax[0].set_ylabel("r/min")
    ax[1].plot(t, rows[:, R["armature_current_A"]], lw=0.8, label="armature current (frame mean)")
    ax[1].set_ylabel("A")
    a1 = ax[1].twinx()
    a1.plot(t, rows[:, R["field_current_A"]], color="tab:green", label="field current")
    a1.set_ylabel("field A")
    a1.legend(loc="lower right", fontsize=8)
    ax[2].plot(t, rows[:, R["terminal_voltage_V"]], lw=0.8, label="armature voltage (frame mean)")
    ax[2].plot(t, rows[:, R["emf_V"]], label="EMF")
    ax[2].set_ylabel("V")
    ax[3].plot(t, rows[:, R["firing_angle_deg"]], label="firing angle")
    ax[3].set_ylabel("deg")
    ax[3].set_xlabel("model time (s)")
    for a in ax:
        a.grid(True, alpha=0.3)
        a.legend(loc="upper right", fontsize=8)
    fig.suptitle(title)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def summary_lines(loop: HostLoop, timeline: Timeline, wall_s: float) -> list[str]:
    rows = loop.rows()
    lines = []
    if len(rows) == 0:
        return ["no frames were run"]
    t = rows[:, R["time_s"]]
    lines.append(f"frames {loop.stats.frames} ({t[-1]:.2f} s model time) in {wall_s:.2f} s wall "
                 f"= {t[-1] / wall_s:.1f} x real time; commands {loop.stats.commands}, "
                 f"frames without command {loop.stats.missed_commands}, link-loss events {loop.stats.link_loss_events}")
    work = rows[:, R["host_work_us"]]
    lines.append(f"host work per frame: median {np.median(work):.0f} us, p99 {np.percentile(work, 99):.0f} us "
                 f"(decode + {loop.n_sub} model steps + record + encode)")
    lines.append(f"peak armature current {np.max(np.abs(rows[:, R['armature_current_peak_A']])):.0f} A, "
                 f"peak speed {np.max(np.abs(rows[:, R['speed_rpm']])):.0f} r/min, "
                 f"end temperature {rows[-1, R['armature_temperature_C']]:.1f} C")
    refs = [s for s in timeline.steps if s.what == "speed_ref_rpm" and s.value > 0]
    loads = [s for s in timeline.steps if s.what == "load_torque_Nm" and s.value > 0]
    if refs:
        t_end = loads[0].t_s if loads else t[-1]
        rep = settling_report(rows, refs[0].t_s, t_end)
        if rep:
            lines.append(f"speed to {refs[0].value:g} r/min: within 1 % from {rep['settled_at_s']:.2f} s, "
                         f"error before the load step {rep['final_error_rpm']:+.2f} r/min")
    if loads:
        nxt = [s.t_s for s in timeline.steps if s.t_s > loads[0].t_s]
        rep = settling_report(rows, loads[0].t_s, nxt[0] if nxt else t[-1])
        if rep:
            sel = (t >= loads[0].t_s) & (t <= (nxt[0] if nxt else t[-1]))
            dip = np.min(rows[sel, R["speed_rpm"]] - rows[sel, R["op_speed_ref_rpm"]])
            lines.append(f"load step {loads[0].value:.0f} N m at {loads[0].t_s:g} s: speed dip {dip:+.1f} r/min, "
                         f"back within 1 % at {rep['settled_at_s']:.2f} s")
    status = 0
    for s_ in rows[:, R["model_status"]].astype(int):
        status |= s_
    flags = [name for bit, name in L.ST_NAMES.items() if status & bit]
    if loop.stats.overspeed_frames:
        flags.append(f"overspeed ({loop.stats.overspeed_frames} frames above {loop.overspeed_rpm:.0f} r/min)")
    lines.append(f"model flags seen: {', '.join(flags) if flags else 'none'}")
    if loop.session is not None:
        lines.append("link: " + link_health(loop))
    trips = [e for e in loop.events if e[1] == "trip"]
    lines.append("controller trips: " + ("; ".join(f"{e[2]} at {e[0]:.3f} s" for e in trips) if trips else "none"))
    lines.extend(harm_lines(loop))
    return lines


def link_health(loop: HostLoop) -> str:
    """Every detected link error and refused command by class, the same counts as the events
    and the frame record's link_errors / refused_commands columns."""
    counts = loop.link_error_counts()
    errs = {k: v for k, v in counts.items() if not k.startswith("refused_")}
    refused = {k[8:]: v for k, v in counts.items() if k.startswith("refused_")}
    n_err = sum(errs.values())
    text = f"{n_err} errors detected" + (f" ({', '.join(f'{k} {v}' for k, v in errs.items() if v)})" if n_err else "")
    n_ref = sum(refused.values())
    text += f"; commands refused {n_ref}" + (f" ({', '.join(f'{k} {v}' for k, v in refused.items() if v)})" if n_ref else "")
    st = loop.stats
    text += f"; firing angles at the end stop {st.end_stop_commands}; new handshakes {st.rehandshakes}"
    if st.watchdog_resets:
        text += f"; watchdog resets {st.watchdog_resets}"
    if st.run_invalid:
        text += f"; RUN INVALID: {st.run_invalid}"
    return text
def harm_lines(loop: HostLoop) -> list[str]:
    """The machine-harm checks (host.verdict.harm) on this run's frames: on in every closed-loop
    run, whatever the controller reported."""
    from .scenario.run import harm_limits
    from .verdict import harm_checks

    meta = {"frame_period_s": loop.frame_period_us * 1e-6, "harm": harm_limits(loop.plant)}
    flagged = [h for h in harm_checks(loop.rows(), REC_COLUMNS, meta) if h.flagged]
    if not flagged:
        return ["machine-harm checks: none flagged (commutation limit, overspeed, field loss while "
                "energised, winding temperature, armature overvoltage, current rise rate)"]
    return [f"machine-harm checks: {len(flagged)} FLAGGED"] + [f"  HARM {h.check}: {h.text}" for h in flagged]


def send_bye(session) -> None:
    try:
        session.send_control(sig.CTRL_BYE)
    except Exception:  # the peer may be gone already; nothing to save
        pass


def run_closed_loop(plant, link, *, encoding: str, paced: bool, timeline: Timeline, out_dir=None,
                    watchdog_periods: int = 10, on_link_loss: str = "block", handshake_timeout_s: float = 20.0,
                    plot: bool = True, out=None, command_timeout_s: float = 2.0,
                    peer_timeout_s: float = 5.0, max_error_rate: float | None = 0.01,
                    run_dir=None, meta: dict | None = None, extra_configs: dict | None = None,
                    peer_exit=None) -> HostLoop:
    """Handshake on `link`, run the timeline lockstep or paced, print the summary, keep the record.

    run_dir: a run folder made by host.record.new_run_dir (the command makes it before the
    run starts, so a bad folder is refused first); out_dir: a folder asked for, from which a
    new run folder is made here (out_dir itself, or out_dir-2, -3, ... when taken). Every
    frame and event goes to run_dir/record.sqlite as the run goes; frames.csv, events.csv and
    run.png are exported from the record at the end, also after Ctrl-C or a link error.
    peer_exit: the poll() of a controller process this host started (the demo): its death
    before the handshake ends the wait at once.
    """
    out = out if out is not None else sys.stdout  # looked up per call (tests swap sys.stdout)
    from .link import HostSession
    from .loop import HostLoop
    from .record import new_run_dir
    from .recording import end_status, export_closed_loop, open_run_record

    if run_dir is None and out_dir is not None:
        out_dir = Path(out_dir)
        run_dir = new_run_dir(out_dir.parent, out_dir.name)
    period_us = int(round(plant.derived["frame_period_us"]))
    n_frames = int(timeline.end_s / (period_us * 1e-6)) + 1
    recorder = None
    if run_dir is not None:
        run_meta = {"run_kind": "closed_loop", "link": str(getattr(link, "url", link)), "encoding": encoding,
                    "paced": paced, "frame_period_us": period_us, "watchdog_periods": watchdog_periods,
                    "on_link_loss": on_link_loss,
                    "timeline": [[st.t_s, st.what, st.value] for st in timeline.steps]}
        run_meta.update(meta or {})
        recorder = open_run_record(Path(run_dir), REC_COLUMNS, plant, run_meta, extra_configs)
    stopped = None
    try:
        session = HostSession(link, encoding=encoding, frame_period_us=period_us)
        loop = HostLoop(plant, session, period_us, watchdog_periods=watchdog_periods, on_link_loss=on_link_loss,
                        max_error_rate=max_error_rate, recorder=recorder)
        peer = session.handshake(timeout_s=handshake_timeout_s, peer_exit=peer_exit)
        if hasattr(link, "release_peer_hold"):
            link.release_peer_hold()  # a pty: the controller holds its end now; its death closes the cable
    except BaseException as err:  # no run: the record says why, the error goes on
        if recorder is not None:
            recorder.event(0.0, "link", f"no run: {err.__class__.__name__}: {err}")
            recorder.close(end_status(err))
        raise
    supply = plant.converter["converter.name"] if plant.converter else "DC source"
    print(f"{plant.machine['machine.name']} on {supply}; controller on {link.url} (protocol "
          f"{peer.protocol_version}, {encoding}); frame {period_us} us = {loop.n_sub} model steps of "
          f"{loop.p[L.P_DT_S] * 1e6:.2f} us; {'paced real time' if paced else 'lockstep'}", file=out)
    if run_dir is not None:
        print(f"recording to {run_dir}", file=out)
    loop.event("link", f"handshake: protocol {peer.protocol_version}, {encoding}, frame {period_us} us")
    loop.hooks.append(timeline)
    status = StatusLine(out)
    t0 = time.perf_counter()
    try:
        if paced:
            loop.run_paced(n_frames, on_frame=status)
        else:
            loop.run_lockstep(n_frames, on_frame=status, command_timeout_s=command_timeout_s,
                              peer_timeout_s=peer_timeout_s, handshake_timeout_s=handshake_timeout_s)
    except (KeyboardInterrupt, DcrigError) as err:
        # keep what was recorded: summary and files first, then the error goes on
        stopped = err
        loop.event("host", f"run stopped early: {err.__class__.__name__}: {err}".rstrip(": "))
    finally:
        wall = time.perf_counter() - t0
        status.close()
        send_bye(session)
        counters = {"frames": loop.stats.frames, "commands": loop.stats.commands,
                    "missed_commands": loop.stats.missed_commands,
                    "link_loss_events": loop.stats.link_loss_events,
                    "deadline_misses": loop.stats.deadline_misses, "wall_s": wall}
        try:
            counters.update({f"link_{k}": v for k, v in session.stats().items()})
        except Exception:  # a half-built session has no stats; the loop's counters still go in
            pass
        if recorder is not None:
            loop.event("counters", "end-of-run counters", **counters)
            if recorder.dropped:
                print(f"  warning: the recorder dropped {recorder.dropped} frames (the disk did not keep up)", file=out)
            try:
                recorder.close(end_status(stopped))
            except DcrigError as err:  # the disk failed: say so, still print the summary
                print(f"error: {err}", file=out)
                stopped = stopped or err
    print("\nsummary" + (" (run stopped early)" if stopped else ""), file=out)
    for line in summary_lines(loop, timeline, wall):
        print("  " + line, file=out)
    if paced and loop.stats.jitter_ns is not None and len(loop.stats.jitter_ns):
        j = jitter_table(loop.stats.jitter_ns)
        print(f"  paced: frame start lateness median {j['median_us']:.0f} us, p99 {j['p99_us']:.0f} us, "
              f"max {j['max_us']:.0f} us; deadline misses {loop.stats.deadline_misses}", file=out)
        print(f"  granted: {', '.join(f'{k} {v}' for k, v in loop.stats.granted.items() if not k.endswith('_before'))}", file=out)
    if run_dir is not None:
        files = export_closed_loop(Path(run_dir), plant.machine["machine.name"] + " - closed loop", plot, out)
        print(f"  files: {', '.join(str(f) for f in files.values())}", file=out)
        if stopped is not None:
            print(f"  the record keeps every frame up to the stop: {run_dir / 'record.sqlite'} "
                  f"(status {end_status(stopped).split(':')[0]})", file=out)
    if stopped is not None:
        raise stopped
    return loop
