"""Closed-loop replay as a scenario source: a recorded trace of the disturbances (load torque,
mains voltage and frequency, fault instants) and operator inputs becomes timeline actions of a
scenario, which then runs with a live controller and is judged like any other.

Sources (a scenario's `[replay] source`, with `map` where it needs one):

- a dcrig record (run folder or record.sqlite) without a map: its recorded operator/load
  timeline (meta `timeline` of a demo or serve run), so with the same controller the run is
  reproduced frame for frame; its resolved configs (configs/*.toml) are the default plant
  and controller settings;
- a dcrig record with a map: its frame columns as a trace (configs/replay/dcrig_frames_map.toml);
- a CSV or a COMTRADE .cfg (beside its .dat) with a map: read and checked by host.replay's
  readers, channels named in the same TOML map format ([inputs], [operator], [faults]).

Trace values are held from one sample to the next (zero-order hold, as host.replay does for
an open-loop trace). The actions are applied by host.scenario.events; the model's input names
come from host.sim through host.replay's map reader (no kernel is loaded).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from host.errors import ConfigError

from .load import Action

RECORD_STEPS = {"run": "run", "stop": "stop", "speed_ref_rpm": "speed_ref", "load_torque_Nm": "load_step"}


@dataclass
class ReplaySource:
    source: Path
    map: Path | None
    actions: list[Action]
    duration_s: float  # model time the trace covers
    configs: Path | None = None  # a dcrig record's configs/ folder: the plant and controller as run
    meta: dict = field(default_factory=dict)  # a dcrig record's meta (encoding, frame period, ...)


def _is_record(path: Path) -> bool:
    from host.record import RECORD_FILE

    return path.is_dir() or path.name == RECORD_FILE or path.suffix == ".sqlite"


def load_replay(src: str, source: Path, map_path: Path | None) -> ReplaySource:
    """Read a replay source into timeline actions. Every problem is one line (ConfigError or
    RecordError naming the file)."""
    from host.replay import load_trace_map, read_trace, trace_times

    tmap = load_trace_map(map_path, closed_loop=True) if map_path is not None else None
    if _is_record(source):
        from host.record import open_record

        with open_record(source) as rd:
            meta = dict(rd.meta)
            configs = rd.path.parent / "configs"
            configs = configs if (configs / "machine.toml").is_file() else None
            if tmap is None:
                actions, duration = _record_timeline(src, rd)
            else:
                rows = rd.frames()
                if len(rows) < 2:
                    raise ConfigError(f"{src}: replay.source: the record holds fewer than two frames, got {len(rows)}")
                table = {c: rows[:, k] for k, c in enumerate(rd.columns)}
                actions, duration = trace_actions(tmap, table, trace_times(tmap, table, str(rd.path)))
        return ReplaySource(source, map_path, actions, duration, configs, meta)
    if tmap is None:
        raise ConfigError(f"{src}: replay.map: required for a CSV or COMTRADE trace (which column is which "
                          "disturbance: docs/record.md, 'Trace map')")
    table = read_trace(source)
    actions, duration = trace_actions(tmap, table, trace_times(tmap, table, str(source)))
    return ReplaySource(source, map_path, actions, duration)


def _record_timeline(src: str, rd) -> tuple[list[Action], float]:
    steps = rd.meta.get("timeline")
    if rd.meta.get("run_kind") != "closed_loop" or not isinstance(steps, list):
        raise ConfigError(f"{src}: replay.source: {rd.path}: a '{rd.meta.get('run_kind', 'scenario')}' record "
                          "has no recorded operator timeline; give replay.map to read its frame columns")
    n = len(rd.frames())
    period_s = float(rd.meta.get("frame_period_us") or 0) * 1e-6
    if n == 0 or period_s <= 0:
        raise ConfigError(f"{src}: replay.source: {rd.path}: the record holds no frames to replay")
    actions = []
    try:
        for t, what, value in steps:
            t, what, value = float(t), str(what), float(value)
            if what in RECORD_STEPS:
                a = Action(at_s=t, action=RECORD_STEPS[what], id="", value=value)
            elif what.startswith("input:"):
                from host.sim import INPUTS

                if what[6:] not in INPUTS or INPUTS[what[6:]][0] < 0:
                    raise ValueError(f"unknown model input {what[6:]!r}")
                a = Action(at_s=t, action="trace", id="", target=what[6:], times_s=(0.0,), values=(value,))
            else:
                raise ValueError(f"unknown step {what!r}")
            actions.append(a)
    except (TypeError, ValueError) as err:
        raise ConfigError(f"{src}: replay.source: {rd.path}: the recorded timeline cannot be read ({err})") from err
    return _named(actions), n * period_s


def _named(actions: list[Action]) -> list[Action]:
    """Ids as a scenario file's defaults: the action or fault name, then name_2, name_3, ..."""
    count: dict[str, int] = {}
    for a in actions:
        base = a.id or a.fault or a.action
        count[base] = count.get(base, 0) + 1
        a.id = base if count[base] == 1 else f"{base}_{count[base]}"
    return actions


def trace_actions(tmap, table: dict, t_tr: np.ndarray) -> tuple[list[Action], float]:
    """The trace's [inputs], [operator] and [faults] channels as timeline actions.

    Model time 0 is trace time `start_s` (default: the first sample). With command_at =
    "frame_end" a row holds what applied during the sample interval before its time (a dcrig
    frames.csv), so each row is taken from one sample interval (the median spacing) earlier."""
    start = float(t_tr[0]) if tmap.start_s is None else tmap.start_s
    lag = float(np.median(np.diff(t_tr))) if tmap.command_at == "frame_end" else 0.0
    t_model = t_tr - start - lag
    duration = float(t_tr[-1] - start)
    if duration <= 0:
        raise ConfigError(f"{tmap.source}: trace.start_s: the trace ends before model time 0 "
                          f"(start {start!r}, last sample {float(t_tr[-1])!r})")
    # the sample in force at model time 0 and every one after it
    k0 = max(0, int(np.searchsorted(t_model, 1e-12, side="right")) - 1)
    t_keep = t_model[k0:]
    at0 = max(0.0, float(t_keep[0]))

    def held(values: np.ndarray, target: str, ident: str) -> Action:
        v = values[k0:]
        change = np.concatenate(([True], v[1:] != v[:-1]))  # keep the changes only
        ts = np.maximum(t_keep[change], at0) - at0
        return Action(at_s=at0, action="trace", id=ident, target=target, times_s=tuple(float(x) for x in ts),
                      values=tuple(float(x) for x in v[change]))

    out: list[Action] = []
    for name, ch in tmap.inputs.items():
        out.append(held(ch.values(table, f"{tmap.source}: inputs.{name}"), name, f"trace_{name}"))
    op = tmap.operator or {}
    if "speed_ref_rpm" in op:
        out.append(held(op["speed_ref_rpm"].values(table, f"{tmap.source}: operator.speed_ref_rpm"),
                        "speed_ref_rpm", "trace_speed_ref_rpm"))
    edges: list[Action] = []
    if "run" in op:
        on = op["run"].values(table, f"{tmap.source}: operator.run")[k0:] != 0
        prev = False
        for k, now in enumerate(on):
            if now != prev:
                edges.append(Action(at_s=max(0.0, float(t_keep[k])), action="run" if now else "stop", id=""))
            prev = now
    for name, (ch, param) in (tmap.faults or {}).items():
        on = ch.values(table, f"{tmap.source}: faults.{name}")[k0:] != 0
        k = 0
        while k < len(on):
            if not on[k]:
                k += 1
                continue
            j = k
            while j < len(on) and on[j]:
                j += 1
            t_on = max(0.0, float(t_keep[k]))
            over = 0.0 if j >= len(on) else float(t_keep[j]) - t_on  # still on at the end: to the end
            edges.append(Action(at_s=t_on, action="fault", id="", fault=name, param=param, over_s=over))
            k = j
    edges.sort(key=lambda a: a.at_s)
    out += _named(edges)
    return [a for a in out if a.at_s < duration], duration


@dataclass
class ClosedLoopResult:
    source: Path
    run_dir: Path
    departures: list
    frames: int
    identical: bool  # every compared value equal to the bit, frame for frame
    row: dict  # host.suite.run.run_one's row: verdict (harm checks), timings

    @property
    def departs(self) -> bool:
        return any(d.first_outside_s is not None for d in self.departures)


def closed_loop_replay(run, controller: str = "process", link_url: str | None = None, overrides=(),
                       columns=None, tolerances: dict | None = None) -> ClosedLoopResult:
    """`dcrig runs replay RUN --closed-loop`: the run's recorded operator/load timeline as the
    timeline of a scenario with a live controller (the emulated one as a separate process,
    as `dcrig demo` runs it, in-process, or a real one on link_url), from the run's own
    configs (plus plant `overrides`); judged (harm checks) and compared with the record frame
    by frame. The scenario file is kept in the replay's run folder (scenario.toml) as a
    starting point for one with expectations."""
    import json
    import shutil
    import tempfile

    from host.errors import DcrigError
    from host.record import open_record
    from host.replay import DEFAULT_COMPARE, compare
    from host.suite.run import run_one

    with open_record(run) as rd:
        src_path = rd.path
    lines = ["# closed-loop replay of a recorded run (docs/scenarios.md, 'Closed-loop replay')",
             "[scenario]", 'name = "closed-loop"', f"description = {json.dumps(f'closed-loop replay of {src_path.parent}')}",
             "[replay]", f"source = {json.dumps(str(src_path))}",
             "[controller]", f"kind = {json.dumps('link' if link_url else controller)}"]
    if link_url:
        lines.append(f"link = {json.dumps(link_url)}")
    if overrides:
        lines += ["[plant]", f"set = {json.dumps(list(overrides))}"]
    with tempfile.TemporaryDirectory(prefix="dcrig-replay-") as tmp:
        scn_file = Path(tmp) / "scenario.toml"
        scn_file.write_text("\n".join(lines) + "\n", encoding="utf-8")
        from .load import load_scenario

        load_scenario(scn_file)  # bad input: one line before anything runs
        row = run_one(str(scn_file), str(src_path.parent / "replays"), None, plots=False)
        if row["outcome"] == "error":
            raise DcrigError(f"{src_path}: closed-loop replay: {row['error']}")
        run_dir = Path(row["run_dir"])
        shutil.copyfile(scn_file, run_dir / "scenario.toml")
    with open_record(src_path) as a, open_record(run_dir) as b:
        recorded, replayed = a.frames(), b.frames()
        cols = tuple(columns or DEFAULT_COMPARE)
        deps = compare(a, recorded, replayed, cols, dict(tolerances or {}))
        idx = [a.R[c] for c in cols]
        n = min(len(recorded), len(replayed))
        identical = len(recorded) == len(replayed) and bool(np.array_equal(recorded[:n, idx], replayed[:n, idx]))
    return ClosedLoopResult(src_path, run_dir, deps, len(replayed), identical, row)
