"""Running a suite: each scenario on a worker process, a result row back from each.

Scenarios with the emulated controller or the host-compiled C firmware run in parallel on a
standard-library process pool (concurrent.futures, `--jobs N`, default the number of cores);
those on an external link run one after another in this process, since they share one
controller. Each worker runs one scenario from a clean start (new plant, new controller), judges
its record, writes its plots and verdict next to the record, and returns one JSON-able row.
"""

from __future__ import annotations

import json
import os
import sys
import time
import traceback
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path

from host.errors import DcrigError
from host.record.rundir import write_atomic

from .load import Suite


def outcome_of(passed: bool, must_fail: bool) -> str:
    if must_fail:
        return "expected_fail" if not passed else "unexpected_pass"
    return "pass" if passed else "fail"


def run_one(scenario_path: str, out_dir: str | None, link_url: str | None = None, must_fail: bool = False,
            plots: bool = True) -> dict:
    """Run, judge and plot one scenario; never raises (an error is a row with outcome 'error')."""
    from host.scenario import load_scenario
    from host.scenario.run import run_scenario
    from host.verdict import judge

    t0 = time.perf_counter()
    row = {"scenario_file": scenario_path, "must_fail": must_fail}
    try:
        scn = load_scenario(scenario_path)
        row.update(name=scn.name, description=scn.description, controller=link_url or scn.controller_kind)
        rec = run_scenario(scn, out_dir, link_url=link_url)
        try:
            t_j = time.perf_counter()
            v = judge(rec.frames, rec.columns, rec.events, rec.meta, scn.expects)
            judge_s = time.perf_counter() - t_j
            row.update(passed=v.passed, outcome=outcome_of(v.passed, must_fail), verdict=v.to_dict(),
                       figures=v.figures, wall_s=rec.wall_s, model_s=rec.stats["model_s"], frames=len(rec.frames),
                       judge_s=judge_s, run_dir=str(rec.run_dir) if rec.run_dir else "", plots=[],
                       events=[list(e) for e in rec.events])
            if rec.run_dir is not None:
                write_atomic(rec.run_dir / "verdict.json", json.dumps(v.to_dict(), indent=1, default=str))
                if plots:
                    from .plots import plot_scenario

                    row["plots"] = [str(p) for p in plot_scenario(rec, v, rec.run_dir)]
        except KeyboardInterrupt as err:
            if rec.run_dir is not None:  # the run itself is complete in its record
                err.run_dir = rec.run_dir
                err.run_complete = True
            raise
    except (DcrigError, OSError, ValueError, RuntimeError) as err:
        row.update(passed=False, outcome="error", error=f"{err.__class__.__name__}: {err}",
                   detail=traceback.format_exc(limit=4))
        row.setdefault("name", Path(scenario_path).stem)
    row["total_s"] = time.perf_counter() - t0
    return row


def run_suite(suite: Suite, out_dir: str | None, *, jobs: int | None = None, link_url: str | None = None,
              progress: bool = True, plots: bool = True) -> list[dict]:
    """All runs of the suite; rows in the suite's order."""
    jobs = jobs or os.cpu_count() or 1
    tasks = []
    for k, r in enumerate(suite.runs):
        # --link replaces every scenario's controller except the host-compiled firmware's
        kind = r.scenario.controller_kind
        url = link_url if (link_url and kind != "c_example") else (r.scenario.link if kind == "link" else None)
        serial = url is not None
        tasks.append((k, str(r.scenario.path), url, r.must_fail, serial))
    rows: list[dict | None] = [None] * len(tasks)
    bar = _bar(len(tasks), suite.name, progress)
    try:
        parallel = [t for t in tasks if not t[4]]
        if parallel and jobs > 1:
            with ProcessPoolExecutor(max_workers=min(jobs, len(parallel))) as pool:
                futs = {pool.submit(run_one, p, out_dir, u, mf, plots): k for k, p, u, mf, _ in parallel}
                for f in as_completed(futs):
                    rows[futs[f]] = f.result()
                    bar.update(1)
                    bar.set_postfix_str(_postfix(rows))
        else:
            for k, p, u, mf, _ in parallel:
                rows[k] = run_one(p, out_dir, u, mf, plots)
                bar.update(1)
                bar.set_postfix_str(_postfix(rows))
        for k, p, u, mf, _ in (t for t in tasks if t[4]):  # one controller on the link: in turn
            rows[k] = run_one(p, out_dir, u, mf, plots)
            bar.update(1)
            bar.set_postfix_str(_postfix(rows))
    finally:
        bar.close()
    return rows  # type: ignore[return-value]


def _postfix(rows) -> str:
    done = [r for r in rows if r is not None]
    bad = sum(1 for r in done if r["outcome"] not in ("pass", "expected_fail"))
    return f"{bad} failed" if bad else "all good so far"


def _bar(n: int, name: str, enabled: bool):
    from tqdm import tqdm

    # tqdm writes to stderr and switches itself off on a non-terminal when disable=None
    return tqdm(total=n, desc=name, unit="scenario", disable=None if enabled else True, file=sys.stderr)
