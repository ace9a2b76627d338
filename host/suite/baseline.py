"""Baselines: a suite's measured figures kept in a file, and a later run compared with them.

A figure is anything a verdict measured (reaction times in ms, settling times in s, the signal
extreme nearest a bound) plus the run's peaks. Each is stored with its worse direction; a new
value that moved in the worse direction by more than the tolerance is a regression, whether
or not its expectation still passes (a field-loss trip 8 ms slower than before is reported).

Tolerances (suite file [baseline]): ms = absolute, for figures in ms; s = absolute, for figures
in s; relative = a fraction of the baseline value, for everything else.

File: JSON {"suite", "created_utc", "tolerances", "scenarios": {name: {figure: {"value", "worse"}}}}.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from host.errors import ConfigError


@dataclass
class Regression:
    scenario: str
    figure: str
    old: float
    new: float
    tolerance: float

    def line(self) -> str:
        return (f"{self.scenario}: {self.figure} {self.old:.4g} -> {self.new:.4g} "
                f"({self.new - self.old:+.4g}, tolerance {self.tolerance:.4g})")


def figures_of(row: dict) -> dict[str, dict]:
    """The figures of one result row with their worse direction."""
    out = {}
    v = row.get("verdict")
    if not v:
        return out
    for e in v["expectations"]:
        m = e["measured"]
        if m is None or not math.isfinite(m):
            continue
        key = f"{e['name']}.{e['unit'] or 'value'}"
        if e["kind"] == "bounds":
            worse = "higher" if e["limit"] is not None and e["limit"] >= m else "lower"
        else:
            worse = "higher"  # reaction times, settling times: later is worse
        out[key] = {"value": float(m), "worse": worse}
    for k in ("peak_armature_current_A", "peak_speed_rpm"):
        if k in v["figures"]:
            out[k] = {"value": float(v["figures"][k]), "worse": "higher"}
    return out


def save_baseline(rows: list[dict], suite, path: Path) -> Path:
    data = {"suite": suite.name, "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "tolerances": suite.tolerances,
            "scenarios": {r["name"]: figures_of(r) for r in rows if r.get("verdict")}}
    path = Path(path)
    path.write_text(json.dumps(data, indent=1, sort_keys=True), encoding="utf-8")
    return path


def load_baseline(path: Path) -> dict:
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError as err:
        raise ConfigError(f"--baseline: {path}: not found") from err
    except (OSError, ValueError) as err:
        raise ConfigError(f"--baseline: {path}: not a baseline file ({err})") from err
    if not isinstance(data, dict) or not isinstance(data.get("scenarios"), dict):
        raise ConfigError(f"--baseline: {path}: scenarios: required table is missing (not a baseline file?)")
    return data


def compare(rows: list[dict], baseline: dict, tolerances: dict) -> list[Regression]:
    regs = []
    for r in rows:
        old_figs = baseline["scenarios"].get(r.get("name"))
        if not old_figs:
            continue
        new_figs = figures_of(r)
        for key, old in old_figs.items():
            if key not in new_figs:
                continue
            o, n = float(old["value"]), float(new_figs[key]["value"])
            if key.endswith(".ms"):
                tol = tolerances["ms"]
            elif key.endswith(".s"):
                tol = tolerances["s"]
            else:
                tol = tolerances["relative"] * abs(o)
            change = n - o if old.get("worse", "higher") == "higher" else o - n
            if change > tol + 1e-12:
                regs.append(Regression(r["name"], key, o, n, tol))
    return regs
