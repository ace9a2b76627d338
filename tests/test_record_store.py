"""The run record (host.record.store) and run folders (host.record.rundir).

External references: SQLite's own guarantees (https://sqlite.org/wal.html: a reader sees
only committed transactions; https://sqlite.org/fileformat.html: the 16-byte header
"SQLite format 3\\0" and the application_id field at offset 68) are what the reader leans on;
the checks here read the file back through the standard library's sqlite3 module as well as
through our reader. No timing assertions: waits have timeouts, speed is in tools/bench_record.py.
"""

from __future__ import annotations

import sqlite3
import threading
import time

import numpy as np
import pytest

from host.errors import ConfigError, DcrigError
from host.record import RecordError, RunRecorder, new_run_dir, open_record, save_configs
from host.record.store import APPLICATION_ID

COLS = ("time_s", "armature_current_A", "speed_rpm", "model_status")


def _rows(n: int, start: int = 0) -> np.ndarray:
    k = np.arange(start, start + n, dtype=float)
    # values with every bit of a float64 used, so any rounding on the way would show
    return np.column_stack([k * 1e-3, np.sin(k) * 1234.5678901234, np.cos(k * 0.1) * 1e-300 + k, k % 7])


def test_rows_and_events_round_trip_exactly(tmp_path):
    data = _rows(5000)
    with RunRecorder(tmp_path / "r.sqlite", COLS, {"plant": "kestrel f3", "n": 3}, block_rows=64, lossless=True) as rec:
        for k, row in enumerate(data):
            rec.frame(row)
            if k % 1000 == 0:
                rec.event(row[0], "operator", f"step {k}", value=k)
    assert rec.dropped == 0
    rd = open_record(tmp_path / "r.sqlite")
    assert rd.status == "complete" and rd.finished
    assert rd.columns == COLS
    got = rd.frames()
    assert got.dtype == np.float64 and got.shape == data.shape
    assert np.array_equal(got, data)  # bit for bit
    assert rd.meta["plant"] == "kestrel f3" and rd.meta["n"] == 3
    for key in ("software_version", "command_line", "start_utc", "pid", "columns"):
        assert key in rd.meta
    ev = rd.events()
    assert ev[0] == (0.0, "operator", "step 0") and len(ev) == 5
    assert all(len(e) == 3 for e in ev)
    assert rd.events(with_data=True)[2][3] == {"value": 2000}
    np.testing.assert_array_equal(rd.column("speed_rpm"), data[:, 2])
    win = rd.frames(1.0, 2.0)
    assert win[0, 0] == 1.0 and win[-1, 0] == 2.0 and len(win) == 1001
    assert np.array_equal(np.concatenate(list(rd.iter_frames())), data)  # the streaming path too
    assert np.array_equal(np.concatenate(list(rd.iter_frames(1.0, 2.0))), win)


def test_a_row_is_copied_when_handed_over(tmp_path):
    row = np.zeros(len(COLS))
    with RunRecorder(tmp_path / "r.sqlite", COLS) as rec:
        for k in range(10):
            row[:] = k  # the caller reuses its row buffer, as HostLoop does
            rec.frame(row)
    got = open_record(tmp_path / "r.sqlite").frames()
    assert np.array_equal(got[:, 0], np.arange(10.0))


def test_frame_blocks_and_single_rows_keep_call_order(tmp_path):
    data = _rows(3000)
    with RunRecorder(tmp_path / "r.sqlite", COLS, block_rows=100, lossless=True) as rec:
        for row in data[:150]:
            rec.frame(row)
        rec.frame_block(data[150:2500])
        for row in data[2500:]:
            rec.frame(row)
    assert np.array_equal(open_record(tmp_path / "r.sqlite").frames(), data)


def test_rows_are_readable_while_the_run_goes_on(tmp_path):
    """The writer commits on its own: rows appear without close(), status says running."""
    rec = RunRecorder(tmp_path / "r.sqlite", COLS, commit_interval_s=0.02)
    try:
        data = _rows(200)
        for row in data:
            rec.frame(row)
        deadline = time.monotonic() + 10.0
        while True:
            rd = open_record(tmp_path / "r.sqlite")
            got = rd.frames()
            status = rd.status
            rd.close()
            if len(got) == len(data) or time.monotonic() > deadline:
                break
            time.sleep(0.02)
        assert np.array_equal(got, data)
        assert status == "running"
    finally:
        rec.close("stopped")
    assert open_record(tmp_path / "r.sqlite").status == "stopped"


def test_a_full_pool_drops_rows_counts_them_and_never_blocks(tmp_path):
    rec = RunRecorder(tmp_path / "r.sqlite", COLS, block_rows=8, pool_blocks=2, commit_interval_s=0.02)
    hold = threading.Lock()
    real_commit = rec._commit_new

    def slow_commit():  # the disk "hangs" while the lock is held
        with hold:
            real_commit()

    rec._commit_new = slow_commit
    with hold:
        t0 = time.monotonic()
        for row in _rows(100):
            rec.frame(row)
        spent = time.monotonic() - t0
    rec.close("complete")
    assert spent < 5.0  # not a speed check: a blocked frame() would wait forever here
    assert rec.dropped > 0
    rd = open_record(tmp_path / "r.sqlite")
    got = rd.frames()
    assert len(got) + rec.dropped == 100
    assert np.array_equal(got, _rows(len(got)))  # what was kept is the start, exact
    drops = [e for e in rd.events(with_data=True) if e[1] == "recorder"]
    assert drops and drops[-1][3]["dropped_total"] == rec.dropped
    assert rd.end.dropped == rec.dropped


def test_lossless_waits_instead_of_dropping(tmp_path):
    with RunRecorder(tmp_path / "r.sqlite", COLS, block_rows=8, pool_blocks=2, commit_interval_s=0.01,
                     lossless=True) as rec:
        for row in _rows(300):
            rec.frame(row)
    assert rec.dropped == 0
    assert np.array_equal(open_record(tmp_path / "r.sqlite").frames(), _rows(300))


@pytest.mark.parametrize("exc, status", [(KeyboardInterrupt, "stopped"), (ValueError, "error: ValueError: boom")])
def test_context_manager_records_how_the_run_ended(tmp_path, exc, status):
    with pytest.raises(exc):
        with RunRecorder(tmp_path / "r.sqlite", COLS) as rec:
            rec.frame(_rows(1)[0])
            raise exc("boom")
    rd = open_record(tmp_path / "r.sqlite")
    assert rd.status == status and len(rd.frames()) == 1


def test_a_record_is_never_overwritten(tmp_path):
    RunRecorder(tmp_path / "r.sqlite", COLS).close()
    with pytest.raises(RecordError, match="never overwritten"):
        RunRecorder(tmp_path / "r.sqlite", COLS)
    assert open_record(tmp_path / "r.sqlite").status == "complete"


def test_the_file_is_plain_sqlite_with_our_application_id(tmp_path):
    with RunRecorder(tmp_path / "r.sqlite", COLS) as rec:
        rec.frame(_rows(1)[0])
    db = sqlite3.connect(tmp_path / "r.sqlite")
    assert db.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    assert db.execute("SELECT count(*) FROM frame_blocks").fetchone()[0] == 1
    assert db.execute("SELECT status FROM run_end").fetchone()[0] == "complete"
    db.close()
    assert not (tmp_path / "r.sqlite-wal").exists() or (tmp_path / "r.sqlite-wal").stat().st_size == 0


@pytest.mark.parametrize("kind", ["text", "empty", "foreign_sqlite", "truncated", "missing", "garbage_tail"])
def test_bad_or_foreign_files_give_one_line(tmp_path, kind):
    p = tmp_path / "bad.sqlite"
    if kind == "text":
        p.write_text("time_s,speed_rpm\n0,0\n")
    elif kind == "empty":
        p.write_bytes(b"")
    elif kind == "foreign_sqlite":
        db = sqlite3.connect(p)
        db.execute("CREATE TABLE t(x)")
        db.commit()
        db.close()
    elif kind in ("truncated", "garbage_tail"):
        with RunRecorder(tmp_path / "good.sqlite", COLS) as rec:
            rec.frame_block(_rows(20000))
        raw = (tmp_path / "good.sqlite").read_bytes()
        if kind == "truncated":
            p.write_bytes(raw[: len(raw) // 3])
        else:  # a sane header, then noise where the pages were
            p.write_bytes(raw[:100] + bytes(range(256)) * (len(raw) // 256))
    with pytest.raises(RecordError) as err:
        rd = open_record(p)
        rd.frames()
        rd.events()
    msg = str(err.value)
    assert isinstance(err.value, DcrigError)
    assert "\n" not in msg and str(p) in msg


def test_run_folders_get_new_names_and_never_collide(tmp_path):
    first = new_run_dir(tmp_path, "demo")
    (first / "record.sqlite").write_text("x")
    second = new_run_dir(tmp_path, "demo")
    assert first.name == "demo" and second.name == "demo-2"
    assert (first / "record.sqlite").read_text() == "x"
    # many at once (threads racing on the same name): all distinct
    got, errors = [], []

    def make():
        try:
            got.append(new_run_dir(tmp_path, "race"))
        except Exception as e:  # noqa: BLE001 - reported below
            errors.append(e)

    threads = [threading.Thread(target=make) for _ in range(16)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    assert not errors and len(set(got)) == 16


def test_run_folder_refused_before_the_run_when_a_file_is_in_the_way(tmp_path):
    (tmp_path / "afile").write_text("")
    with pytest.raises(ConfigError, match=r"^--out: .*afile"):
        new_run_dir(tmp_path / "afile", "demo")


def test_configs_are_saved_as_resolved_toml_with_hashes(tmp_path):
    import tomllib

    from tests.conftest import MACHINES
    from host.config import load

    m = load("machine", MACHINES / "kestrel_f3_stand.toml", ["machine.ra_ohm=0.0123"])
    info = save_configs(tmp_path, {"machine": m, "converter": None})
    text = (tmp_path / "configs" / "machine.toml").read_text()
    back = tomllib.loads(text)
    assert back["machine"]["ra_ohm"] == 0.0123
    assert set(info) == {"machine"} and len(info["machine"]["sha256"]) == 64
    # every set value of the resolved config is in the copy, unchanged
    for path, value in m.values.items():
        if value is None:
            continue
        node = back
        for part in path.split("."):
            node = node[part]
        assert node == (list(value) if isinstance(value, tuple) else value), path


def test_publish_hands_over_the_callers_array_without_copying(tmp_path):
    """HostLoop's path: it keeps its own row array (doubling it when full) and publishes it."""
    data = _rows(3000)
    arr = np.zeros((256, len(COLS)))
    with RunRecorder(tmp_path / "r.sqlite", COLS, commit_interval_s=0.005) as rec:
        for k, row in enumerate(data):
            if k >= len(arr):
                arr = np.concatenate([arr, np.zeros_like(arr)])
            arr[k] = row
            rec.publish(arr, k + 1)
            if k % 500 == 0:
                time.sleep(0.02)  # let the writer read mid-run, across a doubling
        assert rec.rows_recorded == 3000
    assert np.array_equal(open_record(tmp_path / "r.sqlite").frames(), data)


def test_publish_and_frame_are_not_mixed(tmp_path):
    rec = RunRecorder(tmp_path / "r.sqlite", COLS)
    rec.frame(_rows(1)[0])
    rec.publish(_rows(5), 5)
    with pytest.raises(RecordError, match="mixed"):
        rec.close()


def test_a_reader_open_while_the_run_closes_does_not_fail_the_run(tmp_path):
    # found by tools/crash_trials.py polling a live record: the recorder's close folds the WAL
    # in and leaves WAL mode, which needs the file to itself; a reader open at that moment
    # (`dcrig runs show` on a live run) made close() raise "database is locked" and the demo
    # exit 2 after a complete run
    path = tmp_path / "r.sqlite"
    rec = RunRecorder(path, COLS, {"plant": "kestrel f3"}, block_rows=64, lossless=True)
    rows = np.arange(300 * len(COLS), dtype=float).reshape(300, len(COLS))
    for r in rows:
        rec.frame(r)
    reader = open_record(path)
    assert len(reader.frames()) <= 300  # a live read, as a user would make
    try:
        rec.close("complete")  # must not raise
    finally:
        reader.close()
    with open_record(path) as rd:
        assert rd.status == "complete"
        assert np.array_equal(rd.frames(), rows)
