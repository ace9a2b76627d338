"""No renamed label is left where a person reads it: the shipped configs, the docs and READMEs,
the C library's comments, and the help of every command. The renames (issue 7): `[sequencing]`
-> `[start_stop]`, `field.standby_fraction` -> `field.economy_fraction`, `tcp-listen://` ->
`accept://`, `dcrig op` -> `dcrig steady`, sim `--step` -> `--change`, "FTDI style" ->
"USB-serial adapters with a latency timer", the second demo site folded into Kestrel Bay, and
trip codes always shown with their names ('TRIP 4 (field_loss)', never a bare 'TRIP 4')."""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import pytest

from host.cli import build_parser
from host.shipped import shipped_dir

ROOT = Path(__file__).resolve().parents[1]

OLD = {
    "sequencing section": re.compile(r"\bsequencing\b", re.I),
    "standby_fraction key": re.compile(r"standby_fraction", re.I),
    "tcp-listen scheme": re.compile(r"tcp[-_]listen", re.I),
    "FTDI": re.compile(r"\bftdi\b", re.I),
    "second demo site": re.compile(r"harrowgate", re.I),
    "dcrig op command": re.compile(r"\bdcrig op\b"),
    "sim --step option": re.compile(r"--step\b"),
    "bare trip number": re.compile(r"\b(?:TRIP|[Tt]rip code|trip report: code)\s+\d+\b(?!\s*\()"),
}


def _documents() -> dict[str, str]:
    files = [p for p in shipped_dir().rglob("*") if p.is_file()]
    files += [*(ROOT / "docs").glob("*.md"), ROOT / "README.md", ROOT / "DEVELOPERS.md",
              ROOT / "tools" / "README.md", *(ROOT / "tools" / "fwlib").glob("*.[ch]")]
    return {str(p.relative_to(ROOT) if p.is_relative_to(ROOT) else p): p.read_text(encoding="utf-8")
            for p in files}


def _help_texts() -> dict[str, str]:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    out = {"dcrig --help": parser.format_help()}
    for name, p in sub.choices.items():
        out[f"dcrig {name} --help"] = p.format_help()
    return out


def test_the_documents_are_found():
    docs = _documents()
    assert any(k.endswith("controller.md") for k in docs) and sum(k.endswith(".toml") for k in docs) >= 20
    assert {"dcrig check --help", "dcrig steady --help", "dcrig sim --help", "dcrig serve --help"} <= set(_help_texts())


@pytest.mark.parametrize("label", sorted(OLD))
def test_no_old_label_in_configs_docs_or_help(label):
    pattern = OLD[label]
    texts = {**_documents(), **_help_texts()}
    found = [f"{where}: {m.group(0)!r}" for where, text in texts.items() for m in pattern.finditer(text)]
    assert not found, found


def test_the_patterns_catch_the_old_labels():
    """Each pattern must match its old spelling (else the test above could never fail)."""
    samples = {"sequencing section": "[sequencing]", "standby_fraction key": "field.standby_fraction = 0.3",
               "tcp-listen scheme": "--link tcp-listen://127.0.0.1:5020", "FTDI": "FTDI style adapters",
               "second demo site": "Harrowgate strip mill", "dcrig op command": "dcrig op MACHINE",
               "sim --step option": "--step load_torque_Nm@2.5=6000", "bare trip number": "n=500  TRIP 4"}
    assert set(samples) == set(OLD)
    for label, text in samples.items():
        assert OLD[label].search(text), label
    assert not OLD["bare trip number"].search("TRIP 4 (field_loss)")
    assert not OLD["bare trip number"].search("trip report: code 1 (overcurrent), detail 1712 A")
