"""Speed of the run record: store candidates, sustained per-step recording, and the host's
per-frame time with recording on and off, side by side in one run. Prints markdown tables.

    PYTHONPATH=. python tools/bench_record.py            # ~1 min
    PYTHONPATH=. python tools/bench_record.py --quick    # seconds (smoke test)

1. Store candidates, written the way the recorder writes (one commit per 50 ms of rows at a
   per-step rate of 50,000 rows/s, i.e. 2,500 rows a commit; 24 and 64 float64 columns):
   * SQLite WAL, one blob per block of rows (what host.record.store does), synchronous FULL
     and NORMAL,
   * SQLite WAL, one table row per frame (a REAL column per value), synchronous NORMAL,
   * an append-only raw file per chunk (write + fsync per commit; the home-made format the
     issue says to avoid, as the anchor of what the disk allows).
   Rows per second and milliseconds per commit (median, max) for each.
2. The recorder end to end (host.record.RunRecorder): a producer offers rows at a per-step
   rate on the wall clock for a few seconds; rows kept, rows dropped, the hand-off time.
3. HostLoop frame time, recording off / on, interleaved (HostLoop hands rows over with
   RunRecorder.publish: no copy, one tuple store): lockstep against the emulated
   controller process over the virtual cable (as tools/bench_link.py), our timer from the
   command bytes read to the feedback bytes written, median / p99 / p99.9, the difference
   on/off, and the hand-off call alone. Target (issue 9): at most +10 us on the p99.
No numbers are asserted anywhere (project rule).
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_model import cpu_model, load_avg  # noqa: E402  (shared report helpers)


def md(head, rows) -> str:
    out = ["| " + " | ".join(head) + " |", "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(str(c) for c in r) + " |" for r in rows]
    return "\n".join(out)


# ------------------------------------------------------------------ 1. store candidates
def _sqlite_blob(path, n_cols, chunks, sync):
    db = sqlite3.connect(path, isolation_level=None)
    db.execute("PRAGMA journal_mode=WAL")
    db.execute(f"PRAGMA synchronous={sync}")
    db.execute("CREATE TABLE b(first_row INTEGER PRIMARY KEY, n INTEGER, t0 REAL, t1 REAL, data BLOB)")
    first = 0
    times = []
    for c in chunks:
        t = time.perf_counter()
        db.execute("BEGIN")
        db.execute("INSERT INTO b VALUES (?,?,?,?,?)", (first, len(c), c[0, 0], c[-1, 0], c.tobytes()))
        db.execute("COMMIT")
        times.append(time.perf_counter() - t)
        first += len(c)
    db.close()
    return times


def _sqlite_rows(path, n_cols, chunks, sync):
    db = sqlite3.connect(path, isolation_level=None)
    db.execute("PRAGMA journal_mode=WAL")
    db.execute(f"PRAGMA synchronous={sync}")
    cols = ", ".join(f"c{i} REAL" for i in range(n_cols))
    db.execute(f"CREATE TABLE f(row INTEGER PRIMARY KEY, {cols})")
    ins = f"INSERT INTO f VALUES (?, {', '.join('?' for _ in range(n_cols))})"
    first = 0
    times = []
    for c in chunks:
        t = time.perf_counter()
        db.execute("BEGIN")
        db.executemany(ins, ((first + k, *r) for k, r in enumerate(c.tolist())))
        db.execute("COMMIT")
        times.append(time.perf_counter() - t)
        first += len(c)
    db.close()
    return times


def _raw_file(path, n_cols, chunks, sync):
    times = []
    with open(path, "ab") as fh:
        for c in chunks:
            t = time.perf_counter()
            fh.write(c.tobytes())
            fh.flush()
            os.fsync(fh.fileno())
            times.append(time.perf_counter() - t)
    return times


def store_table(quick: bool) -> str:
    rows_per_commit = 2500  # 50 ms of rows at 50,000 rows/s (20 us steps)
    n_commits = 10 if quick else 60
    out = []
    for n_cols in (24, 64):
        rng = np.random.default_rng(1)
        chunks = [rng.standard_normal((rows_per_commit, n_cols)) for _ in range(n_commits)]
        for c in chunks:
            c[:, 0] = np.sort(c[:, 0])
        for name, fn, sync in (("SQLite WAL, blob per block", _sqlite_blob, "FULL"),
                               ("SQLite WAL, blob per block", _sqlite_blob, "NORMAL"),
                               ("SQLite WAL, row per frame", _sqlite_rows, "NORMAL"),
                               ("append-only raw file + fsync", _raw_file, "fsync")):
            with tempfile.TemporaryDirectory(dir=ROOT if quick else None) as d:
                t = np.asarray(fn(os.path.join(d, "s"), n_cols, chunks, sync))
                size = sum(os.path.getsize(os.path.join(d, f)) for f in os.listdir(d))
            rate = rows_per_commit * n_commits / t.sum()
            out.append([name, sync, n_cols, f"{rate / 1e3:,.0f} k", f"{rate / 50e3:.1f}",
                        f"{np.median(t) * 1e3:.2f} / {t.max() * 1e3:.2f}",
                        f"{size / (rows_per_commit * n_commits * n_cols * 8):.2f}"])
    return md(["store", "sync", "columns", "rows/s (writer alone)", "x the 50 k rows/s per-step rate",
               "ms per commit median / max", "bytes on disk / raw bytes"], out)


# ------------------------------------------------------------------ 2. recorder end to end
def recorder_table(quick: bool) -> str:
    from host.record import RunRecorder

    seconds = 1.0 if quick else 4.0
    out = []
    for rate, n_cols in ((50_000, 24), (100_000, 24), (50_000, 64)):
        with tempfile.TemporaryDirectory() as d:
            rec = RunRecorder(os.path.join(d, "r.sqlite"), [f"c{i}" for i in range(n_cols)])
            row = np.zeros(n_cols)
            hand = []
            t0 = time.perf_counter()
            k = 0
            # the producer offers rows in bursts of 1 ms, as a loop recording every step of a
            # frame would, and sleeps to the next burst (the loop's wait for the link)
            burst = int(rate / 1000)
            while True:
                now = time.perf_counter() - t0
                if now >= seconds:
                    break
                due = int(now * rate)
                while k < due:
                    row[0] = k
                    a = time.perf_counter_ns()
                    rec.frame(row)
                    hand.append(time.perf_counter_ns() - a)
                    k += 1
                time.sleep(max(0.0, (k + burst) / rate - (time.perf_counter() - t0)))
            dropped = rec.dropped
            rec.close()
            from host.record import open_record

            kept = len(open_record(os.path.join(d, "r.sqlite")).frames())
            h = np.asarray(hand, dtype=float) * 1e-3
            out.append([f"{rate:,}", n_cols, f"{k:,}", f"{kept:,}", f"{dropped:,}",
                        f"{np.median(h):.2f} / {np.percentile(h, 99):.2f} / {np.max(h):.0f}"])
    return md(["offered rows/s", "columns", "rows offered", "rows kept", "rows dropped",
               "frame() hand-off us median / p99 / max"], out)


# ------------------------------------------------------------------ 3. host loop on / off
def loop_runs(n_frames: int, pairs: int) -> list[dict]:
    from bench_link import MACHINE, CONVERTER, SETTINGS, WARMUP_FRAMES, FrameTimer, _env, _stop, drive_timeline
    from host.config import load
    from host.link import HostSession, VirtualCable
    from host.loop import REC_COLUMNS, HostLoop
    from host.params import pack
    from host.record import RunRecorder
    from host.runner import send_bye

    plant = pack(load("machine", MACHINE), load("converter", CONVERTER))
    period = int(round(plant.derived["frame_period_us"]))
    results = []
    with tempfile.TemporaryDirectory() as d:
        for i in range(2 * pairs):
            recording = i % 2 == 1
            rec = RunRecorder(os.path.join(d, f"r{i}.sqlite"), REC_COLUMNS) if recording else None
            hand = []
            with VirtualCable() as cable, cable.host_link() as link:
                session = HostSession(link, encoding="fixed", frame_period_us=period)
                loop = HostLoop(plant, session, period, record_rows=n_frames + WARMUP_FRAMES + 8, recorder=rec)
                if rec is not None:  # time the hand-off call alone as well
                    real = rec.publish

                    def timed(rows, n, real=real):
                        a = time.perf_counter_ns()
                        real(rows, n)
                        hand.append(time.perf_counter_ns() - a)

                    rec.publish = timed
                timer = FrameTimer(link, session)
                proc = subprocess.Popen([sys.executable, "-m", "host.cli", "controller", "--link", cable.slave_path,
                                         "--settings", str(SETTINGS), "--quiet", "--idle-timeout", "30"],
                                        env=_env(), cwd=str(ROOT))
                try:
                    session.handshake(timeout_s=60.0)
                    loop.hooks.append(drive_timeline(plant))
                    count = [0]

                    def on_frame(lp):
                        count[0] += 1
                        if count[0] == WARMUP_FRAMES:
                            timer.enabled = True

                    loop.run_lockstep(n_frames + WARMUP_FRAMES, on_frame=on_frame, command_timeout_s=2.0)
                finally:
                    send_bye(session)
                    _stop(proc, 20.0)
                    if rec is not None:
                        rec.close()
            w = np.asarray(timer.wall_ns, dtype=float) * 1e-3
            c = np.asarray(timer.cpu_ns, dtype=float) * 1e-3
            h = np.asarray(hand[WARMUP_FRAMES:], dtype=float) * 1e-3
            results.append({"recording": recording, "frames": len(w), "median": np.median(w),
                            "p99": np.percentile(w, 99), "p999": np.percentile(w, 99.9),
                            "cpu_median": np.median(c), "cpu_p99": np.percentile(c, 99),
                            "hand": h, "dropped": rec.dropped if rec else 0})
    return results


def loop_table(results: list[dict]) -> tuple[str, str]:
    rows = []
    for k, r in enumerate(results):
        h = r["hand"]
        rows.append([k + 1, "on" if r["recording"] else "off", r["frames"], f"{r['median']:.0f}",
                     f"{r['p99']:.0f}", f"{r['p999']:.0f}", f"{r['cpu_median']:.0f} / {r['cpu_p99']:.0f}",
                     f"{np.median(h):.2f} / {np.percentile(h, 99):.2f}" if len(h) else "-", r["dropped"]])
    on = [r for r in results if r["recording"]]
    off = [r for r in results if not r["recording"]]
    d_p99 = np.median([r["p99"] for r in on]) - np.median([r["p99"] for r in off])
    d_med = np.median([r["median"] for r in on]) - np.median([r["median"] for r in off])
    verdict = (f"recording on - off (median of the runs): per-frame median {d_med:+.1f} us, p99 {d_p99:+.1f} us "
               f"-> target at most +10 us on the p99: {'met' if d_p99 <= 10 else 'NOT MET'}")
    c_p99 = np.median([r["cpu_p99"] for r in on]) - np.median([r["cpu_p99"] for r in off])
    verdict += (f"\n  on this thread's CPU time (descheduling left out): p99 {c_p99:+.1f} us -> "
                f"{'met' if c_p99 <= 10 else 'NOT MET'}")
    return md(["run", "recording", "frames", "median us", "p99 us", "p99.9 us", "CPU time us median / p99",
               "hand-off call us median / p99", "rows dropped"], rows), verdict


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="short runs (smoke test)")
    ap.add_argument("--frames", type=int, default=None, help="lockstep frames per run (default 3000, quick 300)")
    ap.add_argument("--pairs", type=int, default=None, help="off/on run pairs (default 3, quick 1)")
    a = ap.parse_args(argv)
    frames = a.frames or (300 if a.quick else 3000)
    pairs = a.pairs or (1 if a.quick else 3)
    if frames <= 0 or pairs <= 0:
        print("error: --frames and --pairs must be > 0", file=sys.stderr)
        return 2
    print(f"dcrig record speed - {cpu_model()}, {os.cpu_count()} logical CPUs; Python {sys.version.split()[0]}, "
          f"SQLite {sqlite3.sqlite_version}; load average before {load_avg()}")
    print("\n### Store candidates (one commit per 2,500 rows = 50 ms at 50,000 rows/s)\n")
    print(store_table(a.quick))
    print("\n### The recorder end to end (producer paced on the wall clock, writer thread committing every 50 ms)\n")
    print(recorder_table(a.quick))
    print(f"\n### Host frame time, recording off / on interleaved (lockstep, emulated controller process, "
          f"{frames} frames a run after warm-up; bytes in -> bytes out)\n")
    table, verdict = loop_table(loop_runs(frames, pairs))
    print(table)
    print(f"\nload average after {load_avg()}")
    print(verdict)
    return 0


if __name__ == "__main__":
    sys.exit(main())
