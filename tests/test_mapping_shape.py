"""The mapping file's declared shape: valid TOML with a value of the wrong type is a
ConfigError naming the key, the type it must have and the line (exit 2), never an internal
error; the shape covers exactly the keys mapping.py accepts."""

from __future__ import annotations

from pathlib import Path

import pytest
from strata13.compile.ages.ties import TIE_KEYS
from strata13.compile.read import mapping
from strata13.compile.read.mapping_shape import SHAPE, Table, line_of

from tests.conftest import run_cli, tree_bytes

BASE = """[source]
id = "obrien-delta-2019"
citation = "x (invented)"

[table]
file = "o.csv"
{table_extra}
[columns]
"Sample" = "sample_id"
"Height" = {height}
"d13C" = {d13c}

[constants]
section_id = "s1"
position_kind = "height"
{tail}"""
GOOD = {
    "table_extra": "",
    "height": '{ field = "position", unit = "m" }',
    "d13c": '{ field = "d13c_carb", scale = "VPDB" }',
    "tail": "",
}
CASES = [
    ({"height": "{ field = 2 }"}, "(line 10): [columns] 'Height' field = 2 must be text."),
    (
        {"d13c": '{ field = "d13c_carb", scale = -inf }'},
        "(line 11): [columns] 'd13C' scale = -inf must be text.",
    ),
    (
        {"height": '{ field = "position", unit = ["permil"] }'},
        "(line 10): [columns] 'Height' unit = ['permil'] must be text.",
    ),
    (
        {"height": "7"},
        "(line 10): [columns] 'Height' = 7 must be a field name or { field = \"…\", … }.",
    ),
    (
        {"table_extra": 'encoding = "undefined"'},
        "(line 7): [table] encoding = 'undefined' must be a character encoding that reads text.",
    ),
    (
        {"table_extra": 'encoding = "punycode"'},
        "(line 7): [table] encoding = 'punycode' must be a character encoding that reads text.",
    ),
    (
        {"table_extra": 'encoding = "rot13"'},
        "(line 7): [table] encoding = 'rot13' must be a character encoding that reads text.",
    ),
    (
        {"table_extra": 'delimiter = "é"'},
        "(line 7): [table] delimiter = 'é' must be one ASCII punctuation character, "
        '"tab" or "auto".',
    ),
    ({"table_extra": 'delimiter = "\\u0000"'}, "(line 7): [table] delimiter = '\\x00' must be"),
    ({"table_extra": 'delimiter = "\\u00a0"'}, "(line 7): [table] delimiter = '\\xa0' must be"),
    (
        {"table_extra": "header_row = 1.5"},
        "(line 7): [table] header_row = 1.5 must be a whole number.",
    ),
    (
        {"table_extra": "sheet = true"},
        "(line 7): [table] sheet = True must be text or a whole number.",
    ),
    (
        {"tail": '[[localities]]\nid = "l1"\nlat = nan\nlon = 1.0\n'},
        "(line 18): [[localities]] 1 ('l1') lat = nan must be text or a finite number.",
    ),
    (
        {"tail": '[[sections]]\nid = "s1"\ndatum_offset_m = "ten"\n'},
        "(line 18): [[sections]] 1 ('s1') datum_offset_m = 'ten' must be a finite number.",
    ),
    (
        {"tail": '[run]\nanchors = "NBS-19"\n'},
        "(line 17): [run] anchors = 'NBS-19' must be a list of text.",
    ),
    (
        {
            "tail": '[normalisation.d13c_carb]\nmethod = "two-point"\n'
            'anchors = { "NBS-19" = "1.95" }\n'
        },
        "(line 18): [normalisation.d13c_carb] anchors NBS-19 = '1.95' must be a finite number.",
    ),
    (
        {"tail": "[offsets]\nd13c_carb = 0.1\n"},
        "(line 17): [offsets] d13c_carb = 0.1 must be a table.",
    ),
    ({"tail": "[[ties]]\nsection = [1]\n"}, "(line 17): [[ties]] 1 section = [1] must be text."),
]


@pytest.mark.parametrize("change,said", CASES)
def test_a_value_of_the_wrong_type_names_key_type_and_line(
    tmp_path: Path, change: dict[str, str], said: str
) -> None:
    (tmp_path / "o.csv").write_text("Sample,Height,d13C\na,1,1.0\n", encoding="utf-8")
    (tmp_path / "m.toml").write_text(BASE.format(**(GOOD | change)), encoding="utf-8")
    store = tmp_path / "st"
    from strata13.compile import api

    api.init_store(store)
    before = tree_bytes(store)
    res = run_cli("ingest", "--map", tmp_path / "m.toml", "--store", store)
    assert res.code == 2, res.err
    first = res.err.splitlines()[0]
    assert first.startswith(f"error: m.toml {said}"), first
    assert "internal error" not in res.err and tree_bytes(store) == before


def test_constants_that_are_not_a_table(tmp_path: Path) -> None:
    text = "constants = 5\n" + BASE.format(**GOOD).replace("[constants]", "[other]")
    (tmp_path / "m.toml").write_text(text, encoding="utf-8")
    res = run_cli("ingest", "--map", tmp_path / "m.toml", "--dry-run", "--store", tmp_path / "s")
    assert res.code == 2
    assert res.err.splitlines()[0] == "error: m.toml (line 1): constants = 5 must be a table."


def test_the_good_mapping_passes(tmp_path: Path) -> None:
    (tmp_path / "o.csv").write_text("Sample,Height,d13C\na,1,1.0\n", encoding="utf-8")
    (tmp_path / "m.toml").write_text(BASE.format(**GOOD), encoding="utf-8")
    assert mapping.load_mapping(tmp_path / "m.toml").source_id == "obrien-delta-2019"


def test_the_shape_covers_exactly_the_keys_mapping_accepts() -> None:
    """One schema: a key mapping.py accepts without a declared type fails here."""
    keys = SHAPE.keys

    def known(block: str, item: bool = False) -> set[str]:
        shape = keys[block].item if item else keys[block]
        assert isinstance(shape, Table)
        return set(shape.keys)

    assert set(keys) == mapping.TOP_KEYS
    assert known("source") == mapping.SOURCE_KEYS
    assert known("table") == mapping.TABLE_KEYS
    assert known("localities_table") == mapping.TABLE_KEYS | {"columns"}
    assert known("sections", item=True) == mapping.SECTION_KEYS
    assert known("localities", item=True) == mapping.LOCALITY_KEYS
    assert known("ties", item=True) == TIE_KEYS
    assert known("run") == mapping.RUN_KEYS
    column = keys["columns"].value.options[1]
    assert set(column.keys) == mapping.COLUMN_KEYS


def test_line_of_finds_keys_under_headers_and_array_blocks() -> None:
    text = '[a]\nx = 1\n[[b]]\ny = 2\n[[b]]\ny = 3\n[c]\n"q k" = { z = 1 }\n'
    assert line_of(text, ("a", "x")) == 2
    assert line_of(text, ("b", 1, "y")) == 6
    assert line_of(text, ("c", "q k", "z")) == 8
    assert line_of(text, ("d",)) is None
