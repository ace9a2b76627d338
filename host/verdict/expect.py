"""Expectations of a scenario, judged on a record: PASS or FAIL with the measured figure and its margin.

Times: a timeline instant is the time of its event in the record (kind "timeline", text
"<id>: ..."). A controller trip is dated at the start of the frame its tripping command took
effect in: the command recorded in row k was computed from the feedback at the end of row
k-1, so trip time = time of row k - one frame period. With a protection that trips d after
the fault, the measured reaction time is then d plus at most one frame period (the frame in
which the fault became visible to the controller).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass
class ExpectResult:
    name: str
    kind: str
    passed: bool
    text: str  # one line, what was measured against what
    measured: float = math.nan  # the figure a baseline keeps (ms, s, or the signal's unit)
    limit: float = math.nan
    margin: float = math.nan  # limit - measured (positive: room left)
    unit: str = ""
    window: tuple[float, float] | None = None  # for plots: the judged time window (s)
    at_s: float = math.nan  # the reference instant, for plots


def event_time(events, ident: str) -> float | None:
    """Model time of the first timeline event with this id, or None."""
    for t, kind, text in events:
        if kind == "timeline" and text.split(":", 1)[0] == ident:
            return float(t)
    return None


def first_trip(frames: np.ndarray, col: dict, period_s: float):
    """(row index, trip time s, code) of the first frame with the controller's trip flag, or None."""
    if not len(frames):
        return None
    k = np.nonzero(frames[:, col["controller_trip"]] > 0.5)[0]
    if not len(k):
        return None
    i = int(k[0])
    return i, float(frames[i, col["time_s"]]) - period_s, int(round(frames[i, col["trip_code"]]))


def judge_expectations(frames: np.ndarray, columns, events, meta: dict, expects, harm_results=()) -> list[ExpectResult]:
    col = {c: k for k, c in enumerate(columns)}
    period = float(meta["frame_period_s"])
    classes = {int(k): v for k, v in meta.get("trip_classes", {}).items()}
    t = frames[:, col["time_s"]] if len(frames) else np.zeros(0)
    t_end = float(t[-1]) if len(t) else 0.0
    trip = first_trip(frames, col, period)
    out = []
    for e in expects:
        out.append(_one(e, frames, col, t, t_end, events, period, classes, trip, harm_results))
    return out


def _one(e, frames, col, t, t_end, events, period, classes, trip, harm_results) -> ExpectResult:
    R = ExpectResult
    if e.kind == "harm":
        hit = [h for h in harm_results if h.check == e.check and h.flagged]
        if hit:
            return R(e.name, e.kind, True, f"harm check {e.check} flagged as expected: {hit[0].text}",
                     at_s=hit[0].t_s)
        return R(e.name, e.kind, False, f"harm check {e.check} expected to flag this run, did not")
    if e.kind == "trip":
        t0 = event_time(events, e.after)
        limit = e.within_ms
        if t0 is None:
            return R(e.name, e.kind, False, f"event '{e.after}' is not in the record (run ended before it?)",
                     limit=limit, unit="ms")
        win = (t0, t0 + limit * 1e-3)
        if trip is None:
            return R(e.name, e.kind, False, f"no trip at all; expected {e.trip_class} within {limit:g} ms of "
                     f"'{e.after}' at {t0:.3f} s", limit=limit, unit="ms", window=win, at_s=t0)
        _, tt, code = trip
        cls = classes.get(code, f"unmapped code {code}")
        ms = (tt - t0) * 1e3
        if tt < t0 - 1e-9:
            return R(e.name, e.kind, False, f"tripped {cls} (code {code}) at {tt:.4f} s, before '{e.after}' at "
                     f"{t0:.4f} s", ms, limit, limit - ms, "ms", win, t0)
        if cls != e.trip_class:
            return R(e.name, e.kind, False, f"first trip was {cls} (code {code}) after {ms:.1f} ms, expected "
                     f"{e.trip_class}", ms, limit, limit - ms, "ms", win, t0)
        ok = ms <= limit + 1e-9
        return R(e.name, e.kind, ok, f"{cls} trip (code {code}) {ms:.1f} ms after '{e.after}' "
                 f"({'within' if ok else 'later than'} {limit:g} ms, margin {limit - ms:+.1f} ms)",
                 ms, limit, limit - ms, "ms", win, t0)
    if e.kind == "no_trip":
        lo, hi = e.from_s, min(e.to_s, t_end)
        if trip is not None and lo - 1e-9 <= trip[1] <= hi + 1e-9:
            cls = classes.get(trip[2], f"code {trip[2]}")
            return R(e.name, e.kind, False, f"tripped {cls} (code {trip[2]}) at {trip[1]:.3f} s inside "
                     f"{lo:g}..{hi:g} s", window=(lo, hi))
        return R(e.name, e.kind, True, f"no trip in {lo:g}..{hi:g} s", window=(lo, hi))
    if e.kind == "bounds":
        t0 = 0.0
        if e.after:
            t0 = event_time(events, e.after)
            if t0 is None:
                return R(e.name, e.kind, False, f"event '{e.after}' is not in the record")
        lo, hi = t0 + e.from_s, min(t0 + e.to_s, t_end)
        sel = (t >= lo - 1e-9) & (t <= hi + 1e-9)
        if not np.any(sel):
            return R(e.name, e.kind, False, f"no frames in {lo:g}..{hi:g} s", window=(lo, hi))
        x = frames[sel, col[e.signal]]
        xmin, xmax = float(np.min(x)), float(np.max(x))
        m_lo = xmin - e.min if math.isfinite(e.min) else math.inf
        m_hi = e.max - xmax if math.isfinite(e.max) else math.inf
        ok = m_lo >= 0 and m_hi >= 0
        # the figure kept for baselines: the extreme on the bounded side nearest its limit
        if m_hi <= m_lo:
            measured, limit, margin = xmax, e.max, m_hi
        else:
            measured, limit, margin = xmin, e.min, m_lo
        where = t[sel][np.argmax(x) if m_hi <= m_lo else np.argmin(x)]
        return R(e.name, e.kind, ok, f"{e.signal} in {xmin:.4g}..{xmax:.4g} over {lo:.3g}..{hi:.3g} s "
                 f"(bounds {e.min:g}..{e.max:g}; nearest {measured:.4g} at {where:.3f} s, margin {margin:+.4g})",
                 measured, limit, margin, "", (lo, hi), float(where))
    if e.kind == "settles":
        hi = min(e.to_s, t_end)
        sel = t <= hi + 1e-9
        t = t[sel]
        t_end = hi
        x = frames[sel, col[e.signal]]
        out_band = np.abs(x - e.target) > e.band
        bad = np.nonzero(out_band)[0]
        if len(t) == 0:
            return R(e.name, e.kind, False, "no frames")
        if not len(bad):
            settled = float(t[0])
        elif bad[-1] + 1 < len(t):
            settled = float(t[bad[-1] + 1])
        else:
            return R(e.name, e.kind, False, f"{e.signal} not within {e.target:g} +/- {e.band:g} at the end "
                     f"of the window at {t_end:.3g} s ({x[-1]:.4g})", limit=e.by_s, unit="s", window=(e.by_s, t_end))
        ok = settled <= e.by_s + 1e-9
        return R(e.name, e.kind, ok, f"{e.signal} within {e.target:g} +/- {e.band:g} from {settled:.3f} s on "
                 f"(required by {e.by_s:g} s, margin {e.by_s - settled:+.3f} s)", settled, e.by_s,
                 e.by_s - settled, "s", (e.by_s, t_end), settled)
    if e.kind == "current_zero":
        if trip is None:
            return R(e.name, e.kind, False, "no trip: nothing to return to zero after", limit=e.within_ms, unit="ms")
        k, tt, _ = trip
        ia = np.abs(frames[:, col["armature_current_A"]])
        after = np.nonzero(t >= tt)[0]
        high = after[ia[after] >= e.below_A]
        if len(high) and high[-1] + 1 >= len(t):
            return R(e.name, e.kind, False, f"armature current still {ia[-1]:.0f} A at the end, "
                     f"{(t_end - tt) * 1e3:.0f} ms after the trip", limit=e.within_ms, unit="ms",
                     window=(tt, tt + e.within_ms * 1e-3), at_s=tt)
        t_zero = float(t[high[-1] + 1]) if len(high) else tt
        ms = (t_zero - tt) * 1e3
        ok = ms <= e.within_ms + 1e-9
        return R(e.name, e.kind, ok, f"armature current below {e.below_A:g} A {ms:.1f} ms after the trip "
                 f"(limit {e.within_ms:g} ms, margin {e.within_ms - ms:+.1f} ms)", ms, e.within_ms,
                 e.within_ms - ms, "ms", (tt, tt + e.within_ms * 1e-3), tt)
    raise ValueError(f"unknown expectation kind {e.kind!r}")
