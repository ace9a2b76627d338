"""Crash trials (issue 10 item 7), a bounded number: the host or the emulated controller killed
with SIGKILL or interrupted with SIGINT at seeded random moments of a lockstep run.

Each trial goes through tools/crash_trials.py's `run_trial()` (the script runs 200 and prints
the table): the record left behind must open, say what happened (`unfinished` after a killed
host, `stopped` after Ctrl-C, `error: ...` after a dead controller), hold every row up to its
last commit exactly as an undisturbed lockstep run of the same set-up has it (the rerun is the
reference: the runs are deterministic but for the wall-clock column `host_work_us`), leave no
process of the trial alive, and never touch an earlier run's folder. The external guarantee
leaned on for the first point is SQLite's atomic commit in WAL mode
(https://sqlite.org/wal.html, https://sqlite.org/atomiccommit.html).
"""

import random
import signal
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tools"))
import crash_trials as ct  # noqa: E402

_RND = random.Random(20261202)


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    return tmp_path_factory.mktemp("crash")


@pytest.fixture(scope="module")
def refs(work, kernel):  # kernel: compiled once for the session before any child loads it
    return {s: ct.reference_run(s, work / "reference") for s in ("demo", "scenario")}


@pytest.fixture(scope="module")
def fingerprints():
    return {}


def _mid_run(ref) -> float:
    """A seeded moment well inside the run (after the record appeared, before the end)."""
    return round(_RND.uniform(0.15, 0.6) * ref.run_s, 3)


# (set-up, victim, signal, status the record must say); serve is compared with the demo's
# reference: the same plant, controller settings and timeline, lockstep both
CASES = [
    ("demo", "host", signal.SIGKILL, "unfinished"),
    ("demo", "controller", signal.SIGKILL, "error"),
    ("serve", "host", signal.SIGINT, "stopped"),
    ("scenario", "host", signal.SIGKILL, "unfinished"),
    ("scenario", "controller", signal.SIGINT, "stopped"),
    # found by the trials: the scenario runner waited 5 s per frame for a SIGKILLed controller
    ("scenario", "controller", signal.SIGKILL, "stopped"),
]


@pytest.mark.parametrize("setup,victim,sig,status", CASES, ids=[f"{c[0]}-{c[1]}-{c[2].name}" for c in CASES])
def test_a_kill_keeps_every_committed_row_and_leaves_no_process(setup, victim, sig, status, work, refs, fingerprints):
    ref = refs["demo" if setup == "serve" else setup]
    t = ct.run_trial(setup, victim, sig, _mid_run(ref), work, ref, grace_s=15.0, fingerprints=fingerprints)
    assert t.signalled, "the run ended before the signal: the moment was not inside the run"
    assert t.problems == [], t.problems
    assert t.new_folders == 1 and t.records == 1
    assert t.statuses == [status]
    assert t.lost == 0 and t.orphans == 0
    if victim == "host" and sig == signal.SIGKILL:
        assert t.host_exit == -signal.SIGKILL
    if victim == "host" and sig == signal.SIGINT:
        assert t.host_exit == 130  # `error: interrupted`
    if victim == "controller" and setup != "scenario":
        assert t.host_exit == 2  # the dead peer ends the run as an error, the record closed
    if victim == "controller" and setup == "scenario":
        # the runner judges what was recorded: FAIL (1) when the controller died mid-run, an
        # error (2) when it died before its HELLO
        assert t.host_exit in (1, 2)


def test_a_restarted_run_never_changed_an_earlier_record(work, refs, fingerprints):
    # runs after the parametrized trials (file order): a second run into the same --out
    ref = refs["scenario"]
    t = ct.run_trial("scenario", "host", signal.SIGKILL, _mid_run(ref), work, ref, fingerprints=fingerprints)
    assert t.lost == 0 and t.orphans == 0 and t.new_folders == 1
    assert len([d for d in fingerprints if d.parent.name == "scenario"]) >= 2
    assert ct.check_overwrites(fingerprints) == 0


def test_a_controller_that_dies_before_its_hello_ends_the_handshake_at_once():
    """Found by the trials: the scenario runner and the demo waited the whole handshake timeout
    (30 s, 20 s) for a controller process they had started and that was already dead."""
    from host.errors import LinkError, LinkTimeout
    from host.link import HostSession, VirtualCable

    with VirtualCable() as cable:
        link = cable.host_link()
        try:
            session = HostSession(link, encoding="fixed", frame_period_us=3333)
            with pytest.raises(LinkError, match=r"controller process ended \(exit status 3\)") as err:
                session.handshake(timeout_s=60.0, peer_exit=lambda: 3)
            assert not isinstance(err.value, LinkTimeout)
        finally:
            link.close()


def _record_of(folder: Path, ref, rows, status="complete"):
    from host.record import RunRecorder

    folder.mkdir()
    rec = RunRecorder(folder / "record.sqlite", ref.columns, {"trial": "judge check"})
    for r in rows:
        rec.frame(r)
    rec.close(status)


def test_the_judge_counts_a_changed_row_a_gap_and_a_fresh_command_after_departing(tmp_path, refs):
    """check_record() must be able to fail: a record that differs from the rerun by one value,
    one that misses a row, and a controller-kill record that goes on with fresh commands after
    it departed from the rerun all count as lost rows."""
    ref = refs["scenario"]
    good = ref.frames[:200].copy()
    t = ct.Trial("scenario", "host", int(signal.SIGKILL), 0.0)
    _record_of(tmp_path / "good", ref, good)
    ct.check_record(tmp_path / "good", ref, "host", t)
    assert (t.records, t.lost, t.problems) == (1, 0, [])

    changed = good.copy()
    changed[57, ref.columns.index("armature_current_A")] += 1e-9
    t = ct.Trial("scenario", "host", int(signal.SIGKILL), 0.0)
    _record_of(tmp_path / "changed", ref, changed)
    ct.check_record(tmp_path / "changed", ref, "host", t)
    assert t.lost >= 1 and "differ from the reference" in t.problems[0]

    gap = np.delete(good, 120, axis=0)
    t = ct.Trial("scenario", "host", int(signal.SIGKILL), 0.0)
    _record_of(tmp_path / "gap", ref, gap)
    ct.check_record(tmp_path / "gap", ref, "host", t)
    assert t.lost >= 1 and any("gaps in time" in p for p in t.problems)

    fresh = good.copy()
    fresh[150:, ref.columns.index("speed_rpm")] += 1.0  # departs at row 150 ...
    t = ct.Trial("scenario", "controller", int(signal.SIGKILL), 0.0)
    _record_of(tmp_path / "fresh", ref, fresh)
    ct.check_record(tmp_path / "fresh", ref, "controller", t)
    assert t.lost >= 1 and "fresh command" in t.problems[0]  # ... yet its commands go on


def test_a_kill_while_the_record_is_created_leaves_no_record_file(tmp_path, monkeypatch):
    """Found by the trials (trial 153 of the first 200-run): a scenario host killed 0.67 s
    after its record appeared left record.sqlite with a hot rollback journal beside it (the
    kill came while the empty file was being set up), and the read-only reader could not open
    it. The record is now built under a temporary name and linked into place whole."""
    from host.record import RunRecorder, open_record
    from host.record.store import RecordError

    class Killed(BaseException):
        pass

    def die(*_a, **_k):
        raise Killed("the process dies here")

    monkeypatch.setattr("host.record.store.os.link", die)
    with pytest.raises(Killed):
        RunRecorder(tmp_path / "record.sqlite", ("time_s", "x"), {"trial": "creation"})
    assert not (tmp_path / "record.sqlite").exists()
    with pytest.raises(RecordError, match="no such record file"):
        open_record(tmp_path)
    monkeypatch.undo()
    rec = RunRecorder(tmp_path / "record.sqlite", ("time_s", "x"), {"trial": "creation"})  # a restart
    rec.frame(np.array([0.001, 2.0]))
    rec.close("complete")
    with open_record(tmp_path) as rd:
        assert rd.status == "complete" and rd.frames().tolist() == [[0.001, 2.0]]
    assert sorted(p.name for p in tmp_path.iterdir() if not p.name.startswith(".")) == ["record.sqlite"]


def test_a_record_left_with_a_hot_journal_is_refused_with_one_line(tmp_path):
    """A record from before the fix, killed while it was created: one clear line, no traceback."""
    import sqlite3

    from host.record import open_record
    from host.record.store import RecordError

    path = tmp_path / "record.sqlite"
    db = sqlite3.connect(path, isolation_level=None)
    db.execute("PRAGMA journal_mode=DELETE")
    db.execute("CREATE TABLE t(x)")
    db.execute("BEGIN")
    db.execute("INSERT INTO t VALUES (randomblob(200000))")
    db.execute("PRAGMA cache_size=1")  # spill to the file: the journal is hot from here on
    db.execute("INSERT INTO t VALUES (randomblob(200000))")
    journal = Path(f"{path}-journal").read_bytes()
    image = path.read_bytes()
    db.execute("ROLLBACK")
    db.close()
    path.write_bytes(image)  # the files as a killed process leaves them
    Path(f"{path}-journal").write_bytes(journal)
    with pytest.raises(RecordError) as err:
        open_record(tmp_path)
    assert "\n" not in str(err.value) and str(path) in str(err.value)


def test_a_ctrl_c_after_the_work_is_done_does_not_change_the_exit_status(monkeypatch):
    """Found by the trials: a SIGINT in the last moments of a finished `dcrig serve` (record
    complete) killed the process by the signal during interpreter shutdown, status -2 instead
    of its own. After main() returned, run() ignores SIGINT."""
    from host import cli

    seen = {}

    def fake_exit(code):
        seen["code"] = code
        seen["sigint"] = signal.getsignal(signal.SIGINT)

    before = signal.getsignal(signal.SIGINT)
    monkeypatch.setattr(cli, "main", lambda: 0)
    monkeypatch.setattr(cli.sys, "exit", fake_exit)
    try:
        cli.run()
    finally:
        signal.signal(signal.SIGINT, before)
    assert seen == {"code": 0, "sigint": signal.SIG_IGN}
