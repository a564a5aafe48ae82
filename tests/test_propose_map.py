"""`propose-map`: a drafted mapping reproduces the demo's hand-written column assignments,
refuses to ingest until its placeholders are filled, and ingests invented layouts it has
never seen once they are. Expected values are worked out by hand in each test (unit
factors: 1 ft = 0.3048 m exactly, 1 cm = 0.01 m)."""

from __future__ import annotations

import re
import shutil
import tomllib
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.demo import demo_folder
from strata13.compile.read.mapping import PLACEHOLDER
from strata13.compile.read.propose import header_parts, match_header, propose
from strata13.compile.read.readers import norm_header, strip_unit

from strata13.errors import ConfigError
from tests.conftest import run_cli as run

SHEETS = demo_folder() / "sheets"
DEMO_MAPPINGS = sorted(
    p for p in SHEETS.glob("*.toml") if "columns" in tomllib.loads(p.read_text(encoding="utf-8"))
)


def assignments(doc: dict) -> dict[str, str]:
    """[columns] as {header without its unit: field}."""
    out = {}
    for header, spec in doc["columns"].items():
        fld = spec if isinstance(spec, str) else spec["field"]
        out[norm_header(strip_unit(header)[0])] = fld
    return out


@pytest.mark.parametrize("mapping", DEMO_MAPPINGS, ids=lambda p: p.stem)
def test_the_proposal_reproduces_the_hand_written_column_assignments(mapping: Path) -> None:
    hand = tomllib.loads(mapping.read_text(encoding="utf-8"))
    sheet = SHEETS / hand["table"]["file"]
    proposal = propose(sheet, hand["table"].get("sheet"))
    drafted = tomllib.loads(proposal.text)  # the draft is valid TOML
    assert assignments(drafted) == assignments(hand)
    if "header_row" in hand["table"]:
        assert drafted["table"]["header_row"] == hand["table"]["header_row"]
    if hand["table"].get("decimal") == ",":
        assert drafted["table"]["decimal"] == ","


def test_header_words_give_key_unit_and_scale() -> None:
    assert header_parts("δ13C (‰ VPDB)")[:3] == ("d13c", "‰", "VPDB")
    assert header_parts("delta13C carb [permil PDB]")[:3] == ("d13ccarb", "‰", "VPDB")
    assert header_parts("d18O (SMOW)")[:3] == ("d18o", None, "VSMOW")
    assert header_parts("Height (ft)")[:3] == ("height", "ft", None)
    assert header_parts("Sr (µg/g)")[:3] == ("sr", "µg/g", None)
    assert header_parts("Mn ppm")[:3] == ("mn", "ppm", None)
    assert header_parts("CaCO3 (wt %)")[0] == "caco3"
    depth = match_header("depth mbsf")
    assert (depth.field, depth.unit, depth.position_kind) == ("position", "m", "depth")
    cm = match_header("Core depth (cm)")
    assert (cm.field, cm.unit, cm.position_kind) == ("position", "cm", "depth")
    assert match_header("Lith.").field == "lithology"
    assert match_header("13C carb").field == "d13c_carb"
    assert match_header("Sample ID").field == "sample_id"
    assert match_header("Age (Ma)").field == "age"
    assert match_header("Mn (‰)").unit is None  # a unit that does not fit is not used


def fill(text: str, values: dict[str, str]) -> str:
    """Replace each placeholder by the value given for its key (the TOML key before it)."""

    def one(m: re.Match[str]) -> str:
        key = m.group(1)
        assert key in values, f"no value for the placeholder of {key!r}"
        return f"{key} = {values[key]}"

    out = re.sub(rf'(\w+) = "{PLACEHOLDER}[^"]*"', one, text)
    out = re.sub(rf'(anchors|checks) = \["{PLACEHOLDER}[^"]*"\]', one, out)
    assert f'"{PLACEHOLDER}' not in out
    return out


BASICS = {
    "citation": '"Invented, A. 2026. A test sheet. Invented Journal 1: 1-2."',
    "year": "2026",
    "name": '"Test site (invented)"',
    "lat": "45.5",
    "lon": "10.25",
}


def test_placeholders_are_refused_all_at_once(tmp_path: Path) -> None:
    sheet = tmp_path / "quillar_2011.xlsx"
    shutil.copy(SHEETS / sheet.name, sheet)
    out = tmp_path / "draft.toml"
    r = run("propose-map", sheet, "--out", out)
    assert r.code == 0, r.err
    assert "fill in (9)" in r.err and "7 of 7 columns matched" in r.err
    with pytest.raises(ConfigError) as err:
        api.ingest(tmp_path / "store", None, out)
    msg = str(err.value)
    assert msg.startswith("draft.toml has 9 values to fill in: [source] citation")
    assert "[columns] δ13C (‰) scale" in msg and "[localities] #1 lat" in msg
    assert not (tmp_path / "store").exists()
    # an existing file is never replaced
    assert run("propose-map", sheet, "--out", out).code == 2


def test_the_filled_demo_proposal_ingests_like_the_hand_mapping(tmp_path: Path) -> None:
    sheet = tmp_path / "quillar_2011.xlsx"
    shutil.copy(SHEETS / sheet.name, sheet)
    text = fill(
        propose(sheet).text,
        BASICS
        | {
            "scale": '"VPDB"',
            "age_time_scale": '"ICS2012"',
            "component": '"bulk"',
            "section_id": '"quillar-ridge"',
        },
    )
    (tmp_path / "draft.toml").write_text(text, encoding="utf-8")
    res = api.ingest(tmp_path / "store", None, tmp_path / "draft.toml")
    assert res.added > 0
    rows = api.sql(
        api.open_store(tmp_path / "store"), "SELECT position_m, d18o_carb_scale FROM records"
    ).rows
    # the sheet's heights are in feet: every stored position is a multiple of 0.3048 m of
    # a value with at most two decimals
    assert all(abs(p / 0.3048 * 100 - round(p / 0.3048 * 100)) < 1e-6 for p, _ in rows)
    assert {s for _, s in rows} == {"VSMOW"}


def write_csv(path: Path, lines: list[str]) -> Path:
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_a_core_table_with_cm_and_mbsf(tmp_path: Path) -> None:
    sheet = write_csv(
        tmp_path / "core.csv",
        [
            "Site TX-9 (invented) bulk carbonate isotopes,,,,,,",
            ",,,,,,",
            "Hole,Sample ID,Interval top (cm),depth mbsf,δ13C (‰ VPDB),δ18O (‰ VPDB),Lith.",
            "TX-9A,1H-1 10,10,1.10,1.52,-1.10,marl",
            "TX-9A,1H-1 60,60,1.60,1.48,-1.21,marl",
            "TX-9B,1H-2 20,20,2.20,n.d.,-1.30,limestone",
            "TX-9B,1H-2 80,80,2.80,1.31,-1.05,limestone",
        ],
    )
    p = propose(sheet)
    got = {m.header: m.field for m in p.matches}
    assert got["Hole"] == "section_id" and got["depth mbsf"] == "position"
    assert got["Lith."] == "lithology" and got["Interval top (cm)"] is None
    assert p.header_row == 3 and p.sections == ["TX-9A", "TX-9B"]
    doc = tomllib.loads(p.text)
    assert doc["constants"]["position_kind"] == "depth"
    assert doc["columns"]["depth mbsf"]["unit"] == "m"
    (tmp_path / "core.toml").write_text(fill(p.text, BASICS | {"component": '"bulk"'}))
    api.ingest(tmp_path / "store", None, tmp_path / "core.toml")
    rows = api.sql(
        api.open_store(tmp_path / "store"),
        "SELECT section_id, position_m, position_kind, d13c_carb FROM records ORDER BY 2",
    ).rows
    assert [r[1] for r in rows] == [1.1, 1.6, 2.2, 2.8]
    assert {r[2] for r in rows} == {"depth"} and rows[2][3] is None  # n.d. is missing


def test_bare_c_and_o_headers_take_their_meaning_and_scale_from_the_note(tmp_path: Path) -> None:
    sheet = write_csv(
        tmp_path / "co.csv",
        [
            "Table 2 (invented). C = δ13C and O = δ18O of bulk carbonate, ‰ VPDB",
            "Sample;Height;C;O",
            "K1;0,5;2,10;-3,01",
            "K2;1,5;2,31;-2,95",
            "K3;2,5;1,95;-3,20",
        ],
    )
    p = propose(sheet)
    got = {m.header: (m.field, m.scale, m.confidence) for m in p.matches}
    assert got["C"] == ("d13c_carb", "VPDB", "medium")
    assert got["O"] == ("d18o_carb", "VPDB", "medium")
    assert "[columns] 'Height' unit" in p.placeholders  # the header does not say
    doc_text = fill(
        p.text,
        BASICS | {"unit": '"cm"', "component": '"bulk"', "section_id": '"k-section"'},
    )
    (tmp_path / "co.toml").write_text(doc_text, encoding="utf-8")
    api.ingest(tmp_path / "store", None, tmp_path / "co.toml")
    rows = api.sql(
        api.open_store(tmp_path / "store"),
        "SELECT position_m, d13c_carb, d18o_carb FROM records ORDER BY 1",
    ).rows
    # decimal commas read; 0,5 cm = 0.005 m
    assert rows == [(0.005, 2.1, -3.01), (0.015, 2.31, -2.95), (0.025, 1.95, -3.2)]


def test_a_run_file_gets_a_run_block_to_fill(tmp_path: Path) -> None:
    sheet = write_csv(
        tmp_path / "run.csv",
        [
            "Seq,Sample name,Height (m),d13C raw,d18O raw",
            "1,IAEA-603,,2.10,-2.60",
            "2,NBS-18,,-5.40,-23.40",
            "3,S-01,0.5,1.20,-3.00",
            "4,S-02,1.0,1.35,-3.10",
        ],
    )
    p = propose(sheet)
    got = {m.header: (m.field, m.scale) for m in p.matches}
    assert got["Seq"] == ("run_position", None)
    assert got["Sample name"] == ("sample_id", None)
    assert got["d13C raw"] == ("d13c_carb", "raw")
    doc = tomllib.loads(p.text)
    assert doc["source"]["kind"] == "in-house" and "run" in doc
    assert {"[run] anchors", "[run] checks", "[constants] run_id"} <= set(p.placeholders)
    assert "# reference materials among the sample ids: IAEA-603, NBS-18" in p.text
    values = BASICS | {
        "component": '"micrite"',
        "section_id": '"run-section"',
        "run_id": '"R9"',
        "anchors": '["IAEA-603", "NBS-18"]',
        "checks": "[]",
    }
    (tmp_path / "run.toml").write_text(fill(p.text, values), encoding="utf-8")
    api.ingest(tmp_path / "store", None, tmp_path / "run.toml")
    rows = api.sql(
        api.open_store(tmp_path / "store"),
        "SELECT sample_id, d13c_carb FROM records ORDER BY 1",
    ).rows
    # two-point normalisation through the anchors' accepted δ13C (IAEA-603 2.460, IAEA 2020;
    # NBS-18 −5.014, IAEA sheet): slope (2.460 + 5.014) / (2.10 + 5.40), closed form
    slope = (2.460 + 5.014) / (2.10 + 5.40)
    want = {"S-01": 2.460 + slope * (1.20 - 2.10), "S-02": 2.460 + slope * (1.35 - 2.10)}
    assert [r[0] for r in rows] == ["S-01", "S-02"]
    assert all(abs(v - want[s]) < 1e-9 for s, v in rows)


GENERIC = BASICS | {
    "scale": '"VPDB"',
    "unit": '"m"',
    "age_time_scale": '"ICS2024/12"',
    "component": '"bulk"',
    "section_id": '"s-1"',
    "position_kind": '"height"',
    "run_id": '"R1"',
    "anchors": '["IAEA-603", "NBS-18"]',
    "checks": '["IAEA-CO-8"]',
}


@pytest.mark.parametrize(
    "mapping", [p for p in DEMO_MAPPINGS if "broken" not in p.stem], ids=lambda p: p.stem
)
def test_every_demo_proposal_ingests_once_filled(mapping: Path, tmp_path: Path) -> None:
    hand = tomllib.loads(mapping.read_text(encoding="utf-8"))
    sheet = tmp_path / hand["table"]["file"]
    shutil.copy(SHEETS / sheet.name, sheet)
    draft = tmp_path / "draft.toml"
    draft.write_text(fill(propose(sheet, hand["table"].get("sheet")).text, GENERIC))
    got = api.ingest(tmp_path / "drafted", None, draft)
    want = api.ingest(tmp_path / "hand", SHEETS / sheet.name, mapping)
    # the same rows become records (placeholders filled with generic values only)
    assert got.committed == want.committed and got.quarantined == want.quarantined
