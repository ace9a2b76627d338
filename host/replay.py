"""Open-loop replay: a recorded command trace drives the model with no controller, and the
model's response is compared with the recorded feedback under tolerances.

Source: a dcrig closed-loop record (its command columns cmd_mode, bridge_select,
armature_cmd, field_mode, field_cmd, contactor_cmd, controller_trip, trip_code, and the
operator/load timeline in its meta). The replay runs the same host.loop.HostLoop frame by
frame, lockstep, with a playback session in place of the link, so with the record's own
configs it reproduces the recorded frames exactly (the kernel is deterministic); with a
changed parameter (`--set`) it reports, per compared column, the largest difference, where
the response first leaves the tolerance (the departure) and for how long. The replay is a
run: it writes its own record (run folder RUN/replays/open-loop, -2, ...).

Closed-loop replay (recorded disturbances as the timeline of a run with a live controller)
belongs to the scenario runner and is not here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import signals as sig
from .errors import ConfigError
from .record import RecordError, new_run_dir, open_record

COMMAND_COLUMNS = ("cmd_seq", "cmd_mode", "bridge_select", "armature_cmd", "field_cmd", "contactor_cmd",
                   "controller_trip", "trip_code")
DEFAULT_COMPARE = ("armature_current_A", "field_current_A", "terminal_voltage_V", "speed_rpm", "torque_Nm")
DEFAULT_TOLERANCE_FRACTION = 0.01  # of the recorded column's peak |value|: common practice, no source


@dataclass
class Departure:
    column: str
    tolerance: float
    max_abs_diff: float
    at_max_s: float
    first_outside_s: float | None  # the departure: first frame outside the tolerance
    frames_outside: int
    frames: int

    def line(self) -> str:
        if self.first_outside_s is None:
            return (f"{self.column}: within {self.tolerance:.4g} everywhere (largest difference "
                    f"{self.max_abs_diff:.3g} at {self.at_max_s:.3f} s)")
        return (f"{self.column}: DEPARTS at {self.first_outside_s:.4f} s (tolerance {self.tolerance:.4g}); "
                f"largest difference {self.max_abs_diff:.4g} at {self.at_max_s:.3f} s; "
                f"{self.frames_outside} of {self.frames} frames outside")


@dataclass
class ReplayResult:
    source: Path
    run_dir: Path | None
    departures: list[Departure]
    frames: int
    identical: bool  # every compared value equal to the bit

    @property
    def departs(self) -> bool:
        return any(d.first_outside_s is not None for d in self.departures)


class PlaybackSession:
    """Stands in for host.link.HostSession: hands the recorded commands to HostLoop one per
    frame, swallows the feedback, and says bye after the last one."""

    def __init__(self, commands: list[sig.Command]):
        self._commands = commands
        self._next = 0
        self.bye = False
        self.last_command_seq: int | None = None

    def send_feedback(self, fb) -> int:
        return 0

    def recv_command(self, timeout_s: float):
        if self._next >= len(self._commands):
            self.bye = True
            return None
        cmd = self._commands[self._next]
        self._next += 1
        self.last_command_seq = cmd.seq
        return cmd

    def pop_events(self) -> list:
        return []

    def stats(self) -> dict:
        return {"frames_played": self._next}


def commands_from_rows(rd, rows: np.ndarray) -> list[sig.Command]:
    missing = [c for c in COMMAND_COLUMNS if c not in rd.R]
    if missing:
        raise RecordError(f"{rd.path}: no command column '{missing[0]}': open-loop replay needs a closed-loop record")
    field_mode = None
    if "field_mode" not in rd.R:  # records from before the column: the controller's setting
        ctl = rd.meta.get("configs", {}).get("controller", {}).get("values", {})
        field_mode = sig.FIELD_MODE_FIRING_ANGLE if ctl.get("field.mode") == "firing_angle" else sig.FIELD_MODE_VOLTAGE
    R = rd.R
    out = []
    for r in rows:
        out.append(sig.Command(
            seq=int(r[R["cmd_seq"]]), mode=int(r[R["cmd_mode"]]), bridge_select=int(r[R["bridge_select"]]),
            armature_cmd=float(r[R["armature_cmd"]]),
            field_mode=int(r[R["field_mode"]]) if field_mode is None else field_mode,
            field_cmd=float(r[R["field_cmd"]]), contactor=int(r[R["contactor_cmd"]]),
            trip=int(r[R["controller_trip"]]), trip_code=int(r[R["trip_code"]])))
    return out


def plant_from_record(rd, overrides=()):
    """Pack the plant from the record's resolved configs (configs/*.toml beside it), with
    --set overrides applied on top."""
    from .commands import load_plant

    folder = rd.path.parent / "configs"
    machine = folder / "machine.toml"
    if not machine.is_file():
        raise RecordError(f"{rd.path}: no configs/machine.toml beside the record; cannot rebuild the plant")
    conv = folder / "converter.toml"

    class _Args:  # what load_plant reads from a command line
        pass

    a = _Args()
    a.machine = str(machine)
    a.converter = str(conv) if conv.is_file() else None
    a.overrides = list(overrides)
    return load_plant(a)


def _timeline(rd):
    from .runner import Timeline, TimelineStep

    steps = rd.meta.get("timeline", [])
    try:
        return Timeline([TimelineStep(float(t), str(w), float(v)) for t, w, v in steps])
    except (TypeError, ValueError) as err:
        raise RecordError(f"{rd.path}: the record's timeline cannot be read ({err})") from err


def compare(rd, recorded: np.ndarray, replayed: np.ndarray, columns, tolerances: dict) -> list[Departure]:
    n = min(len(recorded), len(replayed))
    t = recorded[:n, rd.R["time_s"]]
    out = []
    for col in columns:
        if col not in rd.R:
            raise ConfigError(f"--compare: {col}: not a column of the record (columns: {', '.join(rd.columns)})")
        a = recorded[:n, rd.R[col]]
        b = replayed[:n, rd.R[col]]
        diff = np.abs(b - a)
        tol = tolerances.get(col)
        if tol is None:
            tol = DEFAULT_TOLERANCE_FRACTION * max(float(np.max(np.abs(a))) if n else 0.0, 1e-9)
        outside = np.nonzero(diff > tol)[0]
        k = int(np.argmax(diff)) if n else 0
        out.append(Departure(col, float(tol), float(diff[k]) if n else 0.0, float(t[k]) if n else 0.0,
                             float(t[outside[0]]) if len(outside) else None, int(len(outside)), n))
    return out


def open_loop_replay(source, overrides=(), columns=DEFAULT_COMPARE, tolerances: dict | None = None,
                     record: bool = True, out=None) -> ReplayResult:
    from .loop import REC_COLUMNS, HostLoop
    from .recording import end_status, open_run_record

    tolerances = dict(tolerances or {})
    for col, tol in tolerances.items():
        if not (math.isfinite(tol) and tol >= 0):
            raise ConfigError(f"--tolerance: {col}: must be a finite value >= 0, got {tol!r}")
    rd = open_record(source)
    try:
        if rd.meta.get("run_kind") != "closed_loop":
            raise RecordError(f"{rd.path}: a '{rd.meta.get('run_kind', '?')}' record; open-loop replay needs a "
                              "closed-loop record (demo or serve)")
        recorded = rd.frames()
        if len(recorded) == 0:
            raise RecordError(f"{rd.path}: the record holds no frames to replay")
        commands = commands_from_rows(rd, recorded)
        plant = plant_from_record(rd, overrides)
        period_us = int(rd.meta.get("frame_period_us") or round(plant.derived["frame_period_us"]))
        session = PlaybackSession(commands)
        run_dir = new_run_dir(rd.path.parent / "replays", "open-loop") if record else None
        recorder = None
        if run_dir is not None:
            recorder = open_run_record(run_dir, REC_COLUMNS, plant, {
                "run_kind": "open_loop_replay", "run_name": "open-loop replay", "source": str(rd.path),
                "source_status": rd.status, "overrides": list(overrides), "frame_period_us": period_us,
                "timeline": rd.meta.get("timeline", []), "link": "playback of the recorded commands"})
        loop = HostLoop(plant, session, period_us, watchdog_periods=int(rd.meta.get("watchdog_periods", 10)),
                        on_link_loss=str(rd.meta.get("on_link_loss", "block")), record_rows=len(recorded) + 8,
                        recorder=recorder)
        loop.hooks.append(_timeline(rd))
        err = None
        try:
            loop.run_lockstep(len(commands) + 1, command_timeout_s=1e-3)
        except BaseException as e:
            err = e
            raise
        finally:
            replayed = loop.rows()
            deps = compare(rd, recorded, replayed, columns, tolerances)
            if recorder is not None:
                for d in deps:
                    loop.event("replay", d.line(), column=d.column, tolerance=d.tolerance,
                               max_abs_diff=d.max_abs_diff, at_max_s=d.at_max_s,
                               first_outside_s=d.first_outside_s, frames_outside=d.frames_outside)
                recorder.close(end_status(err))
        n = min(len(recorded), len(replayed))
        idx = [rd.R[c] for c in columns]
        identical = len(recorded) == len(replayed) and bool(np.array_equal(recorded[:n, idx], replayed[:n, idx]))
        return ReplayResult(rd.path, run_dir, deps, len(replayed), identical)
    finally:
        rd.close()
