"""The README's commented example of every mapping block names only keys the mapping reader
knows, and every block and key the mapping's declared shape knows is in it, each commented;
its list of fields is the field registry's (so the docs cannot drift)."""

from __future__ import annotations

import re
import sys
import tomllib
from pathlib import Path
from typing import Any

from strata13.compile.ages.ties import TIE_KEYS
from strata13.compile.read import mapping as m
from strata13.compile.read import mapping_shape as shape

README = Path(__file__).resolve().parents[1] / "README.md"


def example_text() -> str:
    text = README.read_text(encoding="utf-8")
    part = text.split("### Every block, commented", 1)[1]
    block = re.search(r"```toml\n(.*?)```", part, re.S)
    assert block is not None
    return block.group(1)


def example() -> dict:
    return tomllib.loads(example_text())


def missing(decl: Any, values: list[Any], where: str) -> list[str]:
    """The keys ``decl`` (a piece of mapping_shape.SHAPE) declares that none of ``values``
    (every instance of that place in the example) shows."""
    if isinstance(decl, shape.Table):
        found = []
        for key, sub in decl.keys.items():
            here = [v[key] for v in values if isinstance(v, dict) and key in v]
            found += [f"{where}.{key}"] if not here else missing(sub, here, f"{where}.{key}")
        return found
    if isinstance(decl, shape.ListOf):
        items = [x for v in values if isinstance(v, list) for x in v]
        return missing(decl.item, items, f"{where}[]")
    if isinstance(decl, shape.MapOf):
        inner = [x for v in values if isinstance(v, dict) for x in v.values()]
        return missing(decl.value, inner, f"{where}.*") if inner else [f"{where}.*"]
    if isinstance(decl, shape.Either):  # the options the example takes are checked
        found = []
        for option in decl.options:
            kind = list if isinstance(option, shape.ListOf) else dict
            taken = [v for v in values if isinstance(v, kind)]
            if taken and not isinstance(option, shape.Kind):
                found += missing(option, taken, where)
        return found
    return []


def test_every_declared_block_and_key_is_shown() -> None:
    """Every block and key of the declared mapping shape appears in the example, so a key
    added to the shape cannot stay undocumented."""
    assert missing(shape.SHAPE, [example()], "mapping") == []


def test_the_walk_finds_a_key_left_out() -> None:
    doc = example()
    del doc["run"]["drift"]
    doc["normalisation"]["d13c_carb"].pop("note")
    assert missing(shape.SHAPE, [doc], "mapping") == [
        "mapping.normalisation.*.note",
        "mapping.run.drift",
    ]


def test_every_key_line_is_commented() -> None:
    """A block header or key line of the example carries a ``#`` comment, except the
    continuation lines of a block whose key says it all (citation, url, note, columns)."""
    plain = {"citation", "url", "setting", "note", "columns", '"δ18O (‰)"', "id", "why"}
    bare = [
        line
        for line in example_text().splitlines()
        if line.strip()
        and "#" not in line
        and line.split("=", 1)[0].strip() not in plain
        and not line.startswith('"')
    ]
    assert bare == []


def test_the_fields_list_is_the_registry() -> None:
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "readme_tour", README.parent / "tools" / "readme_tour.py"
    )
    assert spec is not None and spec.loader is not None
    tool = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("readme_tour", tool)  # its dataclasses look themselves up there
    spec.loader.exec_module(tool)
    text = README.read_text(encoding="utf-8")
    assert tool.with_fields(text) == text, "run: python tools/readme_tour.py --fields --write"
    from strata13.schemas.fields import field_names

    for name in field_names():
        assert f"| `{name}` |" in text, name


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
