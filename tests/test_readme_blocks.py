"""The README's commented example of every mapping block names only keys the mapping reader
knows, and every block the reader knows is in it (so the docs cannot drift)."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

from strata13.compile.ages.ties import TIE_KEYS
from strata13.compile.read import mapping as m

README = Path(__file__).resolve().parents[1] / "README.md"


def example() -> dict:
    text = README.read_text(encoding="utf-8")
    part = text.split("### Every block, commented", 1)[1]
    block = re.search(r"```toml\n(.*?)```", part, re.S)
    assert block is not None
    return tomllib.loads(block.group(1))


def test_every_block_is_shown() -> None:
    assert set(example()) == m.TOP_KEYS


def test_every_key_shown_is_known() -> None:
    doc = example()
    assert set(doc["source"]) <= m.SOURCE_KEYS
    assert set(doc["table"]) <= m.TABLE_KEYS
    for spec in doc["columns"].values():
        assert isinstance(spec, str) or set(spec) <= m.COLUMN_KEYS
    for sec in doc["sections"]:
        assert set(sec) <= m.SECTION_KEYS
    for loc in doc["localities"]:
        assert set(loc) <= m.LOCALITY_KEYS
    assert set(doc["localities_table"]) <= m.TABLE_KEYS | {"columns"}
    for tie in doc["ties"]:
        assert set(tie) <= TIE_KEYS
    assert set(doc["run"]) <= m.RUN_KEYS
    assert set(doc["source"]) == m.SOURCE_KEYS  # the source block shows all its keys
