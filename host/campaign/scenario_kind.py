"""The 'scenario' campaign kind: each run is one scenario file (host.scenario) against one
controller variant, with the campaign's parameter overrides added to the scenario's plant.

Owns only the glue between the campaign format and the scenario runner: which scenarios a
campaign names, how a controller variant and the overrides are put into a Scenario, and how
a Verdict (host.verdict) becomes a row of the results table. Running, judging and the run
record belong to host.scenario, host.verdict and host.record.

A controller variant replaces the scenario's own controller: its settings file is used, the
scenario's `controller.set` (part of what the scenario tests, e.g. a mis-set threshold) is
applied on top, and the variant's `set` last. Scenarios on an external link are refused: a
campaign runs emulated or host-compiled controllers only.
"""

from __future__ import annotations

import dataclasses
import fnmatch
import glob
import math
import shutil
from pathlib import Path

from ..errors import ConfigError

_CACHE: dict = {}
# harm checks that flag a value below their limit: no "room left" to compare across runs
_HARM_BELOW = {"field_loss_energised"}  # per worker process: scenario file -> loaded Scenario


def parse_scenarios(src, base: Path, data: dict, head: dict):
    from ..scenario import load_scenario
    from .spec import Case

    if "case" in data or "plant" in data:
        raise ConfigError(f"{src}: {'case' if 'case' in data else 'plant'}: belongs to kind = 'transient'; "
                          f"a scenario campaign names scenario files (scenarios = [...])")
    items = head.get("scenarios", [])
    suite = head.get("suite")
    if suite is None and not items:
        raise ConfigError(f"{src}: campaign.scenarios: a scenario campaign needs scenarios = [...] or suite = FILE")
    if not isinstance(items, list) or not all(isinstance(s, str) for s in items):
        raise ConfigError(f"{src}: campaign.scenarios: must be a list of file names or patterns, got {items!r}")
    paths: list[Path] = []
    if suite is not None:
        if not isinstance(suite, str) or not (base / suite).is_file():
            raise ConfigError(f"{src}: campaign.suite: file not found, got {suite!r}")
        from ..suite import load_suite

        for run in load_suite(base / suite).runs:
            # a must-fail run tests the verdict against a deliberately wrong controller; a
            # campaign replaces the controller, so it has nothing to say there
            if not run.must_fail:
                paths.append(Path(run.scenario.path).resolve())
    for text in items:
        pattern = str(base / text)
        found = sorted(Path(p).resolve() for p in glob.glob(pattern)) if any(c in text for c in "*?[") else \
            ([Path(pattern).resolve()] if Path(pattern).is_file() else [])
        if not found:
            raise ConfigError(f"{src}: campaign.scenarios: no scenario file matches, got {text!r}")
        paths += [p for p in found if p not in paths]
    for key in ("select", "exclude"):
        pats = head.get(key, [])
        if not isinstance(pats, list) or not all(isinstance(s, str) for s in pats):
            raise ConfigError(f"{src}: campaign.{key}: must be a list of scenario-name patterns, got {pats!r}")
    select, exclude = head.get("select", []), head.get("exclude", [])
    cases = []
    for p in paths:
        scn = load_scenario(p)
        if select and not any(fnmatch.fnmatchcase(scn.name, pat) for pat in select):
            continue
        if any(fnmatch.fnmatchcase(scn.name, pat) for pat in exclude):
            continue
        if scn.controller_kind == "link":
            raise ConfigError(f"{src}: campaign.scenarios: {p.name} runs an external controller on a link; a campaign "
                              f"runs emulated or host-compiled controllers only, got {str(p)!r}")
        if any(c.name == scn.name for c in cases):
            raise ConfigError(f"{src}: campaign.scenarios: two scenarios are named {scn.name!r}, got {str(p)!r}")
        deps = tuple(x for x in (scn.machine, scn.converter) if x is not None)
        cases.append(Case(scn.name, path=p, depends=deps))
    if not cases:
        raise ConfigError(f"{src}: campaign.select: no scenario is left to run, got select={select!r}, "
                          f"exclude={exclude!r}")
    return cases


def _scenario(path: Path):
    from ..scenario import load_scenario

    scn = _CACHE.get(path)
    if scn is None:
        scn = _CACHE[path] = load_scenario(path)
    return scn


def _with_variant(scn, ctrl, overrides):
    changes = {"plant_set": list(scn.plant_set) + list(overrides)}
    if ctrl is not None:
        changes["controller_kind"] = ctrl.kind
        if ctrl.kind == "emulated":
            changes["settings"] = ctrl.settings
            changes["settings_set"] = {**dict(scn.settings_set), **dict(ctrl.settings_set)}
        else:
            changes["settings"] = None
            changes["settings_set"] = {}
            changes["firmware"] = {**dict(scn.firmware), **dict(ctrl.firmware)}
    return dataclasses.replace(scn, **changes)


def check_plant(camp, src):
    """Nominal values per scenario for relative spreads; every point through the plant rules."""
    from ..scenario.run import build_plant
    from .spec import _toml_number, nominal_value, point_error

    for case in camp.cases:
        scn = _scenario(case.path)
        if any(p.config == "converter" for p in camp.parameters) and scn.converter is None:
            key = next(p.key for p in camp.parameters if p.config == "converter")
            raise ConfigError(f"{src}: spread: {key}: scenario {scn.name} has no converter to apply it to")
        nominal = {}
        if any(p.relative for p in camp.parameters):
            plant = build_plant(scn)
            for p in camp.parameters:
                if p.relative:
                    nominal[p.key] = nominal_value(plant, p, src, f"scenario {scn.name}")
        camp.nominal[case.name] = nominal
        for i, row in enumerate(camp.points(case.name)):
            over = [f"{p.key}={_toml_number(v)}" for p, v in zip(camp.parameters, row)]
            try:
                build_plant(_with_variant(scn, None, over))
            except ConfigError as err:
                raise point_error(src, camp, i, row, err) from err


def warmup_arrays(spec):
    from ..scenario.run import build_plant

    plant = build_plant(_with_variant(_scenario(spec.case.path), None, spec.overrides()))
    return plant.p, plant.new_state(), plant.new_inputs()


def _norm(margin, limit):
    if margin is None or limit is None or not (math.isfinite(margin) and math.isfinite(limit)):
        return None
    return margin / max(abs(limit), 1e-12)


def run_scenario(spec, out_dir, record="all"):
    """One scenario run: the variant and overrides put into the scenario, run, judged."""
    from ..scenario.run import run_scenario as run_one
    from ..verdict.judge import judge

    scn = _with_variant(_scenario(spec.case.path), spec.controller, spec.overrides())
    base = Path(out_dir) / "runs" / spec.run_id if (out_dir is not None and record != "none") else None
    rr = run_one(scn, base)
    v = judge(rr.frames, rr.columns, rr.events, rr.meta, scn.expects)
    verdicts, margins, figures = {}, {}, dict(v.figures)
    norm = []
    for e in v.expectations:
        verdicts[e.name] = "PASS" if e.passed else "FAIL"
        if math.isfinite(e.margin):
            margins[e.name] = float(e.margin)
        n = _norm(e.margin, e.limit)
        if n is not None:
            norm.append(n)
    expected_harm = {e.check for e in scn.expects if e.kind == "harm"}
    for h in v.harm:
        bad = h.flagged and not h.accepted and h.check not in expected_harm
        verdicts[f"harm.{h.check}"] = "FAIL" if bad else "PASS"
        if math.isfinite(h.value):
            figures[f"harm.{h.check}.{h.unit or 'value'}"] = float(h.value)
        if (h.check not in _HARM_BELOW and math.isfinite(h.value) and math.isfinite(h.limit)
                and not h.accepted and h.check not in expected_harm):
            margins[f"harm.{h.check}"] = float(h.limit - abs(h.value))
            norm.append((h.limit - abs(h.value)) / max(abs(h.limit), 1e-12))
    worst = min(norm) if norm else 0.0
    if not v.passed and worst >= 0.0:
        worst = -1.0  # failed without a measured margin (a trip that never came, a stopped run)
    record_path = ""
    if rr.run_dir is not None:
        if record == "failed" and v.passed:
            shutil.rmtree(base, ignore_errors=True)
        else:
            record_path = str(Path(rr.run_dir).relative_to(Path(out_dir)))
    return {"status": "pass" if v.passed else "fail", "verdicts": verdicts, "margins": margins,
            "figures": figures, "margin_pu": float(worst), "record": record_path,
            "notes": "; ".join(v.problems)[:500]}
