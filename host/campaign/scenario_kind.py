"""The 'scenario' campaign kind: each run is one scenario file (host.scenario, issue 8) against
one controller variant with the campaign's parameter overrides.

Until host.scenario is merged into this build, a campaign of this kind is refused with one
line at load time (nothing is started). Owns only the glue between the campaign format and
the scenario runner; the runner, verdicts and run records belong to host.scenario.
"""

from __future__ import annotations

from ..errors import ConfigError


def _available() -> bool:
    try:
        import host.scenario  # noqa: F401
    except ModuleNotFoundError:
        return False
    return True


def parse_scenarios(src, base, data):
    if not _available():
        raise ConfigError(f"{src}: campaign.kind: 'scenario' needs the scenario runner (host.scenario), "
                          f"which this build does not have yet; use kind = 'transient', got 'scenario'")
    raise ConfigError(f"{src}: campaign.kind: the scenario kind is not wired to host.scenario yet, got 'scenario'")


def check_plant(camp, src):
    raise ConfigError(f"{src}: campaign.kind: the scenario kind is not wired to host.scenario yet, got 'scenario'")


def run_scenario(spec, out_dir, record="all"):
    raise ConfigError(f"{spec.campaign}: campaign.kind: the scenario kind is not wired to host.scenario yet")
