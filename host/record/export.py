"""Exports of a run record: CSV (frames.csv, events.csv) and COMTRADE (.cfg + .dat).

Owns: windows of a record (around an event, or between two times), the CSV writers, and the
COMTRADE writer for IEEE C37.111-1999 and C37.111-2013 / IEC 60255-24, ASCII and binary
(16-bit) data. Reads a RecordReader only; never imports rtmodel (flag names come from the
record's meta, written by the run that knew them). Every file is written whole or not at all
(temporary file, then rename), so an interrupt never leaves a cut export.

COMTRADE, as written here (clause numbers of C37.111-2013 from memory):
  * .cfg: station_name,rec_dev_id,rev_year / TT,##A,##D / one line per analog channel
    An,ch_id,ph,ccbm,uu,a,b,skew,min,max,primary,secondary,PS / one line per status channel
    Dn,ch_id,ph,ccbm,y / lf / nrates / samp,endsamp / first sample time / trigger time /
    ft / timemult, and for 2013 also time_code,local_code and tmq_code,leapsec.
  * value = a * sample + b, samples integers in [-32767, 32767] for both data formats
    (-32768 is the binary "missing" code, so it is never used for a value); a and b are
    chosen per channel from the window's min and max, so the resolution is a (half of it
    after rounding), printed in the .cfg.
  * .dat ASCII: n,timestamp,A1..An,D1..Dm per line; binary: uint32 n, uint32 timestamp,
    int16 per analog channel, the status channels packed 16 to a uint16 word, first
    channel in the least significant bit, all little-endian.
  * timestamps in microseconds times timemult from the first sample; nrates 1 with the frame
    rate when the window is evenly sampled, else nrates 0 (timestamps are then the times).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import math
import re
import struct
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .rundir import AtomicTextFile, write_atomic
from .store import RecordError, RecordReader

REVISIONS = ("1999", "2013")
SAMPLE_MAX = 32767  # |sample| limit for analog values (C37.111: int16 binary, -32768 = missing)

# unit suffix of a column name -> the unit written in the COMTRADE uu field
UNIT_SUFFIXES = (
    ("_us", "us"), ("_s", "s"), ("_A", "A"), ("_V", "V"), ("_rpm", "r/min"), ("_Nm", "N m"),
    ("_C", "degC"), ("_deg", "deg"), ("_Hz", "Hz"), ("_pu", "pu"), ("_ohm", "ohm"), ("_rad", "rad"),
    ("_W", "W"), ("_kW", "kW"), ("_H", "H"),
)  # fmt: skip
# columns that are bit fields or yes/no values: exported as status channels, never as analog
FLAG_COLUMNS = ("model_status", "host_status", "status")
BOOL_COLUMNS = ("controller_trip", "link_ok", "contactor_cmd")


def unit_of(column: str) -> str:
    for suffix, unit in UNIT_SUFFIXES:
        if column.endswith(suffix):
            return unit
    return ""


# ---------------------------------------------------------------------- windows
@dataclass(frozen=True)
class Window:
    name: str  # used in file names: "trip-1", "window", "run"
    t_from_s: float
    t_to_s: float
    trigger_s: float
    why: str  # "controller tripped, code 3 at 4.123 s"


def windows(reader: RecordReader, *, around: str | None = None, t_from_s: float | None = None,
            t_to_s: float | None = None, pre_s: float = 0.5, post_s: float = 1.0) -> list[Window]:
    """The windows to export.

    around: an event kind ("trip", "operator", ...) or "kind:words" (the event's text contains
        the words); one window per matching event, pre_s before and post_s after it
    t_from_s / t_to_s: one window between two model times (the trigger at t_from_s)
    neither: a window around each trip event, or the whole run when nothing tripped
    """
    for name, v in (("--pre", pre_s), ("--post", post_s)):
        if not (math.isfinite(v) and v >= 0):
            raise RecordError(f"{reader.path}: {name}: must be a finite time >= 0 s, got {v!r}")
    rows_t = reader.column("time_s") if "time_s" in reader.R else None
    if rows_t is None or len(rows_t) == 0:
        raise RecordError(f"{reader.path}: the record holds no frames to export")
    t0, t1 = float(rows_t[0]), float(rows_t[-1])
    if around is not None and (t_from_s is not None or t_to_s is not None):
        raise RecordError(f"{reader.path}: --around and --from/--to: give one or the other")
    if t_from_s is not None or t_to_s is not None:
        a = t0 if t_from_s is None else float(t_from_s)
        b = t1 if t_to_s is None else float(t_to_s)
        if not (math.isfinite(a) and math.isfinite(b) and a < b):
            raise RecordError(f"{reader.path}: --from/--to: need from < to, got {a!r} and {b!r}")
        if b < t0 or a > t1:
            raise RecordError(f"{reader.path}: --from/--to: {a:g}..{b:g} s is outside the record ({t0:g}..{t1:g} s)")
        return [Window("window", a, b, a, f"{a:g} s to {b:g} s")]
    kind, words = ("trip", None) if around is None else (around.split(":", 1) + [None])[:2]
    found = [e for e in reader.events() if e[1] == kind and (words is None or words in e[2])]
    if not found:
        if around is None:
            return [Window("run", t0, t1, t0, "the whole run (nothing tripped)")]
        kinds = sorted({e[1] for e in reader.events()})
        raise RecordError(f"{reader.path}: --around: no event '{around}' in the record "
                          f"(event kinds: {', '.join(kinds) if kinds else 'none'})")
    safe = re.sub(r"[^A-Za-z0-9_-]+", "_", kind)
    return [Window(f"{safe}-{k + 1}", max(t0, e[0] - pre_s), min(t1, e[0] + post_s), e[0], f"{e[2]} at {e[0]:.6f} s")
            for k, e in enumerate(found)]


# ---------------------------------------------------------------------- CSV
def export_frames_csv(reader: RecordReader, path, columns=None, t_from_s=None, t_to_s=None) -> Path:
    """frames.csv as the runs always wrote it: a header of column names, values as %.6g.
    Streamed block by block from the record, written whole or not at all."""
    names = list(reader.columns) if columns is None else list(columns)
    missing = [c for c in names if c not in reader.R]
    if missing:
        raise RecordError(f"{reader.path}: no frame column '{missing[0]}'")
    idx = [reader.R[c] for c in names]
    fmt = ",".join(["%.6g"] * len(idx))
    with AtomicTextFile(path) as fh:
        fh.write(",".join(names) + "\r\n")  # CRLF as csv.writer (RFC 4180), as the runs always wrote
        for rows in reader.iter_frames(t_from_s, t_to_s):
            np.savetxt(fh, rows[:, idx], fmt=fmt, delimiter=",", newline="\r\n")
    return Path(path)


def export_events_csv(reader: RecordReader, path, t_from_s=None, t_to_s=None) -> Path:
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["time_s", "kind", "text"])
    for t, kind, text in reader.events():
        if (t_from_s is None or t >= t_from_s) and (t_to_s is None or t <= t_to_s):
            w.writerow([f"{t:.6f}", kind, text])
    write_atomic(Path(path), buf.getvalue())
    return Path(path)


# ---------------------------------------------------------------------- COMTRADE
def _status_channels(reader: RecordReader) -> list[tuple[str, int, int]]:
    """(channel name, column index, bit) for every flag bit the record's meta names, and every
    yes/no column; bit -1 means "the column is nonzero"."""
    out = []
    bits = reader.meta.get("status_bits", {})
    for col in reader.columns:
        if col in bits:
            for bit, name in sorted(((int(b), n) for b, n in bits[col].items())):
                out.append((f"{col}.{name}", reader.R[col], bit))
        elif col in BOOL_COLUMNS:
            out.append((col, reader.R[col], -1))
    return out


def _analog_columns(reader: RecordReader) -> list[str]:
    return [c for c in reader.columns if c != "time_s" and c not in FLAG_COLUMNS and c not in BOOL_COLUMNS]


def scaling(values: np.ndarray) -> tuple[float, float]:
    """(a, b) so that value = a * sample + b with samples in [-SAMPLE_MAX, SAMPLE_MAX]."""
    lo, hi = float(np.min(values)), float(np.max(values))
    b = (hi + lo) / 2.0
    a = (hi - lo) / (2.0 * SAMPLE_MAX)
    if not a > 0 or not math.isfinite(a):
        a = max(abs(b), 1.0) / SAMPLE_MAX  # a constant channel: any a works, keep it small
    return a, b


def _fmt(v: float) -> str:
    return repr(float(v))  # shortest text that reads back to the same float64


def _stamp(start: dt.datetime, t_s: float) -> str:
    t = start + dt.timedelta(seconds=t_s)
    return t.strftime("%d/%m/%Y,%H:%M:%S.%f")


def export_comtrade(reader: RecordReader, folder, window: Window, *, revision: str = "1999",
                    binary: bool = False, station: str | None = None) -> tuple[Path, Path]:
    """Write <folder>/<window.name>.cfg and .dat; returns their paths."""
    if revision not in REVISIONS:
        raise RecordError(f"{reader.path}: --revision: expected one of {', '.join(REVISIONS)}, got {revision!r}")
    rows = reader.frames(window.t_from_s, window.t_to_s)
    if len(rows) == 0:
        raise RecordError(f"{reader.path}: no frames between {window.t_from_s:g} and {window.t_to_s:g} s")
    if not np.all(np.isfinite(rows)):
        raise RecordError(f"{reader.path}: the window holds non-finite values; COMTRADE has no code for them")
    t = rows[:, reader.R["time_s"]]
    analog = _analog_columns(reader)
    status = _status_channels(reader)
    n = len(rows)
    # time stamps: microseconds from the first sample, times timemult so a uint32 holds them
    span_us = (t[-1] - t[0]) * 1e6
    timemult = 1.0 if span_us < 4.0e9 else math.ceil(span_us / 4.0e9)
    stamps = np.rint((t - t[0]) * 1e6 / timemult).astype(np.int64)
    steps = np.diff(t)
    even = n < 3 or (np.max(steps) - np.min(steps)) <= 1e-6 * max(np.median(steps), 1e-12)
    if even and n >= 2:
        rate_line = ["1", f"{_fmt(1.0 / np.median(steps))},{n}"]
    else:
        rate_line = ["0", f"0,{n}"]
    meta = reader.meta
    start_utc = meta.get("start_utc")
    try:
        start = dt.datetime.strptime(start_utc, "%Y-%m-%dT%H:%M:%SZ")
    except (TypeError, ValueError):
        start = dt.datetime(2000, 1, 1)
    name = (station or meta.get("machine") or meta.get("run_name") or "dcrig run").replace(",", " ")
    device = f"dcrig {meta.get('software_version', '')}".strip().replace(",", " ")
    lines = [f"{name},{device},{revision}", f"{len(analog) + len(status)},{len(analog)}A,{len(status)}D"]
    samples = np.zeros((n, len(analog)), dtype=np.int64)
    for k, col in enumerate(analog):
        v = rows[:, reader.R[col]]
        a, b = scaling(v)
        samples[:, k] = np.clip(np.rint((v - b) / a), -SAMPLE_MAX, SAMPLE_MAX)
        lines.append(f"{k + 1},{col},,,{unit_of(col)},{_fmt(a)},{_fmt(b)},0,{-SAMPLE_MAX},{SAMPLE_MAX},1,1,P")
    bits = np.zeros((n, len(status)), dtype=np.int64)
    for k, (ch, ci, bit) in enumerate(status):
        col = rows[:, ci]
        bits[:, k] = (col != 0) if bit < 0 else ((col.astype(np.int64) >> bit) & 1)
        lines.append(f"{k + 1},{ch},,,0")
    lines.append(_fmt(meta.get("mains_hz", 50.0)))
    lines += rate_line
    lines.append(_stamp(start, float(t[0])))
    lines.append(_stamp(start, float(window.trigger_s)))
    lines.append("BINARY" if binary else "ASCII")
    lines.append(_fmt(timemult))
    if revision == "2013":
        # time_code,local_code: UTC, no local offset; tmq_code F: the PC clock is not a
        # synchronised time source; leapsec 0: no leap second in the record (from memory)
        lines.append("0,0")
        lines.append("F,0")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    cfg_path = folder / f"{window.name}.cfg"
    dat_path = folder / f"{window.name}.dat"
    if binary:
        n_words = (len(status) + 15) // 16
        words = np.zeros((n, n_words), dtype=np.int64)
        for k in range(len(status)):
            words[:, k // 16] |= bits[:, k] << (k % 16)
        rec = np.dtype([("n", "<u4"), ("t", "<u4"), ("a", "<i2", (len(analog),)), ("d", "<u2", (n_words,))])
        out = np.zeros(n, dtype=rec)
        out["n"] = np.arange(1, n + 1)
        out["t"] = stamps
        out["a"] = samples
        out["d"] = words
        dat: bytes | str = out.tobytes()
    else:
        body = io.StringIO()
        for i in range(n):
            body.write(f"{i + 1},{stamps[i]}")
            for v in samples[i]:
                body.write(f",{v}")
            for v in bits[i]:
                body.write(f",{v}")
            body.write("\r\n")
        dat = body.getvalue()
    # the .dat first: a .cfg never names data that is not there
    write_atomic(dat_path, dat)
    write_atomic(cfg_path, "\r\n".join(lines) + "\r\n")
    return cfg_path, dat_path


def resolution(reader: RecordReader, window: Window) -> dict:
    """Per analog channel, the a factor of the export (the value step of one sample)."""
    rows = reader.frames(window.t_from_s, window.t_to_s)
    return {c: scaling(rows[:, reader.R[c]])[0] for c in _analog_columns(reader)}


def check_comtrade_pair(cfg_path) -> None:
    """Refuse a COMTRADE pair we cannot use with one line: missing .dat, wrong channel
    counts, a .dat whose size or lines do not match the .cfg, unsorted time stamps."""
    cfg_path = Path(cfg_path)
    if not cfg_path.is_file():
        raise RecordError(f"{cfg_path}: no such COMTRADE .cfg file")
    dat_path = cfg_path.with_suffix(".dat")
    if not dat_path.is_file():
        alt = cfg_path.with_suffix(".DAT")
        if not alt.is_file():
            raise RecordError(f"{cfg_path}: the data file {dat_path.name} is missing")
        dat_path = alt
    try:
        text = cfg_path.read_text(encoding="utf-8", errors="strict").replace("\r\n", "\n").split("\n")
        tt, na, nd = text[1].split(",")[:3]
        tt, na, nd = int(tt), int(na.strip().rstrip("Aa")), int(nd.strip().rstrip("Dd"))
    except (OSError, UnicodeDecodeError, IndexError, ValueError) as err:
        raise RecordError(f"{cfg_path}: not a COMTRADE .cfg (line 2 must be TT,##A,##D)") from err
    if tt != na + nd:
        raise RecordError(f"{cfg_path}: channel counts: TT is {tt} but {na}A + {nd}D = {na + nd}")
    try:
        rest = text[2 + tt:]
        nrates = int(rest[1])
        endsamp = int(rest[2 + max(nrates, 1) - 1].split(",")[1])
        ft = rest[2 + max(nrates, 1) + 2].strip().upper()
    except (IndexError, ValueError) as err:
        raise RecordError(f"{cfg_path}: not a COMTRADE .cfg (the sample rate lines are missing)") from err
    if len([ln for ln in text[2:2 + tt] if ln.strip()]) != tt:
        raise RecordError(f"{cfg_path}: channel counts: line 2 says {tt} channels, fewer channel lines follow")
    if ft == "ASCII":
        data = [ln for ln in dat_path.read_text(encoding="utf-8", errors="replace").splitlines() if ln.strip()]
        if len(data) != endsamp:
            raise RecordError(f"{dat_path}: {len(data)} samples, the .cfg says {endsamp}")
        width = {len(ln.split(",")) for ln in data}
        if width != {2 + tt}:
            raise RecordError(f"{dat_path}: wrong channel count: lines of {sorted(width)} values, expected {2 + tt}")
        stamps = [int(ln.split(",")[1]) for ln in data]
    elif ft == "BINARY":
        size = 8 + 2 * na + 2 * ((nd + 15) // 16)
        raw = dat_path.read_bytes()
        if len(raw) != size * endsamp:
            raise RecordError(f"{dat_path}: {len(raw)} bytes, the .cfg says {endsamp} samples of {size} bytes")
        stamps = [struct.unpack_from("<I", raw, k * size + 4)[0] for k in range(endsamp)]
    else:
        raise RecordError(f"{cfg_path}: data format {ft!r}: dcrig reads ASCII and BINARY")
    if any(b < a for a, b in zip(stamps, stamps[1:])):
        raise RecordError(f"{dat_path}: time stamps are not sorted")
