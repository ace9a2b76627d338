"""`dcrig campaign`: every run of a campaign file on Dask workers, results table and report."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..cli import SAFETY
from ..errors import ConfigError

EXAMPLE = """examples:
  dcrig campaign configs/campaigns/kestrel_f3_tolerance.toml            # local worker processes, one per core
  dcrig campaign configs/campaigns/kestrel_f3_tolerance_ci.toml --workers 2 --out /tmp/f3ci
  dcrig campaign configs/campaigns/kestrel_f3_tolerance.toml --out f3 --resume   # after an interruption
  dcrig campaign configs/campaigns/kestrel_f3_tolerance.toml --cluster tcp://scheduler-host:8786

writes DIR/results.parquet (a row per run), DIR/report.html, DIR/junit.xml and DIR/runs/RUN_ID/;
exit status 0 when every run passed, 1 when any failed or erred, 2 on a bad campaign file.
The file format is in docs/campaign.md.
"""


def add_subparser(sub):
    p = sub.add_parser("campaign", help="run a campaign: scenarios x controllers x plant spreads on workers",
                       description="Run every scenario of a campaign file against every controller variant over "
                       "a spread of plant parameters, on local worker processes or on a running Dask cluster; "
                       "write one results table (Parquet), an HTML report and a JUnit XML summary.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("campaign", metavar="CAMPAIGN.toml", help="campaign file (docs/campaign.md)")
    p.add_argument("--cluster", metavar="ADDRESS", help="address of a running Dask scheduler, e.g. tcp://host:8786 "
                   "(default: a local cluster of worker processes)")
    p.add_argument("--workers", type=int, metavar="N", help="local worker processes (default: one per core)")
    p.add_argument("--out", metavar="DIR", help="output folder (default: campaign-NAME)")
    p.add_argument("--resume", action="store_true", help="continue the campaign in --out: runs already "
                   "finished in its results table are not run again")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.set_defaults(func=_do_campaign)


def _do_campaign(args):
    from ..campaign.engine import run_campaign, summary_line
    from ..campaign.report import write_html, write_junit
    from ..campaign.spec import load_campaign

    import importlib.util

    missing = [m for m in ("dask", "distributed", "pyarrow") if importlib.util.find_spec(m) is None]
    if missing:
        from ..errors import DcrigError

        raise DcrigError(f"campaign: needs {', '.join(missing)}: pip install 'dcrig[campaign]'")
    if args.workers is not None and args.workers < 1:
        raise ConfigError(f"--workers: must be >= 1, got {args.workers!r}")
    if args.workers is not None and args.cluster:
        raise ConfigError(f"--workers: a running cluster has its own workers; drop --workers or --cluster, "
                          f"got {args.workers!r}")
    camp = load_campaign(args.campaign)
    out_dir = Path(args.out or f"campaign-{camp.name}")
    print(f"campaign {camp.name}: {camp.n_runs} runs ({max(1, len(camp.controllers))} controllers x "
          f"{len(camp.cases)} scenarios x {camp.n_runs // max(1, len(camp.controllers)) // len(camp.cases)} "
          f"parameter points) -> {out_dir}", flush=True)
    try:
        outcome = run_campaign(camp, out_dir, cluster=args.cluster, workers=args.workers, resume=args.resume,
                               progress=not args.no_progress)
    except KeyboardInterrupt:
        print(f"interrupted: finished runs are in {out_dir / 'results.parquet'}; continue with --resume",
              file=sys.stderr)
        raise
    print("writing the report ...", flush=True)
    write_html(out_dir / "report.html", outcome.rows, name=camp.name, description=camp.description,
               table=str(outcome.table_path))
    write_junit(out_dir / "junit.xml", outcome.rows, name=camp.name)
    print(summary_line(outcome))
    print(f"report {out_dir / 'report.html'}, JUnit XML {out_dir / 'junit.xml'}")
    return 0 if outcome.failed == 0 and outcome.errors == 0 else 1
