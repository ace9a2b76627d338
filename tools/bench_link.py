"""Speed of the closed loop over the virtual cable: echo anchor, lockstep rate, host work, paced
jitter, and the wire limits of the frame sizes; printed as markdown tables with a verdict.

Owns nothing but the measurement; it is a script (never imported by host, imports nothing from
tools/). Everything runs over host.link.VirtualCable (a pseudo-terminal pair) with the peer in
a separate process, so host and peer never share one interpreter lock:

  * echo anchor: a peer process echoes raw bytes; the host sends wire frames of the feedback
    frame's size and waits for each to come back (round trips per second, best of 3 runs),
  * lockstep: `python -m host.cli controller --link SLAVE --settings SETTINGS` against
    host.loop.HostLoop on the F3 stand (dual bridge), both encodings: frames per second,
    host work per frame from the record column host_work_us (command applied -> model ->
    record) and from our own timer (command bytes read -> feedback bytes written),
  * paced: the same at a 1 kHz frame for --paced-seconds (default 60): frame start lateness
    percentiles, deadline misses, host work,
  * wire limits: baud / (10 x wire bytes) at 115200, 921600 and 3 M baud for the command and
    feedback frames in both encodings, sizes taken from the codec's actual output.

Targets (from the issue): lockstep >= 80 % of the echo rate; host work per frame p99 < 100 us;
no deadline miss at 1 kHz on an idle machine. No numbers are asserted anywhere.

Usage:
    PYTHONPATH=. python tools/bench_link.py                  # full: 60 s paced run
    PYTHONPATH=. python tools/bench_link.py --quick          # a few seconds (smoke test)
Options: --paced-seconds S, --frames N (lockstep frames), --echo N (round trips per run),
         --settings SETTINGS.toml.

Caution: the emulated controller is for a test bench; never point it at a port wired to a
live power converter.
"""

from __future__ import annotations

import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from host import signals as S  # noqa: E402
from host.config import load  # noqa: E402
from host.errors import DcrigError  # noqa: E402
from host.link import Codec, HostSession, VirtualCable, cobs_encode, crc16  # noqa: E402
from host.link.frames import ENC_FIXED, ENC_FLOAT32, ENCODING_NAMES  # noqa: E402
from host.params import pack  # noqa: E402
from host.shipped import shipped_config  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_model import cpu_model, load_avg  # noqa: E402  (shared report helpers)

MACHINE = shipped_config("machines/kestrel_f3_stand.toml")
CONVERTER = shipped_config("converters/kestrel_f3_dual.toml")
SETTINGS = shipped_config("controllers/kestrel_f3_dual.toml")
BAUDS = (115_200, 921_600, 3_000_000)
TARGET_LOCKSTEP_OF_ECHO = 0.80
TARGET_WORK_P99_US = 100.0
TARGET_LEAN_P99_US = 50.0  # issue 12: the lean real-time path, bytes in -> bytes out, p99
PACED_PERIOD_US = 1000
WARMUP_FRAMES = 20
NAN = float("nan")

# the echo peer: raw bytes back as they come, nothing else (the cheapest possible peer)
_ECHO = r"""
import os, select, sys
fd = os.open(sys.argv[1], os.O_RDWR | os.O_NOCTTY)  # the cable set raw mode already
while True:
    r, _, _ = select.select([fd], [], [], 10.0)
    if not r:
        break
    try:
        data = os.read(fd, 4096)
    except OSError:
        break
    if not data:
        break
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]
"""


def _env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _stop(proc: subprocess.Popen, timeout_s: float = 10.0) -> None:
    try:
        proc.wait(timeout=timeout_s)
    except subprocess.TimeoutExpired:
        proc.kill()  # only the child this script started
        proc.wait(timeout=timeout_s)


def typical_feedback() -> S.Feedback:
    return S.Feedback(seq=1234, ack_seq=1233, model_time_us=4_200_000, armature_current_A=832.5,
                      field_current_A=17.95, armature_voltage_V=436.2, tacho_voltage_V=29.8,
                      encoder_count=1_234_567, mains_angle_deg=123.4, mains_voltage_V=415.0,
                      contactor_closed=1, host_status=0, op_run=1, op_speed_ref_rpm=500.0)


def typical_command() -> S.Command:
    return S.Command(seq=1233, mode=S.MODE_FIRING_ANGLE, bridge_select=S.BRIDGE_FORWARD, armature_cmd=38.7,
                     field_mode=S.FIELD_MODE_FIRING_ANGLE, field_cmd=95.2, contactor=1)


# ------------------------------------------------------------------------------- frame sizes
def frame_sizes() -> list[dict]:
    """Byte counts of the periodic frames as the codec actually writes them."""
    out = []
    for enc in (ENC_FIXED, ENC_FLOAT32):
        codec = Codec(enc)
        for kind, payload in (("command", codec.pack_command(typical_command())),
                              ("feedback", codec.pack_feedback(typical_feedback()))):
            with_crc = payload + crc16(payload).to_bytes(2, "little")
            stuffed = cobs_encode(with_crc)
            out.append({"frame": kind, "encoding": ENCODING_NAMES[enc], "payload": len(payload),
                        "crc": 2, "cobs": len(stuffed) - len(with_crc), "delim": 1, "wire": len(stuffed) + 1})
    return out


# ------------------------------------------------------------------------------- echo anchor
def echo_rate(n: int, runs: int = 3) -> tuple[float, int]:
    """Best round trips per second over `runs` runs of n round trips; also the frame's wire size."""
    payload = Codec(ENC_FIXED).pack_feedback(typical_feedback())
    best = 0.0
    with VirtualCable() as cable:
        proc = subprocess.Popen([sys.executable, "-c", _ECHO, cable.slave_path], env=_env(), cwd=str(ROOT))
        try:
            with cable.host_link() as link:
                deadline = time.perf_counter() + 30.0
                while True:  # the peer needs time to start: knock until it answers
                    link.send_frame(payload)
                    if link.recv_frame(0.25) is not None:
                        break
                    if time.perf_counter() > deadline:
                        raise DcrigError("echo peer: no echo within 30 s")
                time.sleep(0.3)
                while link.recv_frame(0.05) is not None:  # echoes of the knocks
                    pass
                for _ in range(runs):
                    t0 = time.perf_counter_ns()
                    for _ in range(n):
                        link.send_frame(payload)
                        if link.recv_frame(2.0) is None:
                            raise DcrigError("echo peer: an echo did not come back within 2 s")
                    rate = n / ((time.perf_counter_ns() - t0) * 1e-9)
                    best = max(best, rate)
        finally:
            _stop(proc)
    return best, len(cobs_encode(payload + crc16(payload).to_bytes(2, "little"))) + 1


# ------------------------------------------------------------------------------- closed loop
class FrameTimer:
    """Our own timer around one host frame: from the read that brought the command bytes to the
    end of the write of the next feedback (deframe, CRC, decode, model, record, encode, write).
    Takes the wall clock and this thread's CPU time: on a shared machine the difference is time
    the host was runnable but not on a CPU. Wraps the instances' methods; classes stay untouched."""

    def __init__(self, link, session, clock=time.perf_counter_ns, cpu_clock=time.thread_time_ns):
        self.t_rx = None
        self.c_rx = 0
        self.wall_ns: list[int] = []
        self.cpu_ns: list[int] = []
        self.enabled = False
        read_raw = link._read_raw
        send_feedback = session.send_feedback

        def _read(max_bytes, timeout_s):
            data = read_raw(max_bytes, timeout_s)
            if data:
                self.t_rx = clock()
                self.c_rx = cpu_clock()
            return data

        def _send(fb):
            seq = send_feedback(fb)
            if self.enabled and self.t_rx is not None:
                self.wall_ns.append(clock() - self.t_rx)
                self.cpu_ns.append(cpu_clock() - self.c_rx)
            self.t_rx = None
            return seq

        link._read_raw = _read
        session.send_feedback = _send


def drive_timeline(plant):
    """Run, rated speed, 0.6 pu load at 6 s; the drive then keeps running (no stop)."""
    from host.runner import Timeline, TimelineStep

    return Timeline([
        TimelineStep(0.1, "run"),
        TimelineStep(0.1, "speed_ref_rpm", 0.0),
        TimelineStep(0.6, "speed_ref_rpm", plant.machine["machine.rated_speed_rpm"]),
        TimelineStep(6.0, "load_torque_Nm", 0.6 * plant.derived["rated_torque_Nm"]),
    ])  # fmt: skip


def closed_loop(encoding: str, n_frames: int, period_us: int | None, paced: bool, settings: Path) -> dict:
    """One session against the emulated controller process; returns the measurements."""
    from host.loop import R, HostLoop, jitter_table
    from host.runner import send_bye

    plant = pack(load("machine", MACHINE), load("converter", CONVERTER))
    period = period_us or int(round(plant.derived["frame_period_us"]))
    res: dict = {"encoding": encoding, "period_us": period}
    with VirtualCable() as cable, cable.host_link() as link:
        session = HostSession(link, encoding=encoding, frame_period_us=period)
        # HostLoop makes the first kernel call (a compile when the numba cache is stale):
        # before the controller starts, so its handshake timeout cannot run out meanwhile
        loop = HostLoop(plant, session, period, record_rows=n_frames + WARMUP_FRAMES + 8)
        timer = FrameTimer(link, session)
        # the kernel's share of a frame, timed in the same run (one clock pair per frame)
        kernel_ns: list[int] = []
        step = loop._step

        def timed_step(x, p, u, y, n_sub):
            t = time.perf_counter_ns()
            st = step(x, p, u, y, n_sub)
            if timer.enabled:
                kernel_ns.append(time.perf_counter_ns() - t)
            return st

        loop._step = timed_step
        proc = subprocess.Popen(
            [sys.executable, "-m", "host.cli", "controller", "--link", cable.slave_path,
             "--settings", str(settings), "--quiet", "--idle-timeout", "30"],
            env=_env(), cwd=str(ROOT),
        )  # fmt: skip
        try:
            session.handshake(timeout_s=60.0)
            loop.hooks.append(drive_timeline(plant))
            stamps = np.zeros(n_frames + WARMUP_FRAMES, dtype=np.int64)
            count = [0]

            def on_frame(lp):
                k = count[0]
                if k < len(stamps):
                    stamps[k] = time.perf_counter_ns()
                count[0] = k + 1
                if k + 1 == WARMUP_FRAMES:
                    timer.enabled = True

            try:
                if paced:
                    loop.run_paced(n_frames, on_frame=on_frame, realtime=True)
                else:
                    loop.run_lockstep(n_frames + WARMUP_FRAMES, on_frame=on_frame, command_timeout_s=2.0)
            finally:
                send_bye(session)
                # let the controller finish its backlog and leave before our end closes
                _stop(proc, 20.0)
            rows = loop.rows()
            res["frames"] = loop.stats.frames
            res["n_sub"] = loop.n_sub
            res["missed_commands"] = loop.stats.missed_commands
            res["link_loss_events"] = loop.stats.link_loss_events
            trips = [e for e in loop.events if e[1] == "trip"]
            res["trips"] = len(trips)
            work = rows[WARMUP_FRAMES:, R["host_work_us"]] if not paced else rows[:, R["host_work_us"]]
            if len(work):
                res["work_median_us"] = float(np.median(work))
                res["work_p99_us"] = float(np.percentile(work, 99))
                res["work_max_us"] = float(np.max(work))
            if not paced:
                done = min(count[0], len(stamps))
                if done > WARMUP_FRAMES:
                    span = (stamps[done - 1] - stamps[WARMUP_FRAMES - 1]) * 1e-9
                    res["rate_hz"] = (done - WARMUP_FRAMES) / span
                for key, samples in (("own", timer.wall_ns), ("cpu", timer.cpu_ns)):
                    a = np.asarray(samples, dtype=float) * 1e-3
                    if len(a):
                        res[f"{key}_median_us"] = float(np.median(a))
                        res[f"{key}_p99_us"] = float(np.percentile(a, 99))
                        res[f"{key}_max_us"] = float(np.max(a))
                if kernel_ns:
                    k = np.asarray(kernel_ns, dtype=float) * 1e-3
                    res["kernel_median_us"] = float(np.median(k))
                    res["kernel_p99_us"] = float(np.percentile(k, 99))
            else:
                res["jitter"] = jitter_table(loop.stats.jitter_ns)
                res["deadline_misses"] = loop.stats.deadline_misses
                res["granted"] = {k: v for k, v in loop.stats.granted.items() if not k.endswith("_before")}
            res["speed_rpm"] = float(rows[-1, R["speed_rpm"]]) if len(rows) else float("nan")
        finally:
            _stop(proc)
    return res


# ------------------------------------------------------------------------------- report
def md(head, rows) -> str:
    out = ["| " + " | ".join(head) + " |", "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(str(c).replace("|", "/") for c in r) + " |" for r in rows]
    return "\n".join(out)


def _rate(v: float) -> str:
    return f"{v:,.0f}/s"


def main(argv=None) -> int:
    import argparse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="short runs (2 s paced) for smoke tests")
    ap.add_argument("--paced-seconds", type=float, default=None, help="paced 1 kHz run length (default 60, quick 2)")
    ap.add_argument("--frames", type=int, default=None, help="lockstep frames per encoding (default 3000, quick 200)")
    ap.add_argument("--echo", type=int, default=None, help="echo round trips per run (default 5000, quick 300)")
    ap.add_argument("--settings", default=str(SETTINGS), help="emulated controller settings")
    args = ap.parse_args(argv)
    paced_s = args.paced_seconds if args.paced_seconds is not None else (2.0 if args.quick else 60.0)
    n_lock = args.frames if args.frames is not None else (200 if args.quick else 3000)
    n_echo = args.echo if args.echo is not None else (300 if args.quick else 5000)
    if paced_s <= 0 or n_lock < 1 or n_echo < 1:
        print("error: --paced-seconds, --frames and --echo must be positive", file=sys.stderr)
        return 2
    settings = Path(args.settings)
    if not settings.is_file():
        print(f"error: {settings}: --settings: file not found", file=sys.stderr)
        return 2

    load_before = load_avg()
    try:
        sizes = frame_sizes()
        echo_hz, echo_bytes = echo_rate(n_echo)
        lock = [closed_loop(enc, n_lock, None, False, settings) for enc in ("fixed", "float32")]
        paced = closed_loop("fixed", int(round(paced_s * 1e6 / PACED_PERIOD_US)), PACED_PERIOD_US, True, settings)
    except DcrigError as err:
        print(f"error: {err}", file=sys.stderr)
        return 2

    head = ("measurement", "encoding", "frames", "result", "host work median / p99 / max (us)", "notes")
    rows = [("pty echo anchor (peer process echoes raw bytes)", "fixed", f"{n_echo} x 3 runs",
             _rate(echo_hz), "-", f"{echo_bytes}-byte wire frames (feedback size); best of 3 runs")]
    for r in lock:
        work = "; ".join(
            f"{r.get(k + '_median_us', NAN):.0f} / {r.get(k + '_p99_us', NAN):.0f} / {r.get(k + '_max_us', NAN):.0f} ({what})"
            for k, what in (("work", "record column"), ("own", "bytes in -> bytes out, wall"),
                            ("cpu", "bytes in -> bytes out, CPU time")))
        rate = r.get("rate_hz", float("nan"))
        rows.append((f"lockstep with the emulated controller process ({r['period_us']} us frame, "
                     f"{r['n_sub']} steps)", r["encoding"], f"{r['frames'] - WARMUP_FRAMES} (+{WARMUP_FRAMES} warm-up)",
                     f"{_rate(rate)} = {rate / echo_hz:.0%} of echo", work,
                     f"one frame {1e6 / rate:.0f} us = host {r.get('own_median_us', NAN):.0f} us (median) + cable and "
                     f"controller process {1e6 / rate - r.get('own_median_us', NAN):.0f} us (the echo round trip alone "
                     f"is {1e6 / echo_hz:.0f} us); "
                     f"{r['frames'] * r['period_us'] * 1e-6:.1f} s model time, {rate * r['period_us'] * 1e-6:.1f}x real "
                     f"time; kernel call median {r.get('kernel_median_us', NAN):.1f} us, p99 "
                     f"{r.get('kernel_p99_us', NAN):.1f} us (inside the host's share); "
                     f"commands missed {r['missed_commands']}, trips {r['trips']}, end speed {r['speed_rpm']:.0f} r/min"))
    j = paced.get("jitter") or {}
    rows.append((f"paced {1e6 / PACED_PERIOD_US:.0f} Hz ({paced['n_sub']} steps/frame), {paced_s:g} s",
                 "fixed", paced["frames"],
                 f"lateness median {j.get('median_us', float('nan')):.0f} / p99 {j.get('p99_us', float('nan')):.0f} / "
                 f"p99.9 {j.get('p999_us', float('nan')):.0f} / max {j.get('max_us', float('nan')):.0f} us; "
                 f"deadline misses {paced['deadline_misses']}",
                 f"{paced.get('work_median_us', float('nan')):.0f} / {paced.get('work_p99_us', float('nan')):.0f} / "
                 f"{paced.get('work_max_us', float('nan')):.0f} (record column)",
                 f"frames without a fresh command {paced['missed_commands']}, link-loss events "
                 f"{paced['link_loss_events']}; {'; '.join(f'{v}' for v in paced['granted'].values())}"))

    size_head = ("frame", "encoding", "header+body B", "+CRC B", "+COBS B", "+delimiter B", "wire B",
                 *(f"limit at {b:,} baud" for b in BAUDS))
    size_rows = []
    for s in sizes:
        size_rows.append((s["frame"], s["encoding"], s["payload"], s["crc"], s["cobs"], s["delim"], s["wire"],
                          *(_rate(b / (10 * s["wire"])) for b in BAUDS)))
    for enc in ("fixed", "float32"):
        both = sum(s["wire"] for s in sizes if s["encoding"] == enc)
        size_rows.append(("lockstep round trip (feedback then command, one line)", enc, "-", "-", "-", "-", both,
                          *(_rate(b / (10 * both)) for b in BAUDS)))

    print(f"dcrig link speed over the virtual cable (pty pair) - {cpu_model()}, {os.cpu_count()} logical CPUs; "
          f"Python {platform.python_version()}; load average before {load_before}, after {load_avg()}")
    print("Peers run as separate processes. Single runs except the echo anchor (best of 3); the machine may be "
          "shared, so rates and tails are noisy." + (" QUICK mode: short runs, indicative only." if args.quick else ""))
    print()
    print(md(head, rows))
    print()
    print("Frame sizes (from the codec's actual output) and the wire limit baud / (10 x wire bytes), 8N1:")
    print()
    print(md(size_head, size_rows))
    print()
    ok1 = all(r.get("rate_hz", 0.0) >= TARGET_LOCKSTEP_OF_ECHO * echo_hz for r in lock)
    print(f"target lockstep >= {TARGET_LOCKSTEP_OF_ECHO:.0%} of the echo rate: "
          + ", ".join(f"{r['encoding']} {r.get('rate_hz', 0.0) / echo_hz:.0%}" for r in lock)
          + f" -> {'MET' if ok1 else 'NOT MET'}")
    wall_p99 = max(r.get("own_p99_us", NAN) for r in lock)
    cpu_p99 = max(r.get("cpu_p99_us", NAN) for r in lock)
    print(f"target host work per frame p99 < {TARGET_WORK_P99_US:.0f} us (lockstep, bytes in -> bytes out): wall "
          + ", ".join(f"{r['encoding']} {r.get('own_p99_us', NAN):.0f} us" for r in lock)
          + f" -> {'MET' if wall_p99 < TARGET_WORK_P99_US else 'NOT MET'}; CPU time "
          + ", ".join(f"{r['encoding']} {r.get('cpu_p99_us', NAN):.0f} us" for r in lock)
          + f" -> {'met' if cpu_p99 < TARGET_WORK_P99_US else 'not met'} (wall minus CPU = time off the CPU)")
    lean = wall_p99 <= TARGET_LEAN_P99_US
    r0 = min(lock, key=lambda r: r.get("own_p99_us", NAN))
    print(f"target (issue 12) lean real-time path p99 <= {TARGET_LEAN_P99_US:.0f} us, bytes in -> bytes out, "
          f"beside the pty echo round trip of {1e6 / echo_hz:.0f} us in this run: wall "
          + ", ".join(f"{r['encoding']} {r.get('own_p99_us', NAN):.0f} us" for r in lock)
          + f" -> {'MET' if lean else 'NOT MET'}"
          + ("" if lean else
             f"; where the median {r0.get('own_median_us', NAN):.0f} us ({r0['encoding']}) goes: the kernel call "
             f"{r0.get('kernel_median_us', NAN):.0f} us, the rest (deframe, decode, apply, record, encode, write) "
             f"{r0.get('own_median_us', NAN) - r0.get('kernel_median_us', NAN):.0f} us of Python and system calls"))
    load_end = os.getloadavg()[0] if hasattr(os, "getloadavg") else 0.0
    print(f"target no deadline miss at 1 kHz on an idle machine: {paced['deadline_misses']} misses in "
          f"{paced['frames']} frames -> {'MET' if paced['deadline_misses'] == 0 else 'NOT MET'}"
          f" (1-minute load average at the end {load_end:.2f}: "
          f"{'NOT an idle machine, so this verdict is not the target condition' if load_end > 0.5 else 'idle'})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
