"""Reading and validating suite files (TOML): which scenarios, which must fail, baseline tolerances.

Every scenario of the suite is loaded (validated) here, so a bad file stops the suite before
any run starts: one ConfigError line naming the file and key, exit 2.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from host.errors import ConfigError
from host.scenario.load import Scenario, _Reader, load_scenario, read_toml

DEFAULT_TOLERANCES = {"ms": 3.0, "s": 0.05, "relative": 0.05}


@dataclass
class SuiteRun:
    scenario: Scenario
    must_fail: bool = False  # a deliberately wrong controller: the verdict must be FAIL


@dataclass
class Suite:
    path: Path
    name: str
    description: str
    runs: list[SuiteRun]
    tolerances: dict[str, float] = field(default_factory=lambda: dict(DEFAULT_TOLERANCES))


def load_suite(path: str | Path) -> Suite:
    path = Path(path)
    src = str(path)
    r = _Reader(src)
    data = read_toml(path, "a suite")
    r.known(data, ("suite", "baseline", "run"), "")
    st = data.get("suite")
    if not isinstance(st, dict):
        raise ConfigError(f"{src}: suite: required table is missing")
    r.known(st, ("name", "description"), "suite.")
    name = r.text(st, "name", "suite.")
    desc = st.get("description", "")
    bl = data.get("baseline", {})
    if not isinstance(bl, dict):
        raise r.fail("baseline", "must be a table", bl)
    r.known(bl, tuple(DEFAULT_TOLERANCES), "baseline.")
    tol = dict(DEFAULT_TOLERANCES)
    for k in bl:
        tol[k] = r.num(bl, k, "baseline.", check=lambda v: v >= 0, rule="must be >= 0")
    runs_in = data.get("run", [])
    if not isinstance(runs_in, list) or not runs_in:
        raise ConfigError(f"{src}: run: at least one [[run]] with a scenario is required")
    base = path.resolve().parent
    runs = []
    names: dict[str, int] = {}
    for k, it in enumerate(runs_in):
        w = f"run[{k}]."
        if not isinstance(it, dict):
            raise r.fail(f"run[{k}]", "must be a table", it)
        r.known(it, ("scenario", "must_fail"), w)
        p = r.path(it, "scenario", w, base)
        must_fail = it.get("must_fail", False)
        if not isinstance(must_fail, bool):
            raise r.fail(w + "must_fail", "must be true or false", must_fail)
        scn = load_scenario(p)
        if scn.name in names:
            raise r.fail(w + "scenario", f"scenario name '{scn.name}' is already run[{names[scn.name]}]", str(p))
        names[scn.name] = k
        runs.append(SuiteRun(scn, must_fail))
    return Suite(path.resolve(), name, desc if isinstance(desc, str) else "", runs, tol)
