"""Plots of a judged run: the whole run, and a close-up around each reference event.

Drawn from the record and its verdict only: timeline events as dashed lines, the trip as a
red line, each expectation's judged window shaded (green passed, red failed), bounds as
horizontal lines, the commutation limit curve over the armature current. Headless (Agg).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from host.verdict.expect import first_trip

PANELS = (("speed_rpm", "speed (r/min)"), ("armature_current_A", "armature current (A)"),
          ("field_current_A", "field current (A)"), ("terminal_voltage_V", "armature voltage (V)"))


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def plot_judged(frames, columns, events, meta, verdict, path: Path, t_from=None, t_to=None, title="") -> Path:
    plt = _plt()
    col = {c: k for k, c in enumerate(columns)}
    t = frames[:, col["time_s"]]
    sel = np.ones(len(t), bool)
    if t_from is not None:
        sel &= (t >= t_from) & (t <= t_to)
    # at most ~3000 points a line: a plot at 80 dpi shows no more, and it draws far faster
    idx = np.nonzero(sel)[0]
    if len(idx) > 3000:
        idx = idx[:: int(np.ceil(len(idx) / 3000))]
    sel = idx
    ts = t[sel]
    fig, axes = plt.subplots(len(PANELS), 1, sharex=True, figsize=(9, 7.5))
    trip = first_trip(frames, col, float(meta["frame_period_s"]))
    h = meta["harm"]
    for ax, (name, label) in zip(axes, PANELS):
        ax.plot(ts, frames[sel, col[name]], lw=0.9, label=label.split(" (")[0])
        if name == "speed_rpm":
            ax.plot(ts, frames[sel, col["op_speed_ref_rpm"]], "--", lw=0.8, color="gray", label="operator reference")
        if name == "armature_current_A":
            ax.plot(ts, frames[sel, col["armature_current_peak_A"]], lw=0.5, alpha=0.5, label="peak in frame")
            n = np.abs(frames[sel, col["speed_rpm"]])
            lim = np.interp(n / h["base_speed_rpm"], h["commutation_speed_pu"], h["commutation_current_pu"]) \
                * h["rated_current_A"]
            ax.plot(ts, lim, ":", color="darkred", lw=0.9, label="commutation limit")
        ax.set_ylabel(label, fontsize=8)
        ax.grid(True, alpha=0.3)
        for e in verdict.expectations:
            if e.window is None:
                continue
            a, b = e.window
            if not (math.isfinite(a) and math.isfinite(b)):
                b = float(ts[-1]) if len(ts) else a
            ax.axvspan(a, b, color="tab:green" if e.passed else "tab:red", alpha=0.08)
            if e.kind == "bounds" and getattr(e, "limit", None) is not None and _signal_of(e) == name \
                    and math.isfinite(e.limit):
                ax.hlines(e.limit, a, b, colors="tab:red", linestyles="-.", lw=0.8)
    for tt, kind, text in events:
        if kind == "timeline" and (t_from is None or t_from <= tt <= t_to) and not text.startswith("start:"):
            for ax in axes:
                ax.axvline(tt, color="k", ls="--", lw=0.6, alpha=0.6)
            axes[0].annotate(text.split(":", 1)[0], (tt, 1.0), xycoords=("data", "axes fraction"), fontsize=7,
                             rotation=90, va="top", ha="right")
    if trip is not None and (t_from is None or t_from <= trip[1] <= t_to):
        cls = meta.get("trip_classes", {}).get(str(trip[2]), f"code {trip[2]}")
        for ax in axes:
            ax.axvline(trip[1], color="red", lw=1.0)
        axes[0].annotate(f"trip {cls}", (trip[1], 0.02), xycoords=("data", "axes fraction"), fontsize=7,
                         color="red", rotation=90, va="bottom", ha="left")
    for ax in axes:
        ax.legend(loc="upper right", fontsize=7)
    axes[-1].set_xlabel("model time (s)")
    fig.suptitle(title, fontsize=10)
    fig.subplots_adjust(left=0.1, right=0.98, top=0.94, bottom=0.07, hspace=0.12)
    fig.savefig(path, dpi=80)
    plt.close(fig)
    return path


def _signal_of(e) -> str:
    # bounds results carry the signal in their text's first word
    return e.text.split(" ", 1)[0]


def plot_scenario(rec, verdict, out_dir: Path) -> list[Path]:
    """An overview and one close-up per trip or event-anchored expectation; returns the files."""
    out_dir = Path(out_dir)
    name = rec.meta["scenario"]
    files = [plot_judged(rec.frames, rec.columns, rec.events, rec.meta, verdict, out_dir / "overview.png",
                         title=f"{name}: {'PASS' if verdict.passed else 'FAIL'}")]
    seen = set()
    for k, e in enumerate(verdict.expectations):
        if e.kind not in ("trip", "current_zero") or not math.isfinite(e.at_s) or round(e.at_s, 4) in seen:
            continue
        seen.add(round(e.at_s, 4))
        span = (e.window[1] - e.window[0]) if e.window else 0.1
        a, b = e.at_s - max(0.05, 0.3 * span), e.at_s + max(0.15, 1.5 * span)
        files.append(plot_judged(rec.frames, rec.columns, rec.events, rec.meta, verdict,
                                 out_dir / f"event_{k}.png", a, b, title=f"{name}: around {e.name}"))
    return files
