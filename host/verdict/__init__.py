"""host.verdict: a run record judged - expectations and machine-harm checks, pure functions.

    judge(frames, columns, events, meta, expects) -> Verdict

Everything is computed from the record (frame rows, their column names, the event list and
the run's meta: frame period, trip-class table, harm limits), never from live state, so a
verdict can be recomputed on an old record or with a changed limit, and it is the same for
every controller. Must never import rtmodel, numba, host.loop or host.link.
"""

from host.verdict.expect import ExpectResult, judge_expectations
from host.verdict.harm import HARM_UNITS, HarmResult, harm_checks
from host.verdict.judge import Verdict, judge

__all__ = ["ExpectResult", "HarmResult", "HARM_UNITS", "Verdict", "harm_checks", "judge", "judge_expectations"]
