"""Reading and validating scenario files (TOML) into a Scenario.

Owns the scenario file format (docs/scenarios.md): its tables, keys, actions, fault names and
expectation kinds, and every rule on them. Every problem is one ConfigError line
`FILE: KEY: rule, got VALUE`; the CLI prints it and exits 2. Paths inside a scenario are
relative to the scenario file's folder. Imports no rtmodel and no numba.
"""

from __future__ import annotations

import csv
import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from host.errors import ConfigError

# fault name -> (parameter name or None, unit text, rule check, rule text)
FAULTS: dict[str, tuple[str | None, str, Any, str]] = {
    "field_open": (None, "", None, ""),
    "field_rheostat": ("ohm", "ohm added in series with the field", lambda v: v > 0, "must be > 0"),
    "armature_short": (None, "", None, ""),
    "locked_rotor": (None, "", None, ""),
    "coupling_break": (None, "", None, ""),
    "tacho_loss": (None, "", None, ""),
    "tacho_reversed": (None, "", None, ""),
    "encoder_loss": (None, "", None, ""),
    "mains_dip": ("remaining_pu", "mains voltage left, per unit", lambda v: 0 <= v < 1, "must be in 0..1 (exclusive)"),
    "phase_loss": ("phase", "a, b or c", lambda v: v in ("a", "b", "c"), "must be one of 'a', 'b', 'c'"),
    "frequency_step": ("delta_Hz", "mains frequency change", lambda v: -10 <= v <= 10 and v != 0,
                       "must be in -10..10 Hz and not 0"),
    "misfire": ("thyristor", "T1..T6 of the bridge", lambda v: isinstance(v, int) and 1 <= v <= 6, "must be 1..6"),
    "shorted_thyristor": ("thyristor", "T1..T6 of the bridge", lambda v: isinstance(v, int) and 1 <= v <= 6,
                          "must be 1..6"),
    "blown_fuse": ("phase", "a, b or c", lambda v: v in ("a", "b", "c"), "must be one of 'a', 'b', 'c'"),
    "link_drop": (None, "", None, ""),
}
# faults of the bridge's mains and thyristors: need a bridge converter
BRIDGE_FAULTS = {"mains_dip", "phase_loss", "frequency_step", "misfire", "shorted_thyristor", "blown_fuse"}

ACTIONS = ("run", "stop", "quick_stop", "reset", "field_economy", "speed_ref", "speed_ramp", "load_step", "load_ramp",
           "load_profile", "fault")
EXPECT_KINDS = ("trip", "no_trip", "bounds", "settles", "current_zero", "harm")
CONTROLLER_KINDS = ("emulated", "process", "c_example", "link")
TRIP_CLASSES = ("overcurrent", "overload", "overspeed", "field_loss", "tacho_loss", "overvoltage",
                "mains_loss", "mains_sync", "contactor", "comms_loss")
HARM_CHECKS = ("commutation_limit", "overspeed", "field_loss_energised", "winding_temperature",
               "armature_overvoltage", "current_rise_rate")
SIGNALS_NOTE = "a frame record column (host.loop.REC_COLUMNS)"


@dataclass
class Action:
    at_s: float
    action: str
    id: str
    value: float = 0.0  # speed_ref rpm, load_step N m, ramp target
    over_s: float = 0.0  # ramps; fault duration (0 = stays to the end)
    fault: str = ""
    param: Any = None  # the fault's one parameter
    profile: tuple[tuple[float, float], ...] = ()  # load_profile: (t from at_s, N m)
    # "trace" (closed-loop replay, host.scenario.replay): a held channel; target is a model
    # input (host/sim.py INPUTS) or "speed_ref_rpm"; value k holds from times_s[k] after at_s
    target: str = ""
    times_s: tuple[float, ...] = ()
    values: tuple[float, ...] = ()


@dataclass
class Expect:
    kind: str
    name: str  # shown in reports and JUnit; unique within the scenario
    trip_class: str = ""
    after: str = ""  # timeline id of the event the window starts at
    within_ms: float = 0.0
    from_s: float = 0.0
    to_s: float = math.inf
    signal: str = ""
    min: float = -math.inf
    max: float = math.inf
    target: float = 0.0
    band: float = 0.0
    by_s: float = 0.0
    below_A: float = 0.0
    check: str = ""


@dataclass
class Scenario:
    path: Path
    name: str
    description: str
    duration_s: float
    machine: Path
    converter: Path | None
    plant_set: list[str]
    controller_kind: str
    settings: Path | None
    settings_set: dict[str, Any]
    link: str
    encoding: str
    trip_classes: dict[str, list[int]]  # inline table from the scenario (overrides the profile)
    firmware: dict[str, int]  # c_example: its command-line settings
    start_state: str
    start_speed_rpm: float
    start_temperature_C: float | None
    start_field_up: bool
    timeline: list[Action]
    expects: list[Expect]
    harm: dict[str, Any] = field(default_factory=dict)
    harm_accept: list[str] = field(default_factory=list)
    replay: Any = None  # host.scenario.replay.ReplaySource when the timeline comes from a trace

    def ids(self) -> set[str]:
        return {a.id for a in self.timeline}


# ------------------------------------------------------------------------------------------ helpers
class _Reader:
    def __init__(self, src: str):
        self.src = src

    def fail(self, key: str, rule: str, value: Any = ...) -> ConfigError:
        got = "" if value is ... else f", got {value!r}"
        return ConfigError(f"{self.src}: {key}: {rule}{got}")

    def known(self, table: dict, allowed: tuple[str, ...], where: str) -> None:
        for k in table:
            if k not in allowed:
                hint = difflib.get_close_matches(k, allowed, n=1, cutoff=0.6)
                more = f" (did you mean '{where}{hint[0]}'?)" if hint else f" (known: {', '.join(allowed)})"
                raise ConfigError(f"{self.src}: {where}{k}: unknown key{more}")

    def num(self, table: dict, key: str, where: str, default: Any = ..., check=None, rule: str = "") -> float:
        if key not in table:
            if default is ...:
                raise ConfigError(f"{self.src}: {where}{key}: required key is missing")
            return default
        v = table[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise self.fail(where + key, "must be a finite number", v)
        if check is not None and not check(v):
            raise self.fail(where + key, rule, v)
        return float(v)

    def text(self, table: dict, key: str, where: str, default: Any = ..., choices=()) -> str:
        if key not in table:
            if default is ...:
                raise ConfigError(f"{self.src}: {where}{key}: required key is missing")
            return default
        v = table[key]
        if not isinstance(v, str) or not v:
            raise self.fail(where + key, "must be a non-empty string", v)
        if choices and v not in choices:
            raise self.fail(where + key, f"expected one of [{', '.join(choices)}]", v)
        return v

    def path(self, table: dict, key: str, where: str, base: Path, default: Any = ...) -> Path | None:
        if key not in table and default is not ...:
            return default
        rel = self.text(table, key, where)
        p = (base / rel).resolve()
        if not p.is_file():
            raise self.fail(where + key, "file not found", rel)
        return p


def _table(r: _Reader, data: dict, key: str, required: bool = False) -> dict:
    if key not in data:
        if required:
            raise ConfigError(f"{r.src}: {key}: required table is missing")
        return {}
    t = data[key]
    if not isinstance(t, dict):
        raise r.fail(key, "must be a table", t)
    return t


def _read_profile(r: _Reader, path: Path, where: str) -> tuple[tuple[float, float], ...]:
    """CSV with a header: time_s, load_torque_Nm (time from the action's at_s, increasing)."""
    try:
        with path.open(newline="") as fh:
            rows = list(csv.reader(fh))
    except OSError as err:
        raise r.fail(where, f"cannot read the torque profile ({err.strerror})", str(path)) from err
    if not rows or [c.strip() for c in rows[0][:2]] != ["time_s", "load_torque_Nm"]:
        raise r.fail(where, f"{path.name}: header must be 'time_s,load_torque_Nm'", rows[0] if rows else "")
    pts = []
    for k, row in enumerate(rows[1:], start=2):
        if not row or not "".join(row).strip():
            continue
        try:
            t, v = float(row[0]), float(row[1])
        except (ValueError, IndexError) as err:
            raise r.fail(where, f"{path.name} line {k}: expected two numbers", row) from err
        if not (math.isfinite(t) and math.isfinite(v)) or (pts and t <= pts[-1][0]) or t < 0:
            raise r.fail(where, f"{path.name} line {k}: times must be >= 0, finite and increasing", row)
        pts.append((t, v))
    if len(pts) < 2:
        raise r.fail(where, f"{path.name}: needs at least two points", len(pts))
    return tuple(pts)


# ------------------------------------------------------------------------------------------ loader
def read_toml(path: Path, what: str) -> dict:
    """A scenario or suite file as a dict; every way it cannot be read is one ConfigError line
    (a missing file, a folder, bytes that are not UTF-8, bad TOML, nesting too deep)."""
    src = str(path)
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError as err:
        raise ConfigError(f"{src}: (file): not found") from err
    except UnicodeDecodeError as err:
        raise ConfigError(f"{src}: (file): must be UTF-8 text (TOML), got byte 0x{err.object[err.start]:02x} "
                          f"at offset {err.start}") from err
    except OSError as err:
        raise ConfigError(f"{src}: (file): cannot read ({err.strerror})") from err
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{src}: (file): not valid TOML ({err})") from err
    except RecursionError as err:
        raise ConfigError(f"{src}: (file): arrays or tables nested too deeply to be {what} file") from err


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate one scenario file. Raises ConfigError (one line) on any problem."""
    path = Path(path)
    src = str(path)
    r = _Reader(src)
    data = read_toml(path, "a scenario")
    base = path.resolve().parent
    r.known(data, ("scenario", "plant", "controller", "start", "timeline", "expect", "harm", "replay"), "")

    sc = _table(r, data, "scenario", required=True)
    r.known(sc, ("name", "description", "duration_s"), "scenario.")
    name = r.text(sc, "name", "scenario.")
    if not all(c.isalnum() or c in "_-" for c in name):
        raise r.fail("scenario.name", "letters, digits, '_' and '-' only", name)
    replay = None
    rp = _table(r, data, "replay")
    if "replay" in data:  # closed-loop replay: the trace is (part of) the timeline; read and checked now
        from .replay import load_replay

        r.known(rp, ("source", "map"), "replay.")
        rel = r.text(rp, "source", "replay.")
        source = (base / rel).resolve()
        if not source.exists():
            raise r.fail("replay.source", "file or run folder not found", rel)
        map_path = r.path(rp, "map", "replay.", base, default=None)
        replay = load_replay(src, source, map_path)
    duration_rule = "must be in (0, 600] s"
    if replay is not None and "duration_s" not in sc:
        duration = replay.duration_s  # the whole trace
        if not 0 < duration <= 600:
            raise r.fail("scenario.duration_s", f"{duration_rule} (the replayed trace's length; give a shorter "
                         "duration_s)", duration)
    else:
        duration = r.num(sc, "duration_s", "scenario.", check=lambda v: 0 < v <= 600, rule=duration_rule)
    desc = sc.get("description", "")
    if not isinstance(desc, str):
        raise r.fail("scenario.description", "must be a string", desc)

    rec_configs = replay.configs if replay is not None else None
    pl = _table(r, data, "plant", required=rec_configs is None)
    r.known(pl, ("machine", "converter", "set"), "plant.")
    if rec_configs is not None and "machine" not in pl:  # the replayed record's plant, as run
        machine = rec_configs / "machine.toml"
        conv = rec_configs / "converter.toml"
        converter = conv if conv.is_file() and "converter" not in pl else r.path(pl, "converter", "plant.", base,
                                                                                  default=None)
    else:
        machine = r.path(pl, "machine", "plant.", base)
        converter = r.path(pl, "converter", "plant.", base, default=None)
    plant_set = pl.get("set", [])
    if not isinstance(plant_set, list) or not all(isinstance(s, str) and "=" in s for s in plant_set):
        raise r.fail("plant.set", "must be a list of 'KEY=VALUE' strings", plant_set)

    ct = _table(r, data, "controller", required=True)
    r.known(ct, ("kind", "settings", "set", "link", "encoding", "trip_classes", "iref_A", "kp_cdeg_per_A",
                 "trip_A"), "controller.")
    kind = r.text(ct, "kind", "controller.", "emulated", CONTROLLER_KINDS)
    settings = r.path(ct, "settings", "controller.", base, default=None)
    if settings is None and rec_configs is not None and (rec_configs / "controller.toml").is_file() \
            and kind in ("emulated", "process"):
        settings = rec_configs / "controller.toml"  # the replayed record's controller settings, as run
    if kind in ("emulated", "process") and settings is None:
        raise ConfigError(f"{src}: controller.settings: required for kind '{kind}'")
    link = r.text(ct, "link", "controller.", "")
    if kind == "link" and not link:
        raise ConfigError(f"{src}: controller.link: required for kind 'link' (a port or URL)")
    encoding = r.text(ct, "encoding", "controller.", "fixed", ("fixed", "float32"))
    firmware = {}
    for k in ("iref_A", "kp_cdeg_per_A", "trip_A"):
        if k in ct:
            if kind != "c_example":
                raise r.fail("controller." + k, "only for kind 'c_example'", ct[k])
            v = ct[k]
            if isinstance(v, bool) or not isinstance(v, int) or not 0 < v < 100000:
                raise r.fail("controller." + k, "must be a whole number in 1..99999", v)
            firmware[k] = v
    sset = ct.get("set", {})
    if not isinstance(sset, dict):
        raise r.fail("controller.set", "must be a table of settings keys", sset)
    tcl = ct.get("trip_classes", {})
    if not isinstance(tcl, dict):
        raise r.fail("controller.trip_classes", "must be a table class = [codes]", tcl)
    r.known(tcl, TRIP_CLASSES, "controller.trip_classes.")
    trip_classes = {}
    for cls, codes in tcl.items():
        if not isinstance(codes, list) or not all(isinstance(c, int) and not isinstance(c, bool) and 0 < c < 256
                                                  for c in codes):
            raise r.fail(f"controller.trip_classes.{cls}", "must be a list of trip codes 1..255", codes)
        trip_classes[cls] = list(codes)
    if sset and kind != "emulated":
        raise r.fail("controller.set", "only for kind 'emulated' (give a settings file of its own otherwise)",
                     sorted(sset))
    if settings is not None:
        from host.controller.settings import load_settings

        s = load_settings(settings)  # the file alone must be valid
        if sset:
            try:
                s.replace(sset)
            except ConfigError as err:
                raise ConfigError(f"{src}: controller.set: {str(err).split(': ', 1)[1]}") from err

    st = _table(r, data, "start")
    r.known(st, ("state", "speed_rpm", "armature_temperature_C", "field_up"), "start.")
    state = r.text(st, "state", "start.", "standstill", ("standstill", "running"))
    speed = r.num(st, "speed_rpm", "start.", 0.0)
    if state == "running" and speed == 0.0:
        raise ConfigError(f"{src}: start.speed_rpm: required and not 0 for state 'running'")
    if state == "standstill" and speed != 0.0:
        raise r.fail("start.speed_rpm", "must be 0 (or absent) for state 'standstill'", speed)
    temp = r.num(st, "armature_temperature_C", "start.", None, lambda v: -40 <= v <= 250, "must be in -40..250 C")
    field_up = st.get("field_up", state == "running")
    if not isinstance(field_up, bool):
        raise r.fail("start.field_up", "must be true or false", field_up)
    if state == "running" and not field_up:
        raise r.fail("start.field_up", "must be true for state 'running' (a running machine has its field)", field_up)

    timeline = _timeline(r, data.get("timeline", []), base, duration, converter is not None)
    if replay is not None:
        timeline = _merge_replay(r, timeline, replay, duration, converter is not None)
    ids = {a.id for a in timeline}
    # the end of a fault with a duration, a ramp or a profile is an event of its own: "<id>.end"
    ids |= {a.id + ".end" for a in timeline if a.over_s > 0 or a.profile or len(a.times_s) > 1}
    expects = _expects(r, data.get("expect", []), ids, duration)

    hm = _table(r, data, "harm")
    harm_keys = ("accept", "mechanical_limit_rpm", "commutation_speed_pu", "commutation_current_pu",
                 "overvoltage_V", "di_dt_A_per_s", "temperature_limit_C", "field_loss_fraction",
                 "field_loss_current_pu")
    r.known(hm, harm_keys, "harm.")
    accept = hm.get("accept", [])
    if not isinstance(accept, list) or any(a not in HARM_CHECKS for a in accept):
        raise r.fail("harm.accept", f"must be a list of harm checks [{', '.join(HARM_CHECKS)}]", accept)
    harm = {}
    for k in harm_keys[1:]:
        if k not in hm:
            continue
        v = hm[k]
        if k.startswith("commutation_"):
            if not isinstance(v, list) or len(v) < 2 or not all(
                    isinstance(x, (int, float)) and not isinstance(x, bool) and x >= 0 for x in v):
                raise r.fail("harm." + k, "must be a list of at least 2 numbers >= 0", v)
            harm[k] = [float(x) for x in v]
        else:
            harm[k] = r.num(hm, k, "harm.", check=lambda x: x > 0, rule="must be > 0")
    if ("commutation_speed_pu" in harm) != ("commutation_current_pu" in harm):
        raise ConfigError(f"{src}: harm.commutation_current_pu: give both commutation_speed_pu and "
                          "commutation_current_pu, or neither")
    if "commutation_speed_pu" in harm:
        xs, ys = harm["commutation_speed_pu"], harm["commutation_current_pu"]
        if len(xs) != len(ys):
            raise r.fail("harm.commutation_current_pu", "must have as many points as commutation_speed_pu", len(ys))
        if xs[0] != 0.0 or any(b <= a for a, b in zip(xs, xs[1:])):
            raise r.fail("harm.commutation_speed_pu", "must start at 0 and increase", xs)
    return Scenario(path=path.resolve(), name=name, description=desc, duration_s=duration, machine=machine,
                    converter=converter, plant_set=list(plant_set), controller_kind=kind, settings=settings,
                    settings_set=dict(sset), link=link, encoding=encoding, trip_classes=trip_classes, firmware=firmware,
                    start_state=state, start_speed_rpm=speed, start_temperature_C=temp, start_field_up=field_up, timeline=timeline,
                    expects=expects, harm=harm, harm_accept=list(accept), replay=replay)


def _merge_replay(r: _Reader, timeline: list[Action], replay, duration: float, has_bridge: bool) -> list[Action]:
    """The trace's actions join the file's own timeline; a replayed id already used by the
    file is refused (the expectations would not know which one they mean)."""
    own = {a.id for a in timeline}
    for a in replay.actions:
        if a.id in own:
            raise r.fail("timeline", f"id '{a.id}' is also an action of the replayed trace ({replay.source.name}); "
                         "give the timeline entry another id", a.id)
        if a.fault in BRIDGE_FAULTS and not has_bridge:
            raise r.fail(f"replay.map: faults.{a.fault}", "needs a bridge converter (plant.converter)", a.fault)
    out = timeline + [a for a in replay.actions if a.at_s < duration]
    out.sort(key=lambda a: a.at_s)
    return out


def _timeline(r: _Reader, items, base: Path, duration: float, has_bridge: bool) -> list[Action]:
    if not isinstance(items, list):
        raise r.fail("timeline", "must be an array of tables [[timeline]]", items)
    out: list[Action] = []
    seen: dict[str, int] = {}
    for k, it in enumerate(items):
        w = f"timeline[{k}]."
        if not isinstance(it, dict):
            raise r.fail(f"timeline[{k}]", "must be a table", it)
        r.known(it, ("at_s", "action", "id", "value", "over_s", "fault", "duration_s", "file", "ohm",
                     "remaining_pu", "phase", "delta_Hz", "thyristor"), w)
        at = r.num(it, "at_s", w, check=lambda v: 0 <= v < duration, rule=f"must be in [0, scenario.duration_s = {duration:g})")
        action = r.text(it, "action", w, choices=ACTIONS)
        a = Action(at_s=at, action=action, id="")
        if action in ("speed_ref", "load_step"):
            a.value = r.num(it, "value", w)
        elif action == "field_economy":
            a.value = r.num(it, "value", w, check=lambda v: v in (0, 1), rule="must be 1 (on) or 0 (off)")
        elif action in ("speed_ramp", "load_ramp"):
            a.value = r.num(it, "value", w)
            a.over_s = r.num(it, "over_s", w, check=lambda v: v > 0, rule="must be > 0")
        elif action == "load_profile":
            p = r.path(it, "file", w, base)
            a.profile = _read_profile(r, p, w + "file")
        elif action == "fault":
            fault = r.text(it, "fault", w, choices=tuple(FAULTS))
            a.fault = fault
            if fault in BRIDGE_FAULTS and not has_bridge:
                raise r.fail(w + "fault", "needs a bridge converter (plant.converter)", fault)
            a.over_s = r.num(it, "duration_s", w, 0.0, lambda v: v >= 0, "must be >= 0 (0 = to the end)")
            pname = FAULTS[fault][0]
            for other in ("ohm", "remaining_pu", "phase", "delta_Hz", "thyristor"):
                if other in it and other != pname:
                    raise r.fail(w + other, f"not a parameter of fault '{fault}'"
                                 + (f" (it takes '{pname}')" if pname else " (it takes none)"), it[other])
            if pname is not None:
                if pname not in it:
                    raise ConfigError(f"{r.src}: {w}{pname}: required for fault '{fault}' ({FAULTS[fault][1]})")
                v = it[pname]
                try:
                    ok = FAULTS[fault][2](v)
                except TypeError:
                    ok = False
                if not ok or isinstance(v, bool):
                    raise r.fail(w + pname, FAULTS[fault][3], v)
                a.param = v
        for extra in ("value", "over_s", "file", "fault", "duration_s"):
            used = {"speed_ref": ("value",), "load_step": ("value",), "field_economy": ("value",),
                    "speed_ramp": ("value", "over_s"),
                    "load_ramp": ("value", "over_s"), "load_profile": ("file",),
                    "fault": ("fault", "duration_s")}.get(action, ())
            if extra in it and extra not in used:
                raise r.fail(w + extra, f"not used by action '{action}'", it[extra])
        ident = it.get("id", a.fault or action)
        if not isinstance(ident, str) or not ident or not all(c.isalnum() or c in "_-" for c in ident):
            raise r.fail(w + "id", "letters, digits, '_' and '-' only", ident)
        if "id" in it and ident in seen:
            raise r.fail(w + "id", f"already used by timeline[{seen[ident]}]", ident)
        if ident in seen:  # a repeated default id: number it
            ident = f"{ident}_{sum(1 for x in out if x.id.startswith(ident))+1}"
        seen[ident] = k
        a.id = ident
        out.append(a)
    out.sort(key=lambda a: a.at_s)
    return out


def _expects(r: _Reader, items, ids: set[str], duration: float) -> list[Expect]:
    from host.loop import REC_COLUMNS

    if not isinstance(items, list):
        raise r.fail("expect", "must be an array of tables [[expect]]", items)
    out = []
    names = set()
    for k, it in enumerate(items):
        w = f"expect[{k}]."
        if not isinstance(it, dict):
            raise r.fail(f"expect[{k}]", "must be a table", it)
        kind = r.text(it, "kind", w, choices=EXPECT_KINDS)
        allowed = {"trip": ("class", "after", "within_ms"), "no_trip": ("from_s", "to_s"),
                   "bounds": ("signal", "min", "max", "from_s", "to_s", "after"),
                   "settles": ("signal", "target", "band", "by_s", "to_s"),
                   "current_zero": ("within_ms", "below_A"), "harm": ("check",)}[kind]
        r.known(it, ("kind", "name") + allowed, w)
        e = Expect(kind=kind, name="")
        if "after" in it:
            e.after = r.text(it, "after", w)
            if e.after not in ids:
                hint = difflib.get_close_matches(e.after, sorted(ids), n=1)
                more = f"; did you mean '{hint[0]}'?" if hint else ""
                raise r.fail(w + "after", f"no timeline entry has this id{more}", e.after)
        if kind == "trip":
            e.trip_class = r.text(it, "class", w, choices=TRIP_CLASSES)
            if not e.after:
                raise ConfigError(f"{r.src}: {w}after: required for kind 'trip' (a timeline id)")
            e.within_ms = r.num(it, "within_ms", w, check=lambda v: v > 0, rule="must be > 0")
        elif kind in ("no_trip", "bounds"):
            e.from_s = r.num(it, "from_s", w, 0.0, lambda v: v >= 0, "must be >= 0")
            e.to_s = r.num(it, "to_s", w, math.inf, lambda v: v > e.from_s, "must be > from_s")
        if kind in ("bounds", "settles"):
            e.signal = r.text(it, "signal", w)
            if e.signal not in REC_COLUMNS:
                hint = difflib.get_close_matches(e.signal, REC_COLUMNS, n=1)
                more = f"; did you mean '{hint[0]}'?" if hint else ""
                raise r.fail(w + "signal", f"must be {SIGNALS_NOTE}{more}", e.signal)
        if kind == "bounds":
            e.min = r.num(it, "min", w, -math.inf)
            e.max = r.num(it, "max", w, math.inf)
            if "min" not in it and "max" not in it:
                raise ConfigError(f"{r.src}: {w}min: give min, max or both")
            if e.min >= e.max:
                raise r.fail(w + "max", "must be > min", e.max)
        elif kind == "settles":
            e.target = r.num(it, "target", w)
            e.band = r.num(it, "band", w, check=lambda v: v > 0, rule="must be > 0")
            e.by_s = r.num(it, "by_s", w, check=lambda v: 0 < v < duration, rule="must be inside the run")
            e.to_s = r.num(it, "to_s", w, math.inf, lambda v: v > e.by_s, "must be > by_s")
        elif kind == "current_zero":
            e.within_ms = r.num(it, "within_ms", w, check=lambda v: v > 0, rule="must be > 0")
            e.below_A = r.num(it, "below_A", w, check=lambda v: v > 0, rule="must be > 0")
        elif kind == "harm":
            e.check = r.text(it, "check", w, choices=HARM_CHECKS)
        default = {"trip": f"trip_{e.trip_class}_after_{e.after}", "no_trip": "no_trip",
                   "bounds": f"bounds_{e.signal}", "settles": f"settles_{e.signal}",
                   "current_zero": "current_zero_after_trip", "harm": f"harm_{e.check}_flagged"}[kind]
        e.name = r.text(it, "name", w, default)
        if e.name in names:
            e.name = f"{e.name}_{k}"
        names.add(e.name)
        out.append(e)
    return out
