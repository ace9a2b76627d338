"""Every command's --help and every caution box where energy is involved defers to local
electrical codes, licensed practice and a qualified person, in the one sentence of
host.cli.DEFER_TO_CODES (project rule: the work can hurt people; no source needed)."""

from __future__ import annotations

import argparse
import re
import subprocess
import sys
from pathlib import Path

import pytest

from host.cli import DEFER_TO_CODES, SAFETY, build_parser

ROOT = Path(__file__).resolve().parents[1]


def _flat(text: str) -> str:
    """Text without line-wrapping and comment or quote markers, lower case."""
    lines = [re.sub(r"^\s*(?:>|\*|//|#)?\s?", "", ln) for ln in text.splitlines()]
    return re.sub(r"\s+", " ", " ".join(lines)).lower()


SENTENCE = _flat(DEFER_TO_CODES)


def _subcommands() -> list[str]:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return sorted(sub.choices)


def test_the_sentence_names_codes_practice_and_a_qualified_person():
    for words in ("local electrical codes", "licensed practice", "qualified person"):
        assert words in SENTENCE
    assert SENTENCE in _flat(SAFETY)


def test_every_command_is_found():
    names = _subcommands()
    assert {"check", "steady", "sim", "demo", "serve", "controller"} <= set(names), names


@pytest.mark.parametrize("command", [[], *([c] for c in _subcommands()), ["op"]], ids=lambda c: " ".join(c) or "dcrig")
def test_every_help_carries_the_deferral_and_an_example(command):
    p = subprocess.run([sys.executable, "-m", "host.cli", *command, "--help"], cwd=ROOT, capture_output=True,
                       text=True, timeout=60, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert p.returncode == 0, p.stderr
    assert SENTENCE in _flat(p.stdout), p.stdout
    if command:
        assert re.search(rf"^\s+dcrig {command[0] if command[0] != 'op' else 'steady'}\b", p.stdout, re.M), p.stdout


def test_the_controller_process_module_help_carries_it_too():
    p = subprocess.run([sys.executable, "-m", "host.controller.process", "--help"], cwd=ROOT, capture_output=True,
                       text=True, timeout=60, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    assert p.returncode == 0 and SENTENCE in _flat(p.stdout), p.stdout


DOCS = ["README.md", "docs/controller.md", "docs/protocol.md", "docs/config-reference.md",
        "configs/README.md", "tools/README.md", "tools/gen_config_reference.py",
        "tools/fwlib/dcrig_link.h", "tools/fwlib/example_controller.c"]


@pytest.mark.parametrize("rel", DOCS)
def test_every_caution_box_carries_the_deferral(rel):
    assert SENTENCE in _flat((ROOT / rel).read_text(encoding="utf-8")), rel
