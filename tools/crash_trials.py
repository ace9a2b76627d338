"""Crash trials: kill the host or the emulated controller at random moments, then judge.

    PYTHONPATH=. python tools/crash_trials.py --trials 200 [--seed 1] [--targets demo,serve,scenario]

Three set-ups, each run as the user would start it (`python -m host.cli ...`):

- `demo`: `dcrig demo --no-plot` (lockstep; the host spawns `dcrig controller` itself);
- `serve`: `dcrig serve --link pty:// --lockstep` and `dcrig controller --link PEER` started
  here as a second, separate process;
- `scenario`: `dcrig scenario f3_phase_loss_process.toml --no-plot` (the emulated controller
  as a process over a virtual cable, spawned by the scenario runner).

Each trial picks a set-up, a victim (`host` or `controller`) and a signal (SIGKILL or SIGINT)
in turn, and a random moment (seeded) between the start of the host and a little past the end
of an undisturbed run. SIGKILL goes to the victim's pid (`kill -9`); SIGINT to the host goes to
its process group, as a Ctrl-C at its terminal would (the demo's controller runs in a session of
its own, the scenario's shares the host's group and gets it too), and to the controller's pid.
Then:

- every run folder the trial made is opened; its status is noted (`unfinished`, `stopped`,
  `error: ...`, `complete`);
- rows lost beyond the last commit (must be 0): the frame rows must be contiguous (time
  stepping by one frame period from the first frame) and, since these runs are lockstep and
  deterministic, equal to the rows of an undisturbed reference run of the same set-up, value
  for value (every column but `host_work_us`, a wall-clock figure). When the controller was
  the victim the run departs from the reference once commands stop; the rows before the first
  departure must all be there and every row after it must be one without a fresh command (the
  model held or blocked), anything else counts as lost. A record that was closed (`run_end`
  present) must hold as many rows as it says it has;
- orphans (must be 0): every process of the trial carries a marker in its environment;
  after the host has ended, any of them still alive after `--grace` seconds (default 15, more
  than the controller's 10 s idle timeout) is an orphan (then killed here);
- overwrite (must be 0): all trials of a set-up share one `--out`, so each restart gets a new
  folder; every earlier record is fingerprinted after its trial and checked again at the end.

The table prints per set-up, victim and signal. tests/test_crash_trials.py runs a few trials
through `run_trial()`. Processes are found with psutil (a dependency of the test extra) and
signalled by pid only.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import random
import signal
import subprocess
import sys
import tempfile
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import psutil

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from host.record import open_record  # noqa: E402
from host.record.store import RecordError  # noqa: E402
from host.shipped import shipped_config  # noqa: E402

MARK = "DCRIG_CRASH_TRIAL"
SETUPS = ("demo", "serve", "scenario")
VICTIMS = ("host", "controller")
SIGNALS = (signal.SIGKILL, signal.SIGINT)
WALL_COLUMNS = ("host_work_us",)  # differ between identical runs by nature
SCENARIO = "scenarios/f3_phase_loss_process.toml"
EXIT_WAIT_S = 90.0  # the host must end within this after a signal (else it counts as hung)


def _env(marker: str) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env[MARK] = marker
    env.pop("COLUMNS", None)
    return env


def host_argv(setup: str, out: Path) -> list[str]:
    py = [sys.executable, "-m", "host.cli"]
    if setup == "demo":
        return py + ["demo", "--no-plot", "--out", str(out / "demo" / "run")]
    if setup == "serve":
        return py + ["serve", str(shipped_config("machines/kestrel_f3_stand.toml")), "--converter",
                     str(shipped_config("converters/kestrel_f3_dual.toml")), "--link", "pty://", "--lockstep",
                     "--connect-timeout", "60", "--out", str(out / "serve" / "run")]
    if setup == "scenario":
        return py + ["scenario", str(shipped_config(SCENARIO)), "--no-plot", "--out", str(out / "scenario")]
    raise ValueError(setup)


def controller_argv_for_serve(peer: str) -> list[str]:
    return [sys.executable, "-m", "host.cli", "controller", "--link", peer, "--settings",
            str(shipped_config("controllers/kestrel_f3_dual.toml")), "--quiet"]


def marked_processes(marker: str) -> list[psutil.Process]:
    found = []
    for p in psutil.process_iter(["pid"]):
        try:
            if p.environ().get(MARK) == marker:
                found.append(p)
        except (psutil.NoSuchProcess, psutil.AccessDenied, psutil.ZombieProcess):
            continue
    return found


def _alive(p: psutil.Process) -> bool:
    try:
        return p.is_running() and p.status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def run_folders(base: Path) -> set[Path]:
    return {p for p in base.iterdir() if p.is_dir()} if base.is_dir() else set()


def fingerprint(run_dir: Path) -> tuple:
    """(status, rows, sha256 of the rows, events) of a record, or None when the folder holds none."""
    if not (run_dir / "record.sqlite").exists():
        return None
    try:
        rec = open_record(run_dir)
    except RecordError as err:  # counted by check_record already; the fingerprint notes it
        return ("does not open", str(err))
    with rec:
        rows = rec.frames()
        return rec.status, len(rows), hashlib.sha256(np.ascontiguousarray(rows).tobytes()).hexdigest(), len(rec.events())


@dataclass
class Reference:
    setup: str
    frames: np.ndarray
    columns: tuple
    period_s: float
    wall_s: float
    record_at_s: float  # from the host's start to its record file appearing
    run_s: float  # from the record appearing to the record's close (the run; exports and plots come after)

    @property
    def compare(self) -> list[int]:
        return [k for k, c in enumerate(self.columns) if c not in WALL_COLUMNS]


@dataclass
class Trial:
    setup: str
    victim: str
    sig: int
    kill_at_s: float
    after_record: bool = True  # kill_at_s counts from the record's appearance, else from the start
    records: int = 0
    statuses: list = field(default_factory=list)
    rows: int = 0
    lost: int = 0
    problems: list = field(default_factory=list)
    orphans: int = 0
    orphan_exit_s: float = 0.0
    new_folders: int = 0
    host_exit: int | None = None
    signalled: bool = False


def _default_sigint() -> None:
    # a script started in the background of a non-interactive shell inherits SIGINT ignored,
    # and an ignored signal stays ignored across exec: give the host Ctrl-C's usual meaning
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _start_host(setup: str, out: Path, marker: str, log):
    return subprocess.Popen(host_argv(setup, out), env=_env(marker), stdout=subprocess.PIPE, stderr=log,
                            text=True, start_new_session=True, cwd=out, preexec_fn=_default_sigint)


def _new_record(base: Path, before: set) -> bool:
    return any((d / "record.sqlite").exists() for d in run_folders(base) - before)


def _record_closed(base: Path) -> bool:
    """True once the (only) run record under base says anything but running."""
    for d in run_folders(base):
        try:
            with open_record(d) as rec:
                if rec.status != "running":
                    return True
        except Exception:  # noqa: BLE001 - being created or written: not closed yet
            pass
    return False


class _Lines:
    """The host's stdout read on a thread, so waiting for a line never blocks the trial."""

    def __init__(self, stream):
        import threading

        self.lines: list[str] = []
        self._t = threading.Thread(target=self._read, args=(stream,), daemon=True)
        self._t.start()

    def _read(self, stream):
        for line in stream:
            self.lines.append(line)

    def find(self, text: str):
        for line in list(self.lines):
            if text in line:
                return line
        return None


def reference_run(setup: str, out: Path, timeout_s: float = 300.0) -> Reference:
    """One undisturbed run of the set-up (its own folder), to compare the killed ones with."""
    out.mkdir(parents=True, exist_ok=True)
    marker = uuid.uuid4().hex
    t0 = time.monotonic()
    t_record = None
    t_closed = None
    with open(out / "reference.log", "w") as log:
        proc = _start_host(setup, out, marker, log)
        lines = _Lines(proc.stdout)
        ctl = None
        try:
            while proc.poll() is None and time.monotonic() - t0 < timeout_s:
                if setup == "serve" and ctl is None and lines.find("point the controller at "):
                    ctl = _start_serve_controller(lines, proc, marker, log, 5.0)
                if t_record is None and _new_record(out / setup, set()):
                    t_record = time.monotonic() - t0
                elif t_record is not None and t_closed is None and _record_closed(out / setup):
                    # the run ends here; the exports and the plot after it took most of the
                    # demo's time once the run got fast, and a moment chosen inside "the run"
                    # then fell among them (a Ctrl-C there rightly leaves a complete record)
                    t_closed = time.monotonic() - t0
                time.sleep(0.01)
            proc.wait(timeout_s)
            if ctl is not None:
                ctl.wait(30)
        finally:
            for p in (proc, ctl):
                if p is not None and p.poll() is None:
                    p.kill()
                    p.wait(10)
    wall = time.monotonic() - t0
    folders = sorted(run_folders(out / setup))
    if proc.returncode not in (0, 1) or len(folders) != 1:
        raise RuntimeError(f"reference run of {setup} failed (exit {proc.returncode}); see {out / 'reference.log'}")
    with open_record(folders[0]) as rec:
        frames, columns = rec.frames(), tuple(rec.columns)
        period = float(rec.meta.get("frame_period_us", 0) or 0) * 1e-6 or float(rec.meta.get("frame_period_s", 0))
        if rec.status != "complete":
            raise RuntimeError(f"reference run of {setup}: status {rec.status}")
    t_rec = t_record or wall
    return Reference(setup, frames, columns, period, wall, t_rec, (t_closed or wall) - t_rec)


def _start_serve_controller(lines: _Lines, host, marker: str, log, timeout_s: float):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        line = lines.find("point the controller at ")
        if line:
            peer = line.split("point the controller at ", 1)[1].split()[0]
            return subprocess.Popen(controller_argv_for_serve(peer), env=_env(marker), stdout=log, stderr=log,
                                    start_new_session=True)
        if host.poll() is not None:
            return None
        time.sleep(0.02)
    return None


def _find_controller(setup: str, host: psutil.Process, serve_ctl) -> psutil.Process | None:
    if setup == "serve":
        return psutil.Process(serve_ctl.pid) if serve_ctl is not None and serve_ctl.poll() is None else None
    try:
        for c in host.children(recursive=True):
            if "controller" in " ".join(c.cmdline()):
                return c
    except psutil.NoSuchProcess:
        return None
    return None


def check_record(run_dir: Path, ref: Reference, victim: str, t: Trial) -> None:
    """Add to t what the record in run_dir holds and how many rows it lost."""
    if not (run_dir / "record.sqlite").exists():
        return
    try:
        rec = open_record(run_dir)
    except RecordError as err:
        t.problems.append(f"{run_dir.name}: does not open: {err}")
        t.lost += 1
        return
    with rec:
        t.records += 1
        status = rec.status
        t.statuses.append(status.split(":")[0])
        rows = rec.frames()
        closed = rec.end.frames if rec.end is not None else None
    t.rows += len(rows)
    if status == "running":
        t.problems.append(f"{run_dir.name}: status running after the trial")
    if closed is not None and int(closed) != len(rows):
        t.problems.append(f"{run_dir.name}: closed with {closed} frames but holds {len(rows)}")
        t.lost += abs(int(closed) - len(rows))
    if len(rows) == 0:
        return
    if tuple(rec.columns) != ref.columns:
        t.problems.append(f"{run_dir.name}: columns differ from the reference")
        t.lost += len(rows)
        return
    # contiguous: one frame period from each row to the next
    steps = np.diff(rows[:, ref.columns.index("time_s")])
    bad_steps = int(np.sum(np.abs(steps - ref.period_s) > 1e-9))
    if bad_steps:
        t.problems.append(f"{run_dir.name}: {bad_steps} gaps in time")
        t.lost += bad_steps
    n = min(len(rows), len(ref.frames))
    cmp = ref.compare
    same = np.all(rows[:n][:, cmp] == ref.frames[:n][:, cmp], axis=1)
    first_diff = int(np.argmin(same)) if not np.all(same) else n
    if len(rows) > len(ref.frames):
        t.problems.append(f"{run_dir.name}: {len(rows) - len(ref.frames)} rows more than the reference")
        t.lost += len(rows) - len(ref.frames)
    if first_diff == n:
        return
    if victim == "host":  # the host killed: its record must be a prefix of the reference
        bad = int(np.sum(~same))
        t.problems.append(f"{run_dir.name}: {bad} rows differ from the reference (first at row {first_diff})")
        t.lost += bad
        return
    # the controller killed: after the departure, no row may carry a fresh command
    seq = rows[:, ref.columns.index("cmd_seq")]
    link_ok = rows[:, ref.columns.index("link_ok")]
    fresh = np.zeros(len(rows), bool)
    fresh[1:] = (seq[1:] != seq[:-1]) & (link_ok[1:] > 0)
    bad = int(np.sum(fresh[first_diff + 1:])) + (1 if fresh[first_diff] and first_diff > 0 else 0)
    if bad:
        t.problems.append(f"{run_dir.name}: {bad} rows with a fresh command after departing the reference "
                          f"at row {first_diff}")
        t.lost += bad


def run_trial(setup: str, victim: str, sig: int, kill_at_s: float, out: Path, ref: Reference,
              grace_s: float = 15.0, fingerprints: dict | None = None, after_record: bool = True) -> Trial:
    """Start the set-up, signal the victim kill_at_s after its record appeared (after_record) or
    after the host's start, and judge what is left."""
    t = Trial(setup, victim, int(sig), kill_at_s, after_record)
    base = out / setup
    before = run_folders(base)
    marker = uuid.uuid4().hex
    with open(out / f"trial-{setup}.log", "a") as log:
        log.write(f"\n=== {victim} {signal.Signals(sig).name} at {kill_at_s:.3f} s "
                  f"{'after the record appeared' if after_record else 'after the start'}\n")
        log.flush()
        t0 = time.monotonic()
        host = _start_host(setup, out, marker, log)
        lines = _Lines(host.stdout)
        ph = psutil.Process(host.pid)
        serve_ctl = None
        t_from = None if after_record else t0
        try:
            while time.monotonic() - t0 < kill_at_s + 120.0:
                if setup == "serve" and serve_ctl is None and lines.find("point the controller at "):
                    serve_ctl = _start_serve_controller(lines, host, marker, log, 5.0)
                if host.poll() is not None:
                    break  # ended before the moment came: nothing to signal
                if t_from is None and _new_record(base, before):
                    t_from = time.monotonic()
                if t_from is not None and time.monotonic() - t_from >= kill_at_s:
                    if victim == "host":
                        if sig == signal.SIGINT:
                            os.killpg(host.pid, signal.SIGINT)  # the terminal's Ctrl-C: the whole group
                        else:
                            os.kill(host.pid, sig)
                        t.signalled = True
                        break
                    ctl = _find_controller(setup, ph, serve_ctl)
                    if ctl is not None:
                        ctl.send_signal(sig)
                        t.signalled = True
                        break
                time.sleep(0.01)
            try:
                host.wait(EXIT_WAIT_S)
            except subprocess.TimeoutExpired:
                t.problems.append(f"host did not end within {EXIT_WAIT_S:g} s after the signal")
                host.kill()
                host.wait(10)
            t.host_exit = host.returncode
            # orphans: anything of this trial still alive once the grace time is over
            t_end = time.monotonic()
            left = [p for p in marked_processes(marker) if _alive(p)]
            while left and time.monotonic() - t_end < grace_s:
                time.sleep(0.1)
                left = [p for p in left if _alive(p)]
            t.orphan_exit_s = time.monotonic() - t_end
            t.orphans = len(left)
            if left:
                t.problems.append("orphans: " + ", ".join(f"{p.pid} {' '.join(p.cmdline()[-6:])}" for p in left
                                                          if _alive(p)))
        finally:
            for p in marked_processes(marker):  # ours, by the marker we gave them; by pid
                try:
                    p.kill()
                except psutil.NoSuchProcess:
                    pass
            if serve_ctl is not None:
                try:
                    serve_ctl.wait(10)
                except subprocess.TimeoutExpired:
                    pass
            if host.poll() is None:
                host.kill()
                host.wait(10)
    new = sorted(run_folders(base) - before)
    t.new_folders = len(new)
    if len(new) > 1:
        t.problems.append(f"{len(new)} run folders from one run")
    for d in new:
        check_record(d, ref, victim, t)
        if fingerprints is not None:
            fingerprints[d] = fingerprint(d)
    return t


def check_overwrites(fingerprints: dict) -> int:
    """Earlier records changed or gone since their trial: must be 0."""
    changed = 0
    for d, fp in fingerprints.items():
        now = fingerprint(d) if d.exists() else "gone"
        if now != fp:
            changed += 1
    return changed


def schedule(n: int, setups, seed: int, refs: dict) -> list[tuple]:
    """n trials round-robin over set-up x victim x signal, each at a random moment: one in five
    during start-up (from the host's start to its record's appearance in the reference run),
    the others while the run goes (from the record's appearance to 1.1 x the reference's run)."""
    rnd = random.Random(seed)
    cells = [(s, v, g) for s in setups for v in VICTIMS for g in SIGNALS]
    out = []
    for k in range(n):
        s, v, g = cells[k % len(cells)]
        if rnd.random() < 0.2:
            out.append((s, v, g, round(rnd.uniform(0.1, refs[s].record_at_s), 3), False))
        else:
            out.append((s, v, g, round(rnd.uniform(0.0, 1.1 * refs[s].run_s), 3), True))
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--trials", type=int, default=200)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--targets", default=",".join(SETUPS), help="set-ups, comma-separated: demo,serve,scenario")
    ap.add_argument("--grace", type=float, default=15.0, help="seconds a process may outlive the host")
    ap.add_argument("--minutes", type=float, default=None,
                    help="start no new trial after this many minutes (the table says how many ran)")
    ap.add_argument("--keep", metavar="DIR", help="work here and keep the run folders (default: a temporary folder)")
    a = ap.parse_args(argv)
    setups = [s for s in a.targets.split(",") if s]
    if a.trials < 1 or any(s not in SETUPS for s in setups):
        print(f"error: --trials must be >= 1 and --targets a list of {', '.join(SETUPS)}", file=sys.stderr)
        return 2
    work = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="dcrig-crash-"))
    work.mkdir(parents=True, exist_ok=True)
    t_start = time.monotonic()
    print(f"crash trials: {a.trials}, seed {a.seed}, set-ups {', '.join(setups)}; work folder {work}; "
          f"load average {' '.join(f'{x:.2f}' for x in os.getloadavg())}", flush=True)
    refs = {}
    for s in setups:
        refs[s] = reference_run(s, work / "reference")
        print(f"reference {s}: {len(refs[s].frames)} frames, {refs[s].wall_s:.1f} s wall (record after "
              f"{refs[s].record_at_s:.1f} s)", flush=True)
    fps: dict = {}
    trials = []
    for k, (s, v, g, at, after) in enumerate(schedule(a.trials, setups, a.seed, refs)):
        if a.minutes is not None and time.monotonic() - t_start > 60.0 * a.minutes:
            print(f"time budget of {a.minutes:g} min spent: {k} of {a.trials} trials run", flush=True)
            break
        tr = run_trial(s, v, g, at, work, refs[s], a.grace, fps, after)
        trials.append(tr)
        print(f"  {k + 1:3d} {s:8s} {v:10s} {signal.Signals(g).name:7s} at {'run' if after else 'start'}"
              f"+{at:5.2f} s: signalled {'yes' if tr.signalled else 'no'}, exit {tr.host_exit}, "
              f"records {tr.records} {'/'.join(tr.statuses) or '-'}, rows {tr.rows}, lost {tr.lost}, "
              f"orphans {tr.orphans}{'  ' + '; '.join(tr.problems) if tr.problems else ''}", flush=True)
    overwritten = check_overwrites(fps)
    print(f"\n{len(trials)} trials (of {a.trials} asked) in {time.monotonic() - t_start:.0f} s; load average "
          f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}\n")
    print("| set-up | victim | signal | trials | signalled | records opened | status seen | rows kept "
          "| rows lost beyond the last commit | orphans | exit codes |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for s in setups:
        for v in VICTIMS:
            for g in SIGNALS:
                cell = [t for t in trials if (t.setup, t.victim, t.sig) == (s, v, int(g))]
                if not cell:
                    continue
                seen: dict = {}
                for t in cell:
                    for st in t.statuses or ["no record"]:
                        seen[st] = seen.get(st, 0) + 1
                codes: dict = {}
                for t in cell:
                    codes[t.host_exit] = codes.get(t.host_exit, 0) + 1
                print(f"| {s} | {v} | {signal.Signals(g).name} | {len(cell)} | {sum(t.signalled for t in cell)} "
                      f"| {sum(t.records for t in cell)} | {', '.join(f'{k} {n}' for k, n in sorted(seen.items()))} "
                      f"| {sum(t.rows for t in cell)} | {sum(t.lost for t in cell)} | {sum(t.orphans for t in cell)} "
                      f"| {', '.join(f'{k}: {n}' for k, n in sorted(codes.items(), key=str))} |")
    lost = sum(t.lost for t in trials)
    orphans = sum(t.orphans for t in trials)
    problems = [t for t in trials if t.problems]
    print(f"\nrows lost beyond the last commit {lost}; orphan processes {orphans}; earlier records "
          f"overwritten or changed {overwritten}; trials with a problem {len(problems)}")
    return 1 if (lost or orphans or overwritten or problems) else 0


if __name__ == "__main__":
    sys.exit(main())
