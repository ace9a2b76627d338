"""The run record: frames, events and meta of one run in one crash-safe SQLite file.

Owns: the record's schema, the recorder (`RunRecorder`, fed by the real-time loop) and the
reader (`open_record`). Must never import rtmodel, host.loop or host.link: a record is read
without the model (verdicts, exports and `dcrig runs` work on an old record).

Why SQLite in WAL mode (stdlib sqlite3): a committed transaction survives a killed process
(and, with synchronous=FULL, a power loss), and a reader never sees a half-written
transaction, so a torn tail cannot be misread. `tools/bench_record.py` compares it with an
append-only raw file per chunk; the README section "The run record" has the numbers.

Layout of the file:
  meta(key, value)            JSON values: columns, software version, configs, command line
  frame_blocks(first_row, n_rows, t_first_s, t_last_s, data)
                              rows first_row .. first_row+n_rows-1 as little-endian float64,
                              row-major, len(columns) values a row; contiguous, no overlap
  events(seq, t_s, kind, text, data)   data is JSON or NULL
  run_end(id=1, status, ended_utc, frames, dropped)   written by close(); absent = unfinished

Threading: `publish(array, n)` (the host loop's path) hands over rows the caller keeps in its
own array without copying; `frame(row)` copies one row into a preallocated block and publishes
(block, first_row, n) as one tuple; the writer thread wakes every `commit_interval_s`,
writes the new rows of full blocks and of the current block, and commits. A block goes
back to the free pool only after its rows are committed, so the caller never writes into
memory the writer is reading, and no lock is taken on the caller's side. When no free block
is left the caller drops rows (counted, reported as an event) instead of waiting, unless
the recorder was opened `lossless=True` (offline runs, where waiting costs nothing).
"""

from __future__ import annotations

import collections
import json
import os
import socket
import sqlite3
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import DcrigError

APPLICATION_ID = 0x64637267  # "dcrg": marks a dcrig record among SQLite files (PRAGMA application_id)
SCHEMA_VERSION = 1
RECORD_FILE = "record.sqlite"

STATUS_COMPLETE = "complete"
STATUS_STOPPED = "stopped"
STATUS_UNFINISHED = "unfinished"  # no run_end row: the process died (or is still running)
STATUS_RUNNING = "running"  # no run_end row and the writing process is alive on this host

_SCHEMA = """
CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE frame_blocks(first_row INTEGER PRIMARY KEY, n_rows INTEGER NOT NULL,
                          t_first_s REAL, t_last_s REAL, data BLOB NOT NULL);
CREATE TABLE events(seq INTEGER PRIMARY KEY, t_s REAL NOT NULL, kind TEXT NOT NULL,
                    text TEXT NOT NULL, data TEXT);
CREATE TABLE run_end(id INTEGER PRIMARY KEY CHECK (id = 1), status TEXT NOT NULL,
                     ended_utc TEXT NOT NULL, frames INTEGER NOT NULL, dropped INTEGER NOT NULL);
"""


class RecordError(DcrigError):
    """A record cannot be written or read: message 'FILE: what is wrong'."""


def software_version() -> str:
    try:
        from importlib.metadata import version

        return version("dcrig")
    except Exception:  # not installed (PYTHONPATH checkout): say so rather than guess
        return "unknown (not installed)"


def _utc_now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())


class RunRecorder:
    """Durable recording of one run.

    Parameters
    ----------
    path : the record file (created; an existing file is refused, never overwritten)
    frame_columns : names of the float64 row's values, in order
    meta : anything JSON can hold; software version, command line, start time, pid and host
        are added
    block_rows, pool_blocks : rows per in-memory block and blocks in the pool; the pool is
        the backlog the writer may fall behind by before rows are dropped
    commit_interval_s : the writer commits at least this often (the age of the oldest
        uncommitted row is this plus one commit's time)
    synchronous : SQLite's synchronous pragma: "FULL" survives power loss, "NORMAL" only a
        killed process (a WAL commit then skips the fsync)
    lossless : wait for the writer when the pool is empty instead of dropping rows
    """

    def __init__(self, path, frame_columns, meta: dict | None = None, *, block_rows: int = 1024,
                 pool_blocks: int = 32, commit_interval_s: float = 0.05, synchronous: str = "FULL",
                 lossless: bool = False):
        self.path = Path(path)
        self.columns = tuple(str(c) for c in frame_columns)
        self.n_cols = len(self.columns)
        if self.n_cols == 0:
            raise RecordError(f"{self.path}: a record needs at least one frame column")
        if synchronous not in ("FULL", "NORMAL", "EXTRA"):
            raise RecordError(f"{self.path}: synchronous: expected FULL, NORMAL or EXTRA, got {synchronous!r}")
        self.block_rows = int(block_rows)
        self.pool_blocks = max(2, int(pool_blocks))
        self.commit_interval_s = float(commit_interval_s)
        self.lossless = lossless
        self._time_col = self.columns.index("time_s") if "time_s" in self.columns else None
        full_meta = {
            "columns": list(self.columns),
            "software_version": software_version(),
            "command_line": list(sys.argv),
            "start_utc": _utc_now(),
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "python": sys.version.split()[0],
        }
        full_meta.update(meta or {})
        if self.path.exists():
            raise RecordError(f"{self.path}: a record exists already (records are never overwritten)")
        # Built under a temporary name (schema, meta, WAL mode), closed, then linked into place:
        # a process killed while the record is being created leaves no record.sqlite at all,
        # never an empty file or one with a hot rollback journal that a reader cannot open
        # (found by tools/crash_trials.py). os.link fails when the name is taken, so a record
        # is still never overwritten.
        tmp = self.path.with_name(f".{self.path.name}.creating-{os.getpid()}")
        try:
            for leftover in (tmp, Path(f"{tmp}-journal"), Path(f"{tmp}-wal"), Path(f"{tmp}-shm")):
                leftover.unlink(missing_ok=True)
            db = sqlite3.connect(tmp, check_same_thread=False, isolation_level=None)
            try:
                db.execute("PRAGMA journal_mode=WAL")
                db.execute(f"PRAGMA application_id={APPLICATION_ID}")
                db.execute(f"PRAGMA user_version={SCHEMA_VERSION}")
                db.execute("BEGIN")
                for stmt in _SCHEMA.strip().split(";"):
                    if stmt.strip():
                        db.execute(stmt)
                db.executemany("INSERT INTO meta VALUES (?, ?)",
                               [(k, json.dumps(v, default=str)) for k, v in full_meta.items()])
                db.execute("COMMIT")
            finally:
                db.close()  # the last connection: the WAL is folded in, one file is left
            os.link(tmp, self.path)
            tmp.unlink()
            db = sqlite3.connect(self.path, check_same_thread=False, isolation_level=None)
            db.execute(f"PRAGMA synchronous={synchronous}")
            if db.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
                raise sqlite3.OperationalError("the record did not stay in WAL mode")
        except FileExistsError as err:
            tmp.unlink(missing_ok=True)
            raise RecordError(f"{self.path}: a record exists already (records are never overwritten)") from err
        except (OSError, sqlite3.Error) as err:
            tmp.unlink(missing_ok=True)
            raise RecordError(f"{self.path}: cannot create the record ({err})") from err
        self._db = db
        # caller side (the real-time thread)
        self._free = collections.deque(np.empty((self.block_rows, self.n_cols)) for _ in range(self.pool_blocks - 1))
        self._full = collections.deque()  # (block, first_row, n_rows, recycle)
        self._buf = np.empty((self.block_rows, self.n_cols))
        self._first = 0
        self._n = 0
        self._cur = (self._buf, 0, 0)
        self._dropped = 0
        self._drop_after_row = -1
        self._events = collections.deque()
        self._src = None  # (array, n) from publish()
        # writer side
        self._done = 0  # rows committed (global row index of the next row to write)
        self._dropped_reported = 0
        self._event_seq = 0
        self._error: BaseException | None = None
        self._stop = threading.Event()
        self._space = threading.Event()  # set by the writer after it freed blocks (lossless waits)
        self._closed = False
        self.wal_left = False  # True when close() could not fold the WAL in (a reader had the file open)
        self.status: str | None = None
        self._writer = threading.Thread(target=self._write_loop, name="dcrig-record-writer", daemon=True)
        self._writer.start()

    # ------------------------------------------------------------------ caller side
    def frame(self, row) -> None:
        """Record one row (copied). O(1), no disk I/O, never blocks unless lossless."""
        n = self._n
        if n == self.block_rows:
            if not self._free:
                while not self._free and self._wait_for_space():
                    pass
                if not self._free:
                    self._count_drop(1)
                    return
            self._full.append((self._buf, self._first, n, True))
            self._first += n
            self._buf = self._free.popleft()
            n = 0
        buf = self._buf
        buf[n] = row
        n += 1
        self._n = n
        self._cur = (buf, self._first, n)  # published after the copy: the writer sees whole rows

    def publish(self, rows: np.ndarray, n_rows: int) -> None:
        """Zero-copy hand-off for a caller that keeps its own row array (HostLoop does): rows
        0..n_rows-1 of `rows` are final and are never written again. O(1): one tuple store, no
        copy; the writer reads the new rows from the caller's array at its next commit. When
        the caller grows its array it publishes the new one (the old one stays valid for a
        writer still reading it). Not to be mixed with frame() in one recorder."""
        self._src = (rows, n_rows)

    def frame_block(self, rows: np.ndarray) -> None:
        """Record many rows at once (offline runs): the block is copied and queued whole."""
        rows = np.ascontiguousarray(rows, dtype=np.float64)
        if rows.ndim != 2 or rows.shape[1] != self.n_cols:
            raise RecordError(f"{self.path}: frame_block: expected rows of {self.n_cols} values, got shape {rows.shape}")
        if len(rows) == 0:
            return
        if self._n:  # hand off the partial block first, so the order of rows stays the order of calls
            while not self._free and self._wait_for_space():
                pass
            if not self._free:
                self._count_drop(len(rows))
                return
            self._full.append((self._buf, self._first, self._n, True))
            self._first += self._n
            self._buf = self._free.popleft()
            self._n = 0
            self._cur = (self._buf, self._first, 0)
        while len(self._full) >= self.pool_blocks:  # the same backlog bound as for single rows
            if not self._wait_for_space():
                self._count_drop(len(rows))
                return
        self._full.append((rows.copy(), self._first, len(rows), False))
        self._first += len(rows)
        self._cur = (self._buf, self._first, 0)

    def _count_drop(self, n: int) -> None:
        if self._drop_after_row < 0:
            self._drop_after_row = self._first + self._n
        self._dropped += n

    def _wait_for_space(self) -> bool:
        if not self.lossless or self._error is not None:
            return False
        self._space.clear()
        self._space.wait(1.0)  # the writer sets it every commit; re-checked by the caller
        return True

    def event(self, t_s: float, kind: str, text: str, **data) -> None:
        """Record an event (operator input, trip, link error, ...). Cheap; written with the next commit."""
        self._events.append((float(t_s), str(kind), str(text), json.dumps(data, default=str) if data else None))

    @property
    def rows_recorded(self) -> int:
        src = self._src
        return src[1] if src is not None else self._first + self._n

    @property
    def dropped(self) -> int:
        return self._dropped

    def close(self, status: str = STATUS_COMPLETE) -> None:
        """Write the remaining rows and the run's end status ('complete', 'stopped', 'error: ...')."""
        if self._closed:
            return
        self._closed = True
        self._stop.set()
        self._writer.join(30.0)
        err = self._error
        try:
            if err is None and not self._writer.is_alive():
                self._db.execute("BEGIN")
                self._db.execute("INSERT INTO run_end VALUES (1, ?, ?, ?, ?)",
                                 (str(status), _utc_now(), self._done, self._dropped))
                self._db.execute("COMMIT")
                self.status = str(status)  # the record is whole and durable from here
                self._fold_wal()
        except sqlite3.Error as e:
            err = e
        finally:
            if not self._writer.is_alive():
                self._db.close()
        if err is not None:
            raise RecordError(f"{self.path}: writing the record failed ({err})") from err
        if self._writer.is_alive():
            raise RecordError(f"{self.path}: the record writer did not finish within 30 s")

    def _fold_wal(self) -> None:
        """Fold the WAL into the main file and leave WAL mode, so record.sqlite alone is the
        whole record (no -wal/-shm files beside it, readers create none). That needs the file
        to itself: while a reader has it open (`dcrig runs show` on a live run) SQLite answers
        "database is locked", and the record then stays in WAL mode, complete and readable
        (the -wal file beside it holds its last pages). Never a reason to fail the run."""
        for attempt in range(10):
            try:
                self._db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
                self._db.execute("PRAGMA journal_mode=DELETE")
                self.wal_left = False
                return
            except sqlite3.OperationalError as e:
                if "locked" not in str(e) and "busy" not in str(e):
                    raise
                time.sleep(0.05)  # a reader that is just closing gets half a second
        self.wal_left = True

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.close(STATUS_COMPLETE)
        elif issubclass(exc_type, KeyboardInterrupt):
            self.close(STATUS_STOPPED)
        else:
            self.close(f"error: {exc_type.__name__}: {exc}")
        return False

    # ------------------------------------------------------------------ writer thread
    def _write_loop(self) -> None:
        while True:
            stopping = self._stop.wait(self.commit_interval_s)
            try:
                self._commit_new()
            except BaseException as err:  # disk full, I/O error: keep the loop running, rows get dropped
                self._error = err
                self._space.set()
                return
            if stopping:
                return

    def _commit_new(self) -> None:
        pieces = []
        recycle = []
        while self._full:
            buf, first, n, back = self._full.popleft()
            self._take(pieces, buf, first, n)
            if back:
                recycle.append(buf)
        src = self._src
        if src is not None:
            if self._first + self._n:
                raise RecordError(f"{self.path}: publish() and frame() mixed in one recorder")
            self._take(pieces, src[0], 0, src[1])
        else:
            buf, first, n = self._cur
            self._take(pieces, buf, first, n)
        events = []
        while self._events:
            events.append(self._events.popleft())
        dropped = self._dropped
        if dropped != self._dropped_reported:
            t = pieces[-1][3] if pieces and pieces[-1][3] is not None else 0.0
            events.append((t, "recorder", f"dropped {dropped - self._dropped_reported} frames after row "
                           f"{self._drop_after_row}: the disk did not keep up (total dropped {dropped})",
                           json.dumps({"dropped_total": dropped, "after_row": self._drop_after_row})))
            self._dropped_reported = dropped
            self._drop_after_row = -1
        if pieces or events:
            db = self._db
            db.execute("BEGIN")
            if pieces:
                db.executemany("INSERT INTO frame_blocks VALUES (?, ?, ?, ?, ?)", pieces)
            if events:
                seq0 = self._event_seq
                db.executemany("INSERT INTO events VALUES (?, ?, ?, ?, ?)",
                               [(seq0 + k, *e) for k, e in enumerate(events)])
                self._event_seq += len(events)
            db.execute("COMMIT")
        for b in recycle:
            self._free.append(b)
        self._space.set()

    def _take(self, pieces: list, buf: np.ndarray, first: int, n: int) -> None:
        start = self._done - first
        if start >= n:
            return
        rows = np.ascontiguousarray(buf[start:n], dtype=np.float64)
        if rows.shape[1] != self.n_cols:
            raise RecordError(f"{self.path}: rows of {rows.shape[1]} values, the record has {self.n_cols} columns")
        tc = self._time_col
        t0 = float(rows[0, tc]) if tc is not None else None
        t1 = float(rows[-1, tc]) if tc is not None else None
        pieces.append((self._done, len(rows), t0, t1, rows.astype("<f8", copy=False).tobytes()))
        self._done = first + n


# ---------------------------------------------------------------------- reading
@dataclass(frozen=True)
class RunEnd:
    status: str
    ended_utc: str
    frames: int
    dropped: int


def _pid_alive(pid) -> bool:
    try:
        os.kill(int(pid), 0)
    except (OSError, ValueError, TypeError):
        return False
    return True


class RecordReader:
    """A record opened for reading. Never changes the file's content."""

    def __init__(self, path: Path, db: sqlite3.Connection):
        self.path = path
        self._db = db
        try:
            self.meta = {k: json.loads(v) for k, v in db.execute("SELECT key, value FROM meta")}
            self.columns = tuple(self.meta["columns"])
            end = db.execute("SELECT status, ended_utc, frames, dropped FROM run_end").fetchone()
        except (sqlite3.Error, KeyError, ValueError) as err:
            raise RecordError(f"{path}: not a readable dcrig record ({err})") from err
        self.end = RunEnd(*end) if end else None
        self.R = {name: k for k, name in enumerate(self.columns)}

    @property
    def status(self) -> str:
        """'complete', 'stopped', 'error: ...' as closed; 'unfinished' when the run never closed
        (killed, power lost), 'running' when the writing process is still alive on this host."""
        if self.end is not None:
            return self.end.status
        if self.meta.get("host") == socket.gethostname() \
                and _pid_alive(self.meta.get("pid")):
            return STATUS_RUNNING
        return STATUS_UNFINISHED

    @property
    def finished(self) -> bool:
        return self.end is not None

    def frames(self, t_from_s: float | None = None, t_to_s: float | None = None) -> np.ndarray:
        """All committed rows (n_rows, len(columns)) in order; optionally only t_from..t_to (s)."""
        n_cols = len(self.columns)
        parts = []
        expect = 0
        try:
            q = "SELECT first_row, n_rows, data FROM frame_blocks"
            args: tuple = ()
            if t_from_s is not None or t_to_s is not None:
                q += " WHERE t_last_s >= ? AND t_first_s <= ?"
                args = (-np.inf if t_from_s is None else t_from_s, np.inf if t_to_s is None else t_to_s)
            for first, n, data in self._db.execute(q + " ORDER BY first_row", args):
                if not args and first != expect:
                    raise RecordError(f"{self.path}: frame rows {expect}..{first - 1} are missing (a damaged record)")
                if len(data) != n * n_cols * 8:
                    raise RecordError(f"{self.path}: frame block at row {first} has {len(data)} bytes, "
                                      f"expected {n * n_cols * 8} (a damaged record)")
                parts.append(np.frombuffer(data, dtype="<f8").reshape(n, n_cols))
                expect = first + n
        except sqlite3.Error as err:
            raise RecordError(f"{self.path}: not a readable dcrig record ({err})") from err
        rows = np.concatenate(parts) if parts else np.zeros((0, n_cols))
        if args and "time_s" in self.R and len(rows):
            t = rows[:, self.R["time_s"]]
            rows = rows[(t >= args[0]) & (t <= args[1])]
        return rows.astype(np.float64, copy=True)

    def iter_frames(self, t_from_s: float | None = None, t_to_s: float | None = None):
        """The committed rows block by block (arrays of up to a few thousand rows), in order:
        for exports of long runs without holding the whole record in memory."""
        n_cols = len(self.columns)
        tc = self.R.get("time_s")
        lo = -np.inf if t_from_s is None else t_from_s
        hi = np.inf if t_to_s is None else t_to_s
        expect = 0
        try:
            cur = self._db.execute("SELECT first_row, n_rows, data FROM frame_blocks ORDER BY first_row")
            for first, n, data in cur:
                if first != expect or len(data) != n * n_cols * 8:
                    raise RecordError(f"{self.path}: frame block at row {first} is damaged or out of place")
                expect = first + n
                rows = np.frombuffer(data, dtype="<f8").reshape(n, n_cols).astype(np.float64)
                if tc is not None and (t_from_s is not None or t_to_s is not None):
                    t = rows[:, tc]
                    rows = rows[(t >= lo) & (t <= hi)]
                if len(rows):
                    yield rows
        except sqlite3.Error as err:
            raise RecordError(f"{self.path}: not a readable dcrig record ({err})") from err

    def column(self, name: str, rows: np.ndarray | None = None) -> np.ndarray:
        if name not in self.R:
            raise RecordError(f"{self.path}: no frame column '{name}' (columns: {', '.join(self.columns)})")
        rows = self.frames() if rows is None else rows
        return rows[:, self.R[name]]

    def events(self, with_data: bool = False) -> list:
        """[(t_s, kind, text)] in recorded order; with_data=True adds a dict as a fourth item."""
        try:
            cur = self._db.execute("SELECT t_s, kind, text, data FROM events ORDER BY seq")
            if with_data:
                return [(t, k, x, json.loads(d) if d else {}) for t, k, x, d in cur]
            return [(t, k, x) for t, k, x, _ in cur]
        except (sqlite3.Error, ValueError) as err:
            raise RecordError(f"{self.path}: not a readable dcrig record ({err})") from err

    def close(self) -> None:
        self._db.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


def open_record(path) -> RecordReader:
    """Open a record file (or a run folder holding record.sqlite). Bad or foreign files raise
    RecordError with one line."""
    path = Path(path)
    if path.is_dir():
        path = path / RECORD_FILE
    if not path.is_file():
        raise RecordError(f"{path}: no such record file")
    try:
        with path.open("rb") as fh:
            head = fh.read(16)
    except OSError as err:
        raise RecordError(f"{path}: cannot read ({err.strerror})") from err
    if head != b"SQLite format 3\x00":
        raise RecordError(f"{path}: not a dcrig record (not an SQLite file)")
    try:
        # read-only: a reader never changes a record (a killed run's WAL is read, not folded in)
        db = sqlite3.connect(f"file:{path}?mode=ro", uri=True, check_same_thread=False)
        app_id = db.execute("PRAGMA application_id").fetchone()[0]
        version = db.execute("PRAGMA user_version").fetchone()[0]
    except sqlite3.Error as err:
        if Path(f"{path}-journal").exists():  # records made before the fix of creation (above)
            raise RecordError(f"{path}: the run was killed while its record was being created "
                              f"(a rollback journal is left beside it); it holds no frames") from err
        raise RecordError(f"{path}: not a readable dcrig record ({err})") from err
    if app_id != APPLICATION_ID:
        db.close()
        raise RecordError(f"{path}: not a dcrig record (an SQLite file of another application)")
    if version != SCHEMA_VERSION:
        db.close()
        raise RecordError(f"{path}: record schema version {version}, this dcrig reads {SCHEMA_VERSION}")
    return RecordReader(path, db)
