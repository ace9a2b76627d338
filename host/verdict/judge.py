"""The verdict of one run: expectations + harm checks -> PASS / FAIL, and the figures a baseline keeps.

A run passes when every expectation passes, no harm check flags unless the scenario accepts
it as inherent in its fault (a terminal short always overruns the commutation limit) or
expects it (kind = "harm"), and the run was not stopped early.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from host.verdict.expect import ExpectResult, first_trip, judge_expectations
from host.verdict.harm import HarmResult, harm_checks


@dataclass
class Verdict:
    passed: bool
    expectations: list[ExpectResult]
    harm: list[HarmResult]
    problems: list[str] = field(default_factory=list)  # one line each: why it failed
    figures: dict[str, float] = field(default_factory=dict)  # for baselines

    def to_dict(self) -> dict:
        from dataclasses import asdict

        return {"passed": self.passed, "problems": self.problems, "figures": self.figures,
                "expectations": [asdict(e) for e in self.expectations], "harm": [asdict(h) for h in self.harm]}


def judge(frames: np.ndarray, columns, events, meta: dict, expects) -> Verdict:
    harm = harm_checks(frames, columns, meta)
    res = judge_expectations(frames, columns, events, meta, expects, harm)
    expected_harm = {e.check for e in expects if e.kind == "harm"}
    problems = [f"{r.name}: {r.text}" for r in res if not r.passed]
    for h in harm:
        if h.flagged and not h.accepted and h.check not in expected_harm:
            problems.append(f"harm {h.check}: {h.text}")
    status = meta.get("status", "complete")
    if status and status != "complete":
        problems.append(f"run {status}")
    figures: dict[str, float] = {}
    for r in res:
        if math.isfinite(r.measured):
            figures[f"{r.name}.{r.unit or 'value'}"] = float(r.measured)
    col = {c: k for k, c in enumerate(columns)}
    if len(frames):
        figures["peak_armature_current_A"] = float(np.max(np.abs(frames[:, col["armature_current_peak_A"]])))
        figures["peak_speed_rpm"] = float(np.max(np.abs(frames[:, col["speed_rpm"]])))
    tr = first_trip(frames, col, float(meta["frame_period_s"]))
    if tr is not None:
        figures["first_trip_s"] = tr[1]
    return Verdict(not problems, res, harm, problems, figures)
