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

Closed-loop replay (recorded disturbances as the timeline of a run with a live controller) is
a scenario source: host.scenario.replay turns a trace read here, with the same channel map
(its [inputs], [operator] and [faults] tables), into scenario timeline actions.
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

    url = "playback://recorded-commands"

    def __init__(self, commands: list[sig.Command]):
        self._commands = commands
        self._next = 0
        self.bye = False
        self.link = self  # HostLoop asks session.link for its url and connection count
        self.peer_restarted = False  # no controller to restart
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


# ---------------------------------------------------------------------- a CSV trace
# the command fields a trace may drive (our names, see host.signals.Command), the model inputs
# it may drive as disturbances (host.sim.INPUTS names), and the feedback it may be compared on
TRACE_COMMANDS = ("mode", "bridge_select", "armature_cmd", "field_mode", "field_cmd", "contactor")
MODE_NAMES = {"firing_angle": sig.MODE_FIRING_ANGLE, "voltage": sig.MODE_VOLTAGE, "current": sig.MODE_CURRENT}
FIELD_MODE_NAMES = {"firing_angle": sig.FIELD_MODE_FIRING_ANGLE, "voltage": sig.FIELD_MODE_VOLTAGE}


@dataclass
class Channel:
    """One mapped quantity: a constant, or a trace column times scale plus offset."""

    column: str | None
    scale: float = 1.0
    offset: float = 0.0
    constant: float | None = None

    def values(self, table: dict, where: str) -> np.ndarray:
        if self.constant is not None:
            n = len(next(iter(table.values())))
            return np.full(n, self.constant)
        if self.column not in table:
            raise ConfigError(f"{where}: column '{self.column}' is not in the trace (columns: {', '.join(table)})")
        return table[self.column] * self.scale + self.offset


@dataclass
class TraceMap:
    source: str
    time: Channel
    start_s: float | None
    command_at: str  # "frame_start" or "frame_end"
    commands: dict
    inputs: dict
    feedback: dict
    operator: dict = None  # closed loop only: OPERATOR_CHANNELS -> Channel
    faults: dict = None  # closed loop only: fault name -> (Channel, parameter)


def _channel(src: str, key: str, v, names: dict | None = None) -> Channel:
    if isinstance(v, bool):
        return Channel(None, constant=float(v))
    if isinstance(v, (int, float)):
        if not math.isfinite(v):
            raise ConfigError(f"{src}: {key}: must be finite, got {v!r}")
        return Channel(None, constant=float(v))
    if isinstance(v, str):
        if names is not None and v in names:
            return Channel(None, constant=float(names[v]))
        if names is not None:
            raise ConfigError(f"{src}: {key}: expected one of {sorted(names)} or a table {{column = ...}}, got {v!r}")
        return Channel(v)
    if isinstance(v, dict):
        extra = set(v) - {"column", "scale", "offset"}
        if extra or "column" not in v or not isinstance(v["column"], str):
            raise ConfigError(f"{src}: {key}: expected {{column = \"NAME\", scale = A, offset = B}}, got {v!r}")
        ch = Channel(v["column"], float(v.get("scale", 1.0)), float(v.get("offset", 0.0)))
        if not (math.isfinite(ch.scale) and math.isfinite(ch.offset)) or ch.scale == 0:
            raise ConfigError(f"{src}: {key}: scale must be finite and nonzero, offset finite, got {v!r}")
        return ch
    raise ConfigError(f"{src}: {key}: expected a column name, a number or a table, got {v!r}")


OPERATOR_CHANNELS = ("run", "speed_ref_rpm")  # closed loop: the operator panel's inputs


def load_trace_map(path, closed_loop: bool = False) -> TraceMap:
    """The channel mapping file (TOML, docs/record.md#trace-map): which trace column is which
    command, input and feedback, with scaling. Every problem is one ConfigError line.

    closed_loop: the map of a closed-loop replay (a scenario's [replay]): the live controller
    makes the commands, so [commands] and [feedback] are not needed (and not used); the
    disturbances are [inputs], the operator's [operator] and staged [faults]."""
    import tomllib

    src = str(path)
    try:
        data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as err:
        raise ConfigError(f"{src}: cannot read file ({err.strerror})") from err
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise ConfigError(f"{src}: not valid TOML ({err})") from err
    unknown = set(data) - {"trace", "commands", "inputs", "feedback", "operator", "faults"}
    if unknown:
        raise ConfigError(f"{src}: {sorted(unknown)[0]}: unknown table (known: trace, commands, inputs, feedback, "
                          "operator, faults)")
    for t in ("trace", "commands", "inputs", "feedback", "operator", "faults"):
        if t in data and not isinstance(data[t], dict):
            raise ConfigError(f"{src}: {t}: must be a table, got {data[t]!r}")
    if not closed_loop:
        for t in ("operator", "faults"):
            if t in data:
                raise ConfigError(f"{src}: {t}: only for a closed-loop replay (a scenario's [replay]); an open-loop "
                                  "replay has no controller to see the operator or a staged fault")
    tr = data.get("trace", {})
    bad = set(tr) - {"time", "start_s", "command_at"}
    if bad:
        raise ConfigError(f"{src}: trace.{sorted(bad)[0]}: unknown key (known: time, start_s, command_at)")
    if "time" not in tr:
        raise ConfigError(f"{src}: trace.time: required key is missing (the time column, in s or a table with scale)")
    time_ch = _channel(src, "trace.time", tr["time"])
    if time_ch.constant is not None:
        raise ConfigError(f"{src}: trace.time: must name a column, got {tr['time']!r}")
    start = tr.get("start_s")
    if start is not None and not (isinstance(start, (int, float)) and math.isfinite(start)):
        raise ConfigError(f"{src}: trace.start_s: must be a finite time in s, got {start!r}")
    command_at = tr.get("command_at", "frame_start")
    if command_at not in ("frame_start", "frame_end"):
        raise ConfigError(f"{src}: trace.command_at: expected 'frame_start' or 'frame_end', got {command_at!r}")
    cmds = {}
    for k, v in data.get("commands", {}).items():
        if k not in TRACE_COMMANDS:
            raise ConfigError(f"{src}: commands.{k}: unknown command field (known: {', '.join(TRACE_COMMANDS)})")
        names = MODE_NAMES if k == "mode" else FIELD_MODE_NAMES if k == "field_mode" else None
        cmds[k] = _channel(src, f"commands.{k}", v, names)
    if "armature_cmd" not in cmds and not closed_loop:
        raise ConfigError(f"{src}: commands.armature_cmd: required key is missing (the firing angle, voltage or current command)")
    from .sim import INPUTS

    inputs = {}
    for k, v in data.get("inputs", {}).items():
        if k not in INPUTS or INPUTS[k][0] < 0:
            raise ConfigError(f"{src}: inputs.{k}: unknown model input (names in host/sim.py INPUTS)")
        inputs[k] = _channel(src, f"inputs.{k}", v)
    from .loop import REC_COLUMNS

    fb = {}
    for k, v in data.get("feedback", {}).items():
        if k not in REC_COLUMNS:
            raise ConfigError(f"{src}: feedback.{k}: not a frame column (known: {', '.join(REC_COLUMNS)})")
        fb[k] = _channel(src, f"feedback.{k}", v)
        if fb[k].constant is not None:
            raise ConfigError(f"{src}: feedback.{k}: must name a trace column")
    if not fb and not closed_loop:
        raise ConfigError(f"{src}: feedback: at least one recorded feedback column is needed to compare with")
    operator = {}
    for k, v in data.get("operator", {}).items():
        if k not in OPERATOR_CHANNELS:
            raise ConfigError(f"{src}: operator.{k}: unknown operator input (known: {', '.join(OPERATOR_CHANNELS)})")
        operator[k] = _channel(src, f"operator.{k}", v)
    faults = {}
    for k, v in data.get("faults", {}).items():
        faults[k] = _fault_channel(src, k, v)
    tm = TraceMap(src, time_ch, None if start is None else float(start), command_at, cmds, inputs, fb)
    tm.operator, tm.faults = operator, faults
    if closed_loop and not (inputs or operator or faults):
        raise ConfigError(f"{src}: inputs: a closed-loop replay needs at least one disturbance or operator "
                          "channel ([inputs], [operator] or [faults])")
    return tm


def _fault_channel(src: str, name: str, v) -> tuple[Channel, object]:
    """[faults] NAME = { column = "C", PARAM = V }: the fault (a scenario fault name) is on
    while the column is nonzero; PARAM is the fault's one parameter (docs/scenarios.md)."""
    from .scenario.load import FAULTS

    where = f"faults.{name}"
    if name not in FAULTS:
        raise ConfigError(f"{src}: {where}: unknown fault (known: {', '.join(FAULTS)})")
    pname, unit, check, rule = FAULTS[name]
    if isinstance(v, str):
        v = {"column": v}
    if not isinstance(v, dict) or not isinstance(v.get("column"), str):
        raise ConfigError(f"{src}: {where}: expected a column name or {{column = \"NAME\"{', ' + pname + ' = ...' if pname else ''}}}, got {v!r}")
    extra = set(v) - {"column"} - ({pname} if pname else set())
    if extra:
        raise ConfigError(f"{src}: {where}.{sorted(extra)[0]}: not a key of fault '{name}'"
                          + (f" (it takes '{pname}')" if pname else " (it takes none)"))
    param = None
    if pname is not None:
        if pname not in v:
            raise ConfigError(f"{src}: {where}.{pname}: required for fault '{name}' ({unit})")
        param = v[pname]
        try:
            ok = check(param) and not isinstance(param, bool)
        except TypeError:
            ok = False
        if not ok:
            raise ConfigError(f"{src}: {where}.{pname}: {rule}, got {param!r}")
    return Channel(v["column"]), param


def read_trace(path) -> dict:
    """A trace file by its kind: a COMTRADE .cfg (beside its .dat) or a CSV."""
    return read_trace_comtrade(path) if str(path).lower().endswith(".cfg") else read_trace_csv(path)


def trace_times(tmap: TraceMap, table: dict, where: str) -> np.ndarray:
    """The trace's time column in s, checked to increase."""
    t_tr = tmap.time.values(table, f"{tmap.source}: trace.time")
    if np.any(np.diff(t_tr) <= 0):
        k = int(np.nonzero(np.diff(t_tr) <= 0)[0][0])
        raise ConfigError(f"{where}: time column '{tmap.time.column}': not increasing at row {k + 2} "
                          f"({t_tr[k]!r} then {t_tr[k + 1]!r})")
    return t_tr


def read_trace_csv(path) -> dict:
    """A CSV with a header row of column names and numbers below: {name: float64 array}."""
    import csv

    src = str(path)
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.reader(fh))
    except OSError as err:
        raise ConfigError(f"{src}: cannot read file ({err.strerror})") from err
    except UnicodeDecodeError as err:
        raise ConfigError(f"{src}: not a text CSV file ({err.reason} at byte {err.start})") from err
    if len(rows) < 3:
        raise ConfigError(f"{src}: a trace needs a header row and at least two rows of values")
    head = [h.strip() for h in rows[0]]
    body = [r for r in rows[1:] if r]
    for k, r in enumerate(body, start=2):
        if len(r) != len(head):
            raise ConfigError(f"{src}: line {k}: {len(r)} values, the header names {len(head)} columns")
    try:
        arr = np.array(body, dtype=float)
    except ValueError as err:
        raise ConfigError(f"{src}: a value is not a number ({err})") from err
    if not np.all(np.isfinite(arr)):
        raise ConfigError(f"{src}: non-finite values (nan, inf) in the trace")
    return {h: arr[:, k] for k, h in enumerate(head)}


def read_trace_comtrade(cfg_path) -> dict:
    """A COMTRADE pair (a drive's own fault record): {"time": s from the first sample, channel
    id: values} for every analog and status channel. Checked first by our own reader of the
    .cfg (missing .dat, channel counts, sizes, unsorted times are one line each), then read
    with the `comtrade` package (PyPI), a reader written by others from the standard."""
    from .record.export import check_comtrade_pair

    check_comtrade_pair(cfg_path)
    try:
        import comtrade
    except ImportError as err:
        raise ConfigError(f"{cfg_path}: replaying a COMTRADE trace needs the comtrade package "
                          "(pip install comtrade)") from err
    ct = comtrade.Comtrade(use_double_precision=True, ignore_warnings=True)
    try:
        ct.load(str(cfg_path))
    except Exception as err:  # the library's own errors are many kinds; one line for all
        raise ConfigError(f"{cfg_path}: cannot read the COMTRADE files ({err.__class__.__name__}: {err})") from err
    table = {"time": np.asarray(ct.time, dtype=float)}
    for name, values in zip(ct.analog_channel_ids, ct.analog):
        table[name.strip()] = np.asarray(values, dtype=float)
    for name, values in zip(ct.status_channel_ids, ct.status):
        table[name.strip()] = np.asarray(values, dtype=float)
    if not all(np.all(np.isfinite(v)) for v in table.values()):
        raise ConfigError(f"{cfg_path}: missing or non-finite samples in the COMTRADE data")
    return table


def trace_replay(trace_path, map_path, machine, converter=None, overrides=(), tolerances: dict | None = None,
                 run_dir=None) -> ReplayResult:
    """Open-loop replay of a trace from another recorder (a drive's own, or a dcrig frames.csv):
    a CSV, or a COMTRADE .cfg (with its .dat; the time column is then "time"), with a channel map. Commands are held from one trace sample to the next
    (zero-order hold, as a controller's output is); recorded feedback is interpolated
    linearly to the end of each model frame and compared with the model's."""
    from types import SimpleNamespace

    from .commands import load_plant
    from .loop import REC_COLUMNS, HostLoop, R
    from .recording import end_status, open_run_record
    from .sim import INPUTS

    tolerances = dict(tolerances or {})
    tmap = load_trace_map(map_path)
    table = read_trace(trace_path)
    where = str(trace_path)
    t_tr = trace_times(tmap, table, where)
    plant = load_plant(SimpleNamespace(machine=str(machine), converter=str(converter) if converter else None,
                                       overrides=list(overrides)))
    period_us = int(round(plant.derived["frame_period_us"]))
    period = period_us * 1e-6
    start = t_tr[0] if tmap.start_s is None else tmap.start_s
    n_frames = int(math.floor((t_tr[-1] - start) / period + 1e-9))
    if n_frames < 1:
        raise ConfigError(f"{where}: the trace is shorter than one model frame ({period_us} us)")
    lag = period if tmap.command_at == "frame_end" else 0.0
    t_cmd = start + np.arange(n_frames) * period + lag
    # a sample within 1 % of a frame after the frame's instant counts as at it: trace times are
    # printed with few digits (a dcrig frames.csv keeps six)
    hold = np.clip(np.searchsorted(t_tr, t_cmd + 0.01 * period, side="right") - 1, 0, len(t_tr) - 1)

    def held(ch: Channel, key: str) -> np.ndarray:
        return ch.values(table, f"{tmap.source}: {key}")[hold]

    defaults = {"mode": sig.MODE_FIRING_ANGLE, "bridge_select": sig.BRIDGE_FORWARD,
                "field_mode": sig.FIELD_MODE_VOLTAGE, "field_cmd": 0.0, "contactor": 1}
    cols = {k: held(tmap.commands[k], f"commands.{k}") if k in tmap.commands else np.full(n_frames, float(v))
            for k, v in {**defaults, "armature_cmd": 0.0}.items()}
    commands = [sig.Command(seq=k & 0xFFFF, mode=int(cols["mode"][k]), bridge_select=int(cols["bridge_select"][k]),
                            armature_cmd=float(cols["armature_cmd"][k]), field_mode=int(cols["field_mode"][k]),
                            field_cmd=float(cols["field_cmd"][k]), contactor=int(cols["contactor"][k]))
                for k in range(n_frames)]
    in_vals = {name: held(ch, f"inputs.{name}") for name, ch in tmap.inputs.items()}

    class _Inputs:  # loop hook: the trace's disturbances, held per frame
        def __init__(self):
            self.k = 0

        def __call__(self, lp):
            for name, v in in_vals.items():
                idx, scale = INPUTS[name]
                lp.u[idx] = v[min(self.k, n_frames - 1)] * scale
            self.k += 1

    trace_path = Path(trace_path)
    run_dir = Path(run_dir) if run_dir is not None else trace_path.parent / (trace_path.stem + "-replay")
    run_dir = new_run_dir(run_dir.parent, run_dir.name, option="--out")  # never overwritten
    recorder = open_run_record(Path(run_dir), REC_COLUMNS, plant, {
        "run_kind": "trace_replay", "run_name": "open-loop replay of a trace", "source": str(trace_path),
        "trace_map": str(map_path), "overrides": list(overrides), "frame_period_us": period_us,
        "link": "playback of the trace's commands"})
    loop = HostLoop(plant, PlaybackSession(commands), period_us, record_rows=n_frames + 8, recorder=recorder)
    loop.hooks.append(_Inputs())
    err = None
    try:
        loop.run_lockstep(n_frames + 1, command_timeout_s=1e-3)
    except BaseException as e:
        err = e
        raise
    finally:
        rows = loop.rows()
        t_end = start + rows[:, R["time_s"]]  # trace time at the end of each model frame
        deps = []
        for col, ch in tmap.feedback.items():
            want = np.interp(t_end, t_tr, ch.values(table, f"{tmap.source}: feedback.{col}"))
            got = rows[:, R[col]]
            diff = np.abs(got - want)
            tol = tolerances.get(col, DEFAULT_TOLERANCE_FRACTION * max(float(np.max(np.abs(want))) if len(want) else 0.0, 1e-9))
            outside = np.nonzero(diff > tol)[0]
            k = int(np.argmax(diff)) if len(diff) else 0
            deps.append(Departure(col, float(tol), float(diff[k]) if len(diff) else 0.0,
                                  float(t_end[k]) if len(diff) else 0.0,
                                  float(t_end[outside[0]]) if len(outside) else None, int(len(outside)), len(diff)))
        for d in deps:
            loop.event("replay", d.line(), column=d.column, tolerance=d.tolerance, max_abs_diff=d.max_abs_diff,
                       first_outside_s=d.first_outside_s)
        recorder.close(end_status(err))
    return ReplayResult(trace_path, Path(run_dir), deps, len(rows), False)
