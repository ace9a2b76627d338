"""Kill trials for the run record: SIGKILL a recording process at random moments, read back.

    PYTHONPATH=. python tools/record_kill_trials.py --trials 50 [--rate 1000] [--seed 1]

Each trial starts a child that records rows at `--rate` rows/s on the wall clock (row k holds
k and values computed from k, so every value can be checked exactly) with an event every 100
rows, kills it with SIGKILL after a random 0.05-2 s, and opens the record: it must open,
say `unfinished`, and hold rows 0..n-1 exactly with nothing after a gap; the table prints how
much of the run before the kill was lost (the recorder commits every 50 ms, so the target is
at most 100 ms). tests/test_record_kill.py runs a few trials through `trial()`.
The child mode (`--child PATH`) is what the trials spawn.
"""

from __future__ import annotations

import argparse
import math
import os
import random
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
COLS = ("time_s", "row", "value_a", "value_b")


def expected_values(k: np.ndarray) -> np.ndarray:
    """Columns 1.. of row k: exact functions of k (the time column is the child's clock)."""
    k = np.asarray(k, dtype=float)
    return np.column_stack([k, np.sin(k) * 9876.54321, k * 1e-9 + np.cos(k * 0.01)])


def child(path: str, rate: float, seconds: float) -> None:
    sys.path.insert(0, str(ROOT))
    from host.record import RunRecorder

    rec = RunRecorder(path, COLS, {"trial": "kill"})
    row = np.zeros(len(COLS))
    t0 = time.time()
    print(f"ready {t0!r}", flush=True)
    period = 1.0 / rate
    k = 0
    while True:
        now = time.time() - t0
        if now > seconds:
            break
        target = k * period
        if target > now:
            time.sleep(target - now)
        row[0] = time.time() - t0
        row[1:] = expected_values([k])[0]
        rec.frame(row)
        if k % 100 == 0:
            rec.event(row[0], "trial", f"row {k}", row=k)
        k += 1
    rec.close("complete")


def trial(tmp: Path, rate: float = 1000.0, kill_after_s: float = 0.5, timeout_s: float = 60.0) -> dict:
    """One trial; returns what was found. Raises AssertionError when the record is wrong."""
    from host.record import open_record

    path = tmp / "record.sqlite"
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    proc = subprocess.Popen([sys.executable, str(Path(__file__).resolve()), "--child", str(path),
                             "--rate", str(rate)], stdout=subprocess.PIPE, text=True, env=env)
    try:
        deadline = time.monotonic() + timeout_s
        line = ""
        while not line.startswith("ready") and time.monotonic() < deadline:
            line = proc.stdout.readline()
            if not line and proc.poll() is not None:
                raise AssertionError(f"child ended before recording (exit {proc.returncode})")
        assert line.startswith("ready"), "child did not start in time"
        t0 = float(line.split()[1])
        time.sleep(kill_after_s)
        t_kill = time.time() - t0
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout_s)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout_s)
        proc.stdout.close()
    rd = open_record(path)
    try:
        status = rd.status
        rows = rd.frames()
        events = rd.events(with_data=True)
    finally:
        rd.close()
    assert status == "unfinished", status
    n = len(rows)
    assert np.array_equal(rows[:, 1], np.arange(n, dtype=float)), "rows not a contiguous prefix"
    assert np.array_equal(rows[:, 1:], expected_values(np.arange(n))), "a value was misread"
    assert n < 2 or np.all(np.diff(rows[:, 0]) > 0), "time column not increasing"
    for t, kind, text, data in events:
        assert kind == "trial" and text == f"row {data['row']}"
    assert [e[3]["row"] for e in events] == list(range(0, 100 * len(events), 100))
    last_t = rows[-1, 0] if n else 0.0
    return {"rows": n, "events": len(events), "kill_at_s": t_kill, "lost_ms": (t_kill - last_t) * 1e3}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--trials", type=int, default=20)
    ap.add_argument("--rate", type=float, default=1000.0, help="rows per second the child records")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--child", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--seconds", type=float, default=30.0, help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        child(a.child, a.rate, a.seconds)
        return 0
    if not (a.trials > 0 and a.rate > 0 and math.isfinite(a.rate)):
        print("error: --trials and --rate must be > 0", file=sys.stderr)
        return 2
    rnd = random.Random(a.seed)
    print(f"record kill trials: {a.trials} SIGKILLs at random 0.05-2 s, child recording {a.rate:g} rows/s; "
          f"load average {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print("| trial | killed at s | rows kept | events kept | lost before the kill (ms) | result |")
    print("|---|---|---|---|---|---|")
    lost, bad = [], 0
    for i in range(a.trials):
        with tempfile.TemporaryDirectory() as d:
            after = rnd.uniform(0.05, 2.0)
            try:
                r = trial(Path(d), a.rate, after)
                lost.append(r["lost_ms"])
                print(f"| {i + 1} | {r['kill_at_s']:.3f} | {r['rows']} | {r['events']} | {r['lost_ms']:.1f} | ok |")
            except AssertionError as err:
                bad += 1
                print(f"| {i + 1} | {after:.3f} | - | - | - | WRONG: {err} |")
    if lost:
        print(f"\nlost before the kill: median {np.median(lost):.1f} ms, max {np.max(lost):.1f} ms "
              f"(target at most 100 ms: {'met' if np.max(lost) <= 100 else 'NOT MET'}); wrong records {bad}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
