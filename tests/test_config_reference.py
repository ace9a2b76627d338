"""The config reference page is generated from host.schema and must be current; every key any
shipped config uses must be a key some schema knows (so a demo file cannot carry a typo that
only a user would find)."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

from host.shipped import shipped_dir

ROOT = Path(__file__).resolve().parents[1]
TOOL = ROOT / "tools" / "gen_config_reference.py"
PAGE = ROOT / "docs" / "config-reference.md"


def _run_tool(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, str(TOOL), *args], cwd=ROOT, capture_output=True, text=True, timeout=60)


def test_reference_page_is_current():
    r = _run_tool("--check")
    assert r.returncode == 0, f"docs/config-reference.md is stale: {r.stderr.strip()} (run python tools/gen_config_reference.py)"


def test_check_mode_detects_a_stale_page(tmp_path):
    stale = tmp_path / "config-reference.md"
    stale.write_text(PAGE.read_text(encoding="utf-8").replace("Rotor inertia", "Rotor inertia (edited)"), encoding="utf-8")
    r = _run_tool("--check", "--out", str(stale))
    assert r.returncode == 1
    assert "stale" in r.stderr
    missing = _run_tool("--check", "--out", str(tmp_path / "absent.md"))
    assert missing.returncode == 1


def test_page_lists_every_schema_key_with_default_and_rule():
    from host.schema import KEYS_BY_KIND, REQUIRED

    page = PAGE.read_text(encoding="utf-8")
    rows = {line.split("|")[1].strip().strip("`"): line for line in page.splitlines() if line.startswith("| `")}
    for kind, keys in KEYS_BY_KIND.items():
        for k in keys:
            assert k.path in rows, f"{kind} key {k.path} missing from the page"
            cells = [c.strip() for c in rows[k.path].split("|")[1:-1]]
            assert len(cells) == 5, rows[k.path]
            if k.default is REQUIRED:
                assert cells[2] == "*required*"
            assert k.doc.split(",")[0] in rows[k.path]
            if k.rule.startswith("choice:"):
                for choice in k.rule.split(":", 1)[1].split("|"):
                    assert f"`{choice}`" in cells[3]


def _schema_paths(kind_dir: str) -> set[str]:
    if kind_dir == "machines":
        from host.schema import MACHINE_KEYS

        return {k.path for k in MACHINE_KEYS}
    if kind_dir == "converters":
        from host.schema import CONVERTER_KEYS

        return {k.path for k in CONVERTER_KEYS}
    if kind_dir == "controllers":
        from host.controller.settings import KEYS

        return set(KEYS)
    raise AssertionError(f"configs/{kind_dir}: no schema known for this directory")


def _flat_keys(table: dict, prefix: str = "") -> list[str]:
    out = []
    for k, v in table.items():
        path = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            out += _flat_keys(v, path)
        else:
            out.append(path)
    return out


SHIPPED = shipped_dir()
CONFIG_FILES = sorted(SHIPPED.glob("*/*.toml"))


def test_there_are_demo_configs():
    kinds = {p.parent.name for p in CONFIG_FILES}
    assert {"machines", "converters"} <= kinds


@pytest.mark.parametrize("path", CONFIG_FILES, ids=lambda p: str(p.relative_to(SHIPPED)))
def test_every_key_used_in_configs_exists_in_a_schema(path):
    if path.parent.name == "replay":  # trace maps: their loader refuses every unknown key itself
        from host.replay import load_trace_map

        # a map without [commands] is a closed-loop replay's (disturbances and operator only)
        load_trace_map(path, closed_loop="[commands]" not in path.read_text())
        return
    kind_dir = path.parent.relative_to(SHIPPED).parts[0]
    if kind_dir in ("scenarios", "suites"):
        # their loaders refuse every unknown key themselves (docs/scenarios.md is their page)
        from host.scenario import load_scenario
        from host.suite import load_suite

        (load_scenario if kind_dir == "scenarios" else load_suite)(path)
        return
    if kind_dir == "campaigns":
        # the campaign loader refuses every unknown key itself (docs/campaign.md is its page)
        from host.campaign import load_campaign

        load_campaign(path)
        return
    known = _schema_paths(kind_dir)
    used = _flat_keys(tomllib.loads(path.read_text(encoding="utf-8")))
    unknown = [k for k in used if k not in known]
    assert not unknown, f"{path.relative_to(SHIPPED)}: keys not in the schema: {unknown}"
