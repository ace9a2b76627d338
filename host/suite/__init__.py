"""host.suite: many scenarios judged unattended - suite files, worker processes, reports, baselines.

    host.suite.load      suite TOML -> Suite (every scenario validated before anything runs)
    host.suite.run       Suite -> result rows (one per scenario), emulated runs on worker processes
    host.suite.plots     a record + its verdict -> PNG plots around events, expectation windows drawn
    host.suite.report    rows -> JUnit XML (junit-xml) and one self-contained HTML page (jinja2)
    host.suite.baseline  rows -> a baseline file; rows + baseline -> regressions under tolerances
"""

from host.suite.load import Suite, SuiteRun, load_suite

__all__ = ["Suite", "SuiteRun", "load_suite"]
