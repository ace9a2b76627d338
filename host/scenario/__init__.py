"""Scenario files: one judged run = plant + controller + start state + timeline + expectations.

The data path of a judged run, package by package:

    host.scenario.load   TOML file -> Scenario (validated; one-line ConfigError naming file and key)
    host.scenario.events Scenario timeline -> a loop hook (operator inputs, loads, faults at model times)
    host.scenario.run    Scenario -> RunRecord (frames ndarray, columns, events, meta) via HostLoop
    host.verdict         RunRecord -> Verdict (expectations and machine-harm checks; pure functions)
    host.suite           many scenarios on worker processes -> JUnit XML, HTML page, baselines

Must never import numba directly; the model is reached through host.loop.
"""

from host.scenario.load import FAULTS, Scenario, load_scenario

__all__ = ["FAULTS", "Scenario", "load_scenario"]
