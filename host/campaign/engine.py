"""Running a campaign on Dask's distributed scheduler, with the results table as the ledger.

Why Dask distributed: it schedules many independent Python tasks over worker processes on one
machine (LocalCluster, no setup) or many (a `dask scheduler` and `dask worker`s), retries a
task that raised, reschedules the tasks of a worker that died, and streams results back as
they finish (`as_completed`); nothing here is a scheduler of our own. A run is one task.

What happens where:
- driver (this process): expands the campaign, skips runs the table already holds as finished
  (resume), submits the rest, appends every result to the table as it arrives, shows the
  progress bar, writes the report.
- worker: `KernelWarmup` (a worker plugin) compiles or loads the numba kernel once when the
  worker starts, so no run pays for it; `execute_run` runs one RunSpec and writes its record.
A DcrigError inside a run (a plant rule, a non-finite model state) is the run's own result:
recorded with status 'error', not retried. Any other exception is retried by Dask up to the
campaign's `retries`; a worker that dies mid-run has its run rescheduled on another worker
(the scheduler's allowed-failures, 3 by default). Whatever still fails becomes an 'error' row
with the message: no run is silently lost.
"""

from __future__ import annotations

import logging
import math
import os
import socket
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ConfigError, DcrigError
from .table import FINISHED, RESULTS_FILE, ResultsTable

CONNECT_TIMEOUT_S = 20.0  # --cluster: how long to wait for the scheduler to answer
# what a worker keeps between runs: set by the warm-up plugin
_WORKER_STATE: dict = {}


def warm_kernel_arrays(p: np.ndarray, x: np.ndarray, u: np.ndarray) -> float:
    """Compile (first time on a machine) or load from numba's cache the frame kernel the runs
    use: the build for p's codes, as host.params.Plant.kernel() picks it (the generic one
    under DCRIG_KERNEL=generic); a campaign's spreads change values, never the codes."""
    import os

    t0 = time.perf_counter()
    import rtmodel.kernel as K
    from rtmodel import layout as L

    from ..params import KERNEL_ENV

    kernel = K.step_frame if os.environ.get(KERNEL_ENV, "specialised") == "generic" else K.kernel_for(p)
    y = np.zeros(L.N_OUTPUT)
    kernel(x.copy(), p, u.copy(), y, 0)
    return time.perf_counter() - t0


try:
    from distributed.diagnostics.plugin import WorkerPlugin
except ModuleNotFoundError:  # the campaign extra is not installed: the command says so
    WorkerPlugin = object


class KernelWarmup(WorkerPlugin):
    """Runs once per worker process, before its first task: the kernel is ready for every run."""

    name = "dcrig-kernel-warmup"

    def __init__(self, p, x, u):
        self.p, self.x, self.u = p, x, u

    def setup(self, worker):
        import importlib

        took = warm_kernel_arrays(self.p, self.x, self.u)
        # the run modules too, so the first run of a worker pays no imports
        for mod in ("host.campaign.transient", "host.sim", "host.scenario.run", "host.verdict.judge",
                    "host.controller.drive", "host.record"):
            try:
                importlib.import_module(mod)
            except ModuleNotFoundError:
                pass
        _WORKER_STATE["kernel_warm_s"] = took
        _WORKER_STATE["pid"] = os.getpid()
        _WORKER_STATE["runs"] = 0


def worker_state() -> dict:
    """For tests and the benchmark (through client.run): what the warm-up left on this worker."""
    return dict(_WORKER_STATE, pid=os.getpid())


def execute_run(spec, out_dir: str | None, records: str = "all") -> dict:
    """One run on a worker. Returns a flat row for the results table."""
    t0 = time.perf_counter()
    row = {"run_id": spec.run_id, "campaign": spec.campaign, "controller": spec.controller_name,
           "scenario": spec.case.name, "sample": spec.sample,
           "worker": f"{socket.gethostname()}:{os.getpid()}"}
    for k, v in spec.params:
        row[f"param:{k}"] = float(v)
    try:
        if spec.kind == "transient":
            from .transient import run_transient

            res = run_transient(spec, Path(out_dir) if out_dir else None, records)
        else:
            from .scenario_kind import run_scenario

            res = run_scenario(spec, Path(out_dir) if out_dir else None, records)
    except DcrigError as err:
        row.update(status="error", error=f"{type(err).__name__}: {err}")
    else:
        row.update(status=res["status"], margin_pu=res.get("margin_pu"), record=res.get("record", ""),
                   notes=res.get("notes", ""), error="")
        for group in ("verdicts", "margins", "figures"):
            prefix = {"verdicts": "verdict:", "margins": "margin:", "figures": "figure:"}[group]
            for k, v in res.get(group, {}).items():
                row[prefix + k] = v
    _WORKER_STATE["runs"] = _WORKER_STATE.get("runs", 0) + 1
    row["wall_s"] = time.perf_counter() - t0
    row["finished_unix_s"] = time.time()
    return row


def error_row(spec, message: str) -> dict:
    row = {"run_id": spec.run_id, "campaign": spec.campaign, "controller": spec.controller_name,
           "scenario": spec.case.name, "sample": spec.sample, "status": "error", "error": message,
           "finished_unix_s": time.time()}
    for k, v in spec.params:
        row[f"param:{k}"] = float(v)
    return row


@dataclass
class Outcome:
    """What a campaign run did: counts, the table path, and the rows of this campaign."""

    out_dir: Path
    table_path: Path
    total: int
    skipped: int  # finished before (resume)
    ran: int
    passed: int = 0
    failed: int = 0
    errors: int = 0
    wall_s: float = 0.0
    interrupted: bool = False
    rows: list = field(default_factory=list)
    workers: int = 0


def _check_out_dir(out_dir: Path, resume: bool, runs) -> ResultsTable:
    table_path = out_dir / RESULTS_FILE
    if table_path.exists() and not resume:
        raise ConfigError(f"--out: {out_dir}: holds a results table already; add --resume to continue that "
                          f"campaign, or give another --out")
    if resume and not table_path.exists():
        raise ConfigError(f"--resume: {out_dir}: no {RESULTS_FILE} to resume from")
    out_dir.mkdir(parents=True, exist_ok=True)
    table = ResultsTable(table_path)
    ids = {r.run_id for r in runs}
    foreign = [rid for rid in table.rows if rid not in ids]
    if foreign:
        raise ConfigError(f"--resume: {table_path}: {len(foreign)} runs of the table do not belong to this "
                          f"campaign as it is now (a file it names changed?); give another --out, got run "
                          f"{foreign[0]}")
    return table


def make_client(cluster: str | None, workers: int | None):
    """A Dask client: to the scheduler at `cluster`, or to a new LocalCluster of processes."""
    try:
        from distributed import Client, LocalCluster
    except ModuleNotFoundError as err:
        raise DcrigError("campaign: needs dask and distributed: pip install 'dcrig[campaign]'") from err
    if cluster:
        try:
            return Client(cluster, timeout=f"{CONNECT_TIMEOUT_S}s"), None
        except (OSError, TimeoutError) as err:
            raise DcrigError(f"--cluster: {cluster}: cannot reach the scheduler ({err})") from err
    n = workers or os.cpu_count() or 1
    lc = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0",
                      silence_logs=logging.CRITICAL)  # shutdown chatter; run errors come back as results
    return Client(lc), lc


def run_campaign(camp, out_dir, *, cluster: str | None = None, workers: int | None = None,
                 resume: bool = False, progress: bool = True, client=None, out=None,
                 flush_every_s: float = 1.0, runs=None) -> Outcome:
    """Run every run of `camp` not yet finished in out_dir's table; return the outcome.

    `client`: an existing distributed.Client (tests, benchmarks); otherwise one is made from
    `cluster` / `workers` and closed at the end. Ctrl-C flushes the table and re-raises.
    `runs`: a subset of camp.runs() (benchmarks); default all.
    """
    out = out if out is not None else sys.stderr
    out_dir = Path(out_dir).resolve()
    runs = camp.runs() if runs is None else list(runs)
    table = _check_out_dir(out_dir, resume, runs)
    table.flush_every_s = flush_every_s
    done_ids = table.finished_ids()
    todo = [r for r in runs if r.run_id not in done_ids]
    outcome = Outcome(out_dir, table.path, len(runs), len(runs) - len(todo), len(todo))
    t0 = time.perf_counter()
    own_client = client is None
    cluster_obj = None
    if todo:
        from ..params import Plant  # noqa: F401  (imports numpy/numba layout before the workers start)
        from .transient import load_plant

        first = todo[0]
        if first.machine is not None:
            plant = load_plant(first.machine, first.converter, first.overrides(), camp.name)
            p, x, u = plant.p, plant.new_state(), plant.new_inputs()
        else:
            from .scenario_kind import warmup_arrays

            p, x, u = warmup_arrays(first)
        if own_client:
            if not cluster:
                # compile into numba's cache here once, so local workers load it instead of
                # each compiling the same kernel at the same time
                took = warm_kernel_arrays(p, x, u)
                if took > 2.0:
                    print(f"compiled the model kernel in {took:.0f} s (cached for the workers)", file=out)
            client, cluster_obj = make_client(cluster, workers)
        try:
            client.register_plugin(KernelWarmup(p, x, u))
            outcome.workers = len(client.scheduler_info(n_workers=-1)["workers"])
            _drive(client, camp, todo, table, out_dir, progress, out)
        except KeyboardInterrupt:
            outcome.interrupted = True
            raise
        finally:
            table.flush()
            if own_client:
                client.close()
                if cluster_obj is not None:
                    cluster_obj.close()
    else:
        table.flush()
    outcome.wall_s = time.perf_counter() - t0
    ids = {r.run_id for r in runs}
    outcome.rows = [r for rid, r in table.rows.items() if rid in ids]
    outcome.passed = sum(r["status"] == "pass" for r in outcome.rows)
    outcome.failed = sum(r["status"] == "fail" for r in outcome.rows)
    outcome.errors = sum(r["status"] == "error" for r in outcome.rows)
    return outcome


def _drive(client, camp, todo, table, out_dir, progress, out) -> None:
    from distributed import as_completed

    from tqdm import tqdm

    by_key = {}
    futures = []
    for spec in todo:
        fut = client.submit(execute_run, spec, str(out_dir), camp.records, key=f"run-{spec.run_id}",
                            retries=camp.retries, pure=False)
        by_key[fut.key] = spec
        futures.append(fut)
    n_fail = n_err = 0
    bar = tqdm(total=len(todo), desc=camp.name, unit="run", file=out, disable=not progress,
               dynamic_ncols=True, smoothing=0.1)
    try:
        for fut in as_completed(futures):
            spec = by_key[fut.key]
            try:
                row = fut.result()
            except Exception as err:  # retries exhausted, or the worker died too often (KilledWorker)
                row = error_row(spec, f"{type(err).__name__}: {err}")
            finally:
                fut.release()
            if row["status"] == "fail":
                n_fail += 1
            elif row["status"] == "error":
                n_err += 1
            table.add(row)
            bar.set_postfix_str(f"failed {n_fail}, errors {n_err}", refresh=False)
            bar.update(1)
    except KeyboardInterrupt:
        for f in futures:
            f.cancel()
        raise
    finally:
        bar.close()


def summary_line(o: Outcome) -> str:
    rate = o.passed / len(o.rows) if o.rows else math.nan
    return (f"{len(o.rows)} runs: {o.passed} passed, {o.failed} failed, {o.errors} errors "
            f"(pass rate {rate:.1%}); {o.ran} run now on {o.workers} workers in {o.wall_s:.1f} s, "
            f"{o.skipped} finished before; table {o.table_path}")


__all__ = ["FINISHED", "KernelWarmup", "Outcome", "execute_run", "run_campaign", "summary_line", "worker_state"]
