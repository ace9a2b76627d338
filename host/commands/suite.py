"""`dcrig suite`: run a suite of scenarios on worker processes; JUnit XML, HTML page, baselines."""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

from ..cli import SAFETY

EXAMPLE = """examples:
  dcrig suite configs/suites/kestrel_demo.toml                       # all cores, report in ./dcrig-suite/
  dcrig suite configs/suites/kestrel_demo.toml --jobs 1 --out /tmp/s --save-baseline kestrel.json
  dcrig suite configs/suites/kestrel_demo.toml --baseline kestrel.json   # regressions make it fail
  dcrig suite configs/suites/kestrel_demo.toml --link socket://192.0.2.10:5020   # one real controller, in turn

exit status: 0 every scenario as expected and no regression, 1 otherwise, 2 bad input
"""


def add_subparser(sub):
    p = sub.add_parser("suite", help="run a suite of scenarios: JUnit XML, HTML report, baselines",
                       description="Run every scenario of a suite file, each from a clean start, judge each "
                       "record, and write junit.xml (for CI systems) and report.html (one self-contained page: "
                       "summary, per scenario its verdicts, harm checks and plots around its events) into a new "
                       "folder under --out. Emulated and host-compiled controllers run in parallel worker "
                       "processes; a real controller on --link runs the scenarios one after another.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("file", metavar="SUITE.toml")
    p.add_argument("--jobs", type=int, default=None, metavar="N", help="worker processes (default: the number of cores)")
    p.add_argument("--out", default="dcrig-suite", metavar="DIR", help="parent folder of the suite's run folder")
    p.add_argument("--link", metavar="URL", help="run against the controller on this link (one scenario at a time)")
    p.add_argument("--baseline", metavar="FILE", help="compare with this baseline; a regression fails the suite")
    p.add_argument("--save-baseline", metavar="FILE", help="store this run's figures as a baseline")
    p.add_argument("--no-plot", action="store_true", help="no plots in the report (faster)")
    p.set_defaults(func=_do_suite)


def _do_suite(args):
    from ..errors import ConfigError
    from ..record import new_run_dir
    from ..suite import load_suite
    from ..suite.baseline import compare, load_baseline, save_baseline
    from ..suite.report import GOOD, write_html, write_junit
    from ..suite.run import run_suite

    # bad input first: one line, exit 2, before the banner and before any folder is made
    suite = load_suite(args.file)
    if args.jobs is not None and args.jobs < 1:
        raise ConfigError(f"--jobs: must be >= 1, got {args.jobs}")
    baseline = load_baseline(args.baseline) if args.baseline else None
    print(SAFETY + "\n")
    jobs = args.jobs or os.cpu_count() or 1
    out = new_run_dir(args.out, suite.name)
    print(f"suite {suite.name}: {len(suite.runs)} scenarios, {jobs} worker(s), results in {out}", flush=True)
    t0 = time.perf_counter()
    rows = run_suite(suite, str(out / "runs"), jobs=jobs, link_url=args.link, plots=not args.no_plot)
    wall = time.perf_counter() - t0
    regs = compare(rows, baseline, suite.tolerances) if baseline else []
    junit = write_junit(rows, suite.name, out / "junit.xml")
    page = write_html(rows, suite, out / "report.html", wall_s=wall, jobs=jobs, regressions=regs, caution=SAFETY)
    if args.save_baseline:
        save_baseline(rows, suite, Path(args.save_baseline))
    for r in rows:
        extra = ""
        if r["outcome"] == "error":
            extra = f"  {r['error']}"
        elif r["outcome"] not in GOOD:
            extra = "  " + "; ".join(r["verdict"]["problems"])[:300]
        print(f"  {r['outcome'].replace('_', ' '):15s} {r['name']}{extra}")
    for g in regs:
        print(f"  REGRESSION      {g.line()}")
    good = sum(1 for r in rows if r["outcome"] in GOOD)
    print(f"{good}/{len(rows)} as expected, {len(regs)} regression(s), {wall:.1f} s wall; "
          f"{junit}, {page}" + (f", baseline {args.save_baseline}" if args.save_baseline else ""))
    return 0 if good == len(rows) and not regs else 1
