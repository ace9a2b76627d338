"""host.campaign: many runs (controllers x scenarios x plant parameter spreads) on Dask workers.

spec: the campaign file and its expansion into runs; sampling: grid and Latin hypercube;
transient / scenario_kind: what one run does; table: the results table (Parquet) that is
also the ledger for resume; engine: execution on a Dask cluster; report: HTML and JUnit XML.
"""

from .spec import Campaign, RunSpec, load_campaign

__all__ = ["Campaign", "RunSpec", "load_campaign"]
