"""Campaign files: loading, validation, and the expansion into runs with stable run ids.

Owns: the campaign TOML format (documented in docs/campaign.md), every rule on it (one line
`FILE: KEY: rule, got VALUE` as host.errors.ConfigError), the parameter spread (grid or Latin
hypercube), and `Campaign.runs()`: the list of RunSpec, one per controller x scenario x
parameter sample, each with a run id that is a hash of everything that decides its result.
Imports no rtmodel kernel and no dask: a campaign is checked completely before any worker starts.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ConfigError
from ..schema import CONVERTER_KEYS, MACHINE_KEYS
from .sampling import DISTRIBUTIONS, Distribution, grid, latin_hypercube

KINDS = ("transient", "scenario")
METHODS = ("latin_hypercube", "grid")
RECORDS = ("all", "failed", "none")
# keys a spread may vary: numeric machine, mechanics (load), converter and mains keys
_SPREAD_KEYS = {k.path: ("machine", k) for k in MACHINE_KEYS if k.kind in ("float", "int")}
_SPREAD_KEYS.update({k.path: ("converter", k) for k in CONVERTER_KEYS if k.kind in ("float", "int")})
MAX_RUNS = 1_000_000
CONTROLLER_KINDS = ("emulated", "c_example")
FIRMWARE_KEYS = ("iref_A", "kp_cdeg_per_A", "trip_A")
# every key of a campaign file, by table ("" = top level); docs/campaign.md documents each
# (a test keeps the two in step)
FILE_KEYS = {
    "": ("campaign", "plant", "case", "controller", "spread", "execution"),
    "campaign": ("name", "kind", "seed", "description", "scenarios", "suite", "select", "exclude"),
    "controller": ("name", "kind", "settings", "set") + FIRMWARE_KEYS,
    "spread": ("method", "samples", "parameter"),
    "spread.parameter": ("key", "distribution", "relative", "low", "high", "mean", "sd", "mode", "levels", "points"),
    "execution": ("retries", "records"),
    "plant": ("machine", "converter", "set"),
    "case": ("name", "t_end_s", "sample_s", "inputs", "changes", "ramps", "limits"),
    "case.limits": ("figure", "min", "max"),
}


def _fail(src: str, key: str, rule: str, value: Any) -> ConfigError:
    return ConfigError(f"{src}: {key}: {rule}, got {value!r}")


def _unknown(src: str, where: str, table: dict, allowed: tuple[str, ...]) -> None:
    for name in table:
        if name not in allowed:
            hint = difflib.get_close_matches(name, allowed, n=1)
            more = f"; did you mean '{hint[0]}'?" if hint else ""
            raise ConfigError(f"{src}: {where}{'.' if where else ''}{name}: unknown key{more} "
                              f"(known: {', '.join(allowed)})")


def _get(src, where, table, name, kind, default=None, required=False):
    key = f"{where}.{name}" if where else name
    if name not in table:
        if required:
            raise ConfigError(f"{src}: {key}: required key is missing")
        return default
    v = table[name]
    if kind == "str":
        if not isinstance(v, str) or not v.strip():
            raise _fail(src, key, "must be a non-empty string", v)
        return v
    if kind == "float":
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise _fail(src, key, "must be a finite number", v)
        return float(v)
    if kind == "int":
        if isinstance(v, bool) or not isinstance(v, int):
            raise _fail(src, key, "must be a whole number", v)
        return v
    if kind == "bool":
        if not isinstance(v, bool):
            raise _fail(src, key, "must be true or false", v)
        return v
    if kind == "strs":
        if not isinstance(v, list) or not all(isinstance(s, str) for s in v):
            raise _fail(src, key, "must be a list of strings", v)
        return list(v)
    if kind == "floats":
        if not isinstance(v, list) or not v or any(
                isinstance(s, bool) or not isinstance(s, (int, float)) or not math.isfinite(s) for s in v):
            raise _fail(src, key, "must be a non-empty list of finite numbers", v)
        return [float(s) for s in v]
    if kind == "table":
        if not isinstance(v, dict):
            raise _fail(src, key, "must be a table", v)
        return v
    if kind == "tables":
        if not isinstance(v, list) or not all(isinstance(s, dict) for s in v):
            raise _fail(src, key, "must be an array of tables ([[...]])", v)
        return v
    raise AssertionError(kind)


def _choice(src, key, value, choices):
    if value not in choices:
        hint = difflib.get_close_matches(str(value), choices, n=1)
        more = f"; did you mean '{hint[0]}'?" if hint else ""
        raise ConfigError(f"{src}: {key}: expected one of {list(choices)}, got {value!r}{more}")
    return value


def file_digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:16]


@dataclass(frozen=True)
class Parameter:
    """One varied key: its config path, which config it belongs to, and its spread."""

    key: str
    config: str  # "machine" or "converter"
    dist: Distribution
    relative: bool  # values are factors of the key's nominal value in the plant config
    points: int | None  # grid: evenly spaced points over [low, high]
    integer: bool  # the key is a whole number

    @property
    def column(self) -> str:
        return f"param:{self.key}"


@dataclass(frozen=True)
class Controller:
    """A controller variant: the emulated controller with a settings file (and key changes),
    or the host-compiled C example firmware from tools/fwlib with its command-line settings."""

    name: str
    kind: str = "emulated"
    settings: Path | None = None
    settings_set: tuple[tuple[str, Any], ...] = ()
    firmware: tuple[tuple[str, int], ...] = ()

    def digest(self) -> str:
        parts = [self.name, self.kind, file_digest(self.settings) if self.settings is not None else "-",
                 json.dumps(self.settings_set), json.dumps(self.firmware)]
        if self.kind == "c_example":
            fw = Path(__file__).resolve().parents[2] / "tools" / "fwlib"
            parts += [file_digest(fw / n) for n in ("example_controller.c", "dcrig_link.c", "dcrig_link.h")]
        return ":".join(parts)


@dataclass(frozen=True)
class Limit:
    """A bound on one figure of a transient case: min <= figure <= max."""

    figure: str
    min: float | None
    max: float | None

    @property
    def name(self) -> str:
        return f"{self.figure}_limit"


@dataclass(frozen=True)
class Case:
    """A scenario of a campaign. kind 'transient': an offline run of the plant with input
    changes and limits on its figures. kind 'scenario': a scenario file run by host.scenario."""

    name: str
    t_end_s: float = 0.0
    sample_s: float = 1e-3
    inputs: tuple[str, ...] = ()
    changes: tuple[str, ...] = ()
    ramps: tuple[str, ...] = ()
    limits: tuple[Limit, ...] = ()
    path: Path | None = None  # scenario kind: the scenario file
    depends: tuple[Path, ...] = ()  # scenario kind: the plant files it names (their content counts)

    def digest(self) -> str:
        if self.path is not None:
            return ":".join([self.name] + [file_digest(p) for p in (self.path,) + self.depends])
        body = json.dumps([self.t_end_s, self.sample_s, self.inputs, self.changes, self.ramps,
                           [(lim.figure, lim.min, lim.max) for lim in self.limits]], sort_keys=True)
        return f"{self.name}:{hashlib.sha256(body.encode()).hexdigest()[:16]}"


@dataclass(frozen=True)
class RunSpec:
    """Everything a worker needs for one run. Picklable; paths are absolute."""

    run_id: str
    campaign: str
    kind: str
    controller: Controller | None
    case: Case
    machine: Path | None
    converter: Path | None
    fixed_overrides: tuple[str, ...]
    params: tuple[tuple[str, float], ...]  # (key, absolute value) in the campaign's key order
    sample: int  # index of the parameter point (0-based)

    @property
    def controller_name(self) -> str:
        return self.controller.name if self.controller is not None else "none"

    def overrides(self) -> list[str]:
        return list(self.fixed_overrides) + [f"{k}={_toml_number(v)}" for k, v in self.params]


def _toml_number(v: float) -> str:
    if float(v).is_integer() and abs(v) < 2**53:
        return repr(float(v)) if isinstance(v, float) else str(v)
    return repr(float(v))


@dataclass
class Campaign:
    source: Path
    name: str
    kind: str
    seed: int
    method: str
    samples: int
    parameters: list[Parameter]
    controllers: list[Controller]
    cases: list[Case]
    machine: Path | None
    converter: Path | None
    fixed_overrides: list[str]
    retries: int = 2
    records: str = "all"
    description: str = ""
    nominal: dict[str, dict[str, float]] = field(default_factory=dict)  # case name -> key -> value

    def points(self, case: str | None = None) -> np.ndarray:
        """The parameter points, shape (n_points, n_parameters): absolute values for `case`
        (relative spreads scale that case's nominal plant values). Every controller and every
        case sees the same point i, so variants are compared on the same plants."""
        if not self.parameters:
            return np.zeros((1, 0))
        if self.method == "grid":
            pts = grid([p.dist.grid_levels(p.points) for p in self.parameters])
        else:
            u = latin_hypercube(self.samples, len(self.parameters), self.seed)
            pts = np.column_stack([p.dist.quantile(u[:, j]) for j, p in enumerate(self.parameters)])
        for j, p in enumerate(self.parameters):
            if p.relative and case is not None:
                pts[:, j] = pts[:, j] * self.nominal[case][p.key]
            if p.integer:
                pts[:, j] = np.round(pts[:, j])
        return pts

    def runs(self) -> list[RunSpec]:
        pts_of = {c.name: self.points(c.name) for c in self.cases}
        controllers = self.controllers or [None]
        ctrl_digest = {c.name: c.digest() for c in self.controllers}
        case_digest = {c.name: c.digest() for c in self.cases}
        plant = ":".join(file_digest(p) if p else "-" for p in (self.machine, self.converter))
        out = []
        for ctrl in controllers:
            for case in self.cases:
                for i, row in enumerate(pts_of[case.name]):
                    params = tuple((p.key, int(v) if p.integer else float(v)) for p, v in zip(self.parameters, row))
                    ident = {
                        "campaign": self.name, "kind": self.kind,
                        "controller": ctrl_digest[ctrl.name] if ctrl else "none",
                        "scenario": case_digest[case.name], "plant": plant,
                        "fixed": list(self.fixed_overrides),
                        "params": [[k, repr(v)] for k, v in params],
                    }
                    rid = hashlib.sha256(json.dumps(ident, sort_keys=True).encode()).hexdigest()[:16]
                    out.append(RunSpec(rid, self.name, self.kind, ctrl, case, self.machine, self.converter,
                                       tuple(self.fixed_overrides), params, i))
        return out

    @property
    def n_runs(self) -> int:
        n_pts = self.samples if self.method == "latin_hypercube" else int(np.prod(
            [len(p.dist.grid_levels(p.points)) for p in self.parameters])) if self.parameters else 1
        return max(1, len(self.controllers)) * len(self.cases) * n_pts


def _path(src: str, base: Path, key: str, text: str) -> Path:
    p = (base / text).resolve()
    if not p.is_file():
        raise ConfigError(f"{src}: {key}: file not found, got {text!r}")
    return p


def _parse_parameter(src, where, t, method) -> Parameter:
    _unknown(src, where, t, FILE_KEYS["spread.parameter"])
    key = _get(src, where, t, "key", "str", required=True)
    if key not in _SPREAD_KEYS:
        pool = list(_SPREAD_KEYS)
        hint = difflib.get_close_matches(key, pool, n=1)
        more = f"; did you mean '{hint[0]}'?" if hint else ""
        raise ConfigError(f"{src}: {where}.key: not a numeric machine, mechanics or converter key "
                          f"(see docs/config-reference.md), got {key!r}{more}")
    config, skey = _SPREAD_KEYS[key]
    dist_name = _choice(src, f"{where}.distribution", _get(src, where, t, "distribution", "str", required=True),
                        DISTRIBUTIONS)
    relative = _get(src, where, t, "relative", "bool", False)
    points = _get(src, where, t, "points", "int")
    need = {"uniform": ("low", "high"), "loguniform": ("low", "high"), "normal": ("mean", "sd"),
            "triangular": ("low", "mode", "high"), "levels": ("levels",)}[dist_name]
    allowed = set(need) | {"key", "distribution", "relative", "points"}
    if dist_name == "normal":
        allowed |= {"low", "high"}
    for name in t:
        if name not in allowed:
            raise ConfigError(f"{src}: {where}.{name}: not used by distribution '{dist_name}' "
                              f"(it takes {', '.join(need)})")
    vals = {n: _get(src, where, t, n, "float", required=n in need) for n in ("low", "high", "mean", "sd", "mode")}
    levels = tuple(_get(src, where, t, "levels", "floats", [], required="levels" in need))
    lo, hi = vals["low"], vals["high"]
    if dist_name in ("uniform", "loguniform", "triangular") and not lo < hi:
        raise _fail(src, f"{where}.high", f"must exceed low ({lo:g})", hi)
    if dist_name == "loguniform" and lo <= 0:
        raise _fail(src, f"{where}.low", "must be > 0 for a loguniform spread", lo)
    if dist_name == "triangular" and not lo <= vals["mode"] <= hi:
        raise _fail(src, f"{where}.mode", f"must lie within [low, high] = [{lo:g}, {hi:g}]", vals["mode"])
    if dist_name == "normal":
        if not vals["sd"] > 0:
            raise _fail(src, f"{where}.sd", "must be > 0", vals["sd"])
        if lo is not None and hi is not None and not lo < hi:
            raise _fail(src, f"{where}.high", f"must exceed low ({lo:g})", hi)
    if points is not None:
        if method != "grid":
            raise _fail(src, f"{where}.points", "is for method = 'grid' only", points)
        if dist_name not in ("uniform", "loguniform"):
            raise _fail(src, f"{where}.points", "needs distribution 'uniform' or 'loguniform'", points)
        if points < 2:
            raise _fail(src, f"{where}.points", "must be >= 2", points)
    if method == "grid" and dist_name != "levels" and points is None:
        raise ConfigError(f"{src}: {where}.distribution: a grid needs 'levels', or 'uniform'/'loguniform' "
                          f"with 'points', got {dist_name!r}")
    dist = Distribution(dist_name, low=math.nan if lo is None else lo, high=math.nan if hi is None else hi,
                        mean=vals["mean"] if vals["mean"] is not None else math.nan,
                        sd=vals["sd"] if vals["sd"] is not None else math.nan,
                        mode=vals["mode"] if vals["mode"] is not None else math.nan, levels=levels)
    if dist_name == "normal":
        dist = Distribution("normal", low=-math.inf if lo is None else lo, high=math.inf if hi is None else hi,
                            mean=vals["mean"], sd=vals["sd"])
    return Parameter(key, config, dist, relative, points, skey.kind == "int")


def _parse_case(src, where, t) -> Case:
    _unknown(src, where, t, FILE_KEYS["case"])
    name = _get(src, where, t, "name", "str", required=True)
    t_end = _get(src, where, t, "t_end_s", "float", required=True)
    if not 0 < t_end <= 600:
        raise _fail(src, f"{where}.t_end_s", "must be within (0, 600] s", t_end)
    sample = _get(src, where, t, "sample_s", "float", 1e-3)
    if not 0 < sample <= t_end:
        raise _fail(src, f"{where}.sample_s", f"must be within (0, t_end_s = {t_end:g}] s", sample)
    from ..sim import parse_ramp, parse_step

    inputs = _get(src, where, t, "inputs", "strs", [])
    changes = _get(src, where, t, "changes", "strs", [])
    ramps = _get(src, where, t, "ramps", "strs", [])
    try:  # the same grammar as `dcrig sim`; its message names the option, ours the key
        for s in inputs:
            if "=" not in s:
                raise ConfigError(f"'{s}': expected NAME=VALUE")
            n_, v_ = s.split("=", 1)
            parse_step(f"{n_}@0={v_}")
        for s in changes:
            parse_step(s)
        for s in ramps:
            parse_ramp(s)
    except ConfigError as err:
        raise ConfigError(f"{src}: {where}: {str(err).split(': ', 1)[-1]}") from err
    limits = []
    for j, lt in enumerate(_get(src, where, t, "limits", "tables", [])):
        lw = f"{where}.limits[{j}]"
        _unknown(src, lw, lt, FILE_KEYS["case.limits"])
        fig = _get(src, lw, lt, "figure", "str", required=True)
        from .transient import figure_known

        if not figure_known(fig):
            raise _fail(src, f"{lw}.figure", "unknown figure (see docs/campaign.md: peak_/final_/min_/max_ "
                        "SIGNAL, or SIGNAL@T)", fig)
        lo = _get(src, lw, lt, "min", "float")
        hi = _get(src, lw, lt, "max", "float")
        if lo is None and hi is None:
            raise ConfigError(f"{src}: {lw}: needs min, max or both")
        if lo is not None and hi is not None and not lo < hi:
            raise _fail(src, f"{lw}.max", f"must exceed min ({lo:g})", hi)
        limits.append(Limit(fig, lo, hi))
    if not limits:
        raise ConfigError(f"{src}: {where}.limits: a transient case needs at least one limit (its verdict)")
    return Case(name, t_end, sample, tuple(inputs), tuple(changes), tuple(ramps), tuple(limits))


def load_campaign(path: str | Path) -> Campaign:
    """Read and check a campaign file completely (every run's configs too). One-line errors."""
    path = Path(path)
    src = str(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError as err:
        raise ConfigError(f"{src}: (file): not found") from err
    except OSError as err:
        raise ConfigError(f"{src}: (file): cannot read ({err.strerror})") from err
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise ConfigError(f"{src}: (file): not valid TOML ({err})") from err
    base = path.resolve().parent
    _unknown(src, "", data, FILE_KEYS[""])
    if "campaign" not in data:
        raise ConfigError(f"{src}: campaign: required table is missing (is this a campaign file?)")
    head = _get(src, "", data, "campaign", "table")
    _unknown(src, "campaign", head, FILE_KEYS["campaign"])
    name = _get(src, "campaign", head, "name", "str", required=True)
    kind = _choice(src, "campaign.kind", _get(src, "campaign", head, "kind", "str", required=True), KINDS)
    seed = _get(src, "campaign", head, "seed", "int", 0)
    if seed < 0:
        raise _fail(src, "campaign.seed", "must be >= 0", seed)
    description = _get(src, "campaign", head, "description", "str", "")

    spread = _get(src, "", data, "spread", "table", {})
    _unknown(src, "spread", spread, FILE_KEYS["spread"])
    method = _choice(src, "spread.method", _get(src, "spread", spread, "method", "str", "latin_hypercube"), METHODS)
    samples = _get(src, "spread", spread, "samples", "int", 0)
    if method == "grid" and "samples" in spread:
        raise _fail(src, "spread.samples", "is for method = 'latin_hypercube' only (a grid has its own size)", samples)
    params = [_parse_parameter(src, f"spread.parameter[{j}]", t, method)
              for j, t in enumerate(_get(src, "spread", spread, "parameter", "tables", []))]
    seen = set()
    for j, p in enumerate(params):
        if p.key in seen:
            raise _fail(src, f"spread.parameter[{j}].key", "is varied twice", p.key)
        seen.add(p.key)
    if method == "latin_hypercube":
        if params and samples < 1:
            raise _fail(src, "spread.samples", "must be >= 1 for latin_hypercube", samples)
        if not params:
            samples = 1

    execution = _get(src, "", data, "execution", "table", {})
    _unknown(src, "execution", execution, FILE_KEYS["execution"])
    retries = _get(src, "execution", execution, "retries", "int", 2)
    if not 0 <= retries <= 10:
        raise _fail(src, "execution.retries", "must be within [0, 10]", retries)
    records = _choice(src, "execution.records", _get(src, "execution", execution, "records", "str", "all"), RECORDS)

    controllers = []
    for j, t in enumerate(_get(src, "", data, "controller", "tables", [])):
        w = f"controller[{j}]"
        _unknown(src, w, t, FILE_KEYS["controller"])
        cname = _get(src, w, t, "name", "str", required=True)
        ckind = _choice(src, f"{w}.kind", _get(src, w, t, "kind", "str", "emulated"), CONTROLLER_KINDS)
        settings = _get(src, w, t, "settings", "str")
        sset = _get(src, w, t, "set", "table", {})
        if ckind == "emulated" and settings is None:
            raise ConfigError(f"{src}: {w}.settings: required for kind 'emulated' (the controller's settings file)")
        if ckind != "emulated" and (settings is not None or sset):
            raise ConfigError(f"{src}: {w}.settings: only for kind 'emulated', got kind {ckind!r}")
        fw = {}
        for k in FIRMWARE_KEYS:
            if k in t:
                if ckind != "c_example":
                    raise _fail(src, f"{w}.{k}", "only for kind 'c_example'", t[k])
                v = _get(src, w, t, k, "int")
                if not 0 < v < 100000:
                    raise _fail(src, f"{w}.{k}", "must be a whole number in 1..99999", v)
                fw[k] = v
        sp = _path(src, base, f"{w}.settings", settings) if settings else None
        if sp is not None:
            from ..controller.settings import load_settings

            s_ = load_settings(sp)
            if sset:
                try:
                    s_.replace(sset)
                except ConfigError as err:
                    raise ConfigError(f"{src}: {w}.set: {str(err).split(': ', 1)[-1]}") from err
        if any(c.name == cname for c in controllers):
            raise _fail(src, f"{w}.name", "is used twice", cname)
        controllers.append(Controller(cname, ckind, sp, tuple(sorted(sset.items())), tuple(sorted(fw.items()))))

    machine = converter = None
    fixed: list[str] = []
    cases: list[Case] = []
    if kind == "transient":
        if controllers:
            raise ConfigError(f"{src}: controller: a transient campaign runs the plant open loop; "
                              f"controllers belong to kind = 'scenario'")
        for k in ("scenarios", "suite", "select", "exclude"):
            if k in head:
                raise ConfigError(f"{src}: campaign.{k}: belongs to kind = 'scenario'; a transient campaign "
                                  f"has [[case]] tables")
        plant = _get(src, "", data, "plant", "table", required=True)
        _unknown(src, "plant", plant, FILE_KEYS["plant"])
        machine = _path(src, base, "plant.machine", _get(src, "plant", plant, "machine", "str", required=True))
        conv = _get(src, "plant", plant, "converter", "str")
        converter = _path(src, base, "plant.converter", conv) if conv else None
        fixed = _get(src, "plant", plant, "set", "strs", [])
        for j, t in enumerate(_get(src, "", data, "case", "tables", [])):
            c = _parse_case(src, f"case[{j}]", t)
            if any(o.name == c.name for o in cases):
                raise _fail(src, f"case[{j}].name", "is used twice", c.name)
            cases.append(c)
        if not cases:
            raise ConfigError(f"{src}: case: a transient campaign needs at least one [[case]]")
    else:
        from .scenario_kind import parse_scenarios

        cases = parse_scenarios(src, base, data, head)
        if not controllers:
            raise ConfigError(f"{src}: controller: a scenario campaign needs at least one [[controller]]")

    camp = Campaign(path, name, kind, seed, method, samples, params, controllers, cases, machine, converter,
                    fixed, retries, records, description)
    if camp.n_runs > MAX_RUNS:
        raise _fail(src, "spread", f"gives more than {MAX_RUNS} runs", camp.n_runs)
    _check_plant(camp, src)
    return camp


def _check_plant(camp: Campaign, src: str) -> None:
    """Nominal values for relative spreads, and every parameter point through the config rules."""
    if camp.kind != "transient":
        from .scenario_kind import check_plant

        check_plant(camp, src)
        return
    from .transient import load_plant

    nominal = {}
    if any(p.relative for p in camp.parameters):
        plant = load_plant(camp.machine, camp.converter, camp.fixed_overrides, src)
        for p in camp.parameters:
            if p.relative:
                nominal[p.key] = nominal_value(plant, p, src, "plant")
    camp.nominal = {c.name: nominal for c in camp.cases}
    pts = camp.points(camp.cases[0].name)
    for i, row in enumerate(pts):
        over = list(camp.fixed_overrides) + [f"{p.key}={_toml_number(v)}" for p, v in zip(camp.parameters, row)]
        try:
            load_plant(camp.machine, camp.converter, over, src)
        except ConfigError as err:
            raise point_error(src, camp, i, row, err) from err


def nominal_value(plant, p: Parameter, src: str, where: str) -> float:
    cfg = plant.machine if p.config == "machine" else plant.converter
    if cfg is None:
        raise ConfigError(f"{src}: spread: {p.key}: a converter key, but {where} has no converter")
    nominal = cfg.values.get(p.key)
    if isinstance(nominal, bool) or not isinstance(nominal, (int, float)):
        raise ConfigError(f"{src}: spread: {p.key}: relative = true needs a nominal value in the "
                          f"plant config of {where}, got {nominal!r}")
    return float(nominal)


def point_error(src: str, camp: Campaign, i: int, row, err: Exception) -> ConfigError:
    vals = ", ".join(f"{p.key}={v:.6g}" for p, v in zip(camp.parameters, row))
    return ConfigError(f"{src}: spread: parameter point {i} ({vals}) breaks a plant rule: {err}")
