"""docs/identify.md documents every record kind, column and test condition the reader knows."""

from pathlib import Path

from host.identify.records import SPECS

PAGE = Path(__file__).resolve().parents[1] / "docs" / "identify.md"


def test_every_record_column_and_condition_is_documented():
    text = PAGE.read_text(encoding="utf-8")
    for spec in SPECS.values():
        section = text.split(f"### `{spec.kind}`:", 1)
        assert len(section) == 2, spec.kind
        body = section[1].split("\n### ", 1)[0]
        for c in spec.columns:
            assert f"`{c.name}`" in body and c.doc in body, (spec.kind, c.name)
        for m in spec.meta:
            assert f"`{m.name}`" in body and m.doc in body, (spec.kind, m.name)
