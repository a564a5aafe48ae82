"""Mapping files: confined paths, unknown fields with hints, localities from another sheet,
plausibility warnings, and --dry-run."""

from __future__ import annotations

from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.read.mapping import load_mapping

from strata13.errors import ConfigError

BASE = """
[source]
id = "test-src"
citation = "Invented test source"
[table]
file = "{file}"
[columns]
"Sample" = "sample_id"
"Height" = {{ field = "position", unit = "m" }}
"d13C" = {{ field = "d13c_carb", scale = "VPDB" }}
"d18O" = {{ field = "d18o_carb", scale = "VPDB" }}
{extra}
[constants]
section_id = "s1"
{constants}
"""


def mapping(folder: Path, file: str = "a.csv", extra: str = "", constants: str = "") -> Path:
    p = folder / "m.toml"
    p.write_text(BASE.format(file=file, extra=extra, constants=constants), encoding="utf-8")
    return p


def sheet(
    folder: Path, rows: list[str], name: str = "a.csv", header: str = "Sample,Height,d13C,d18O"
) -> None:
    (folder / name).write_text(header + "\n" + "\n".join(rows) + "\n", encoding="utf-8")


@pytest.mark.parametrize("file", ["../outside.csv", "/etc/passwd", "sub/../../x.csv"])
def test_paths_cannot_leave_the_mapping_folder(tmp_path: Path, file: str) -> None:
    with pytest.raises(ConfigError, match="leaves|absolute"):
        load_mapping(mapping(tmp_path, file))


def test_unknown_field_gets_did_you_mean(tmp_path: Path) -> None:
    with pytest.raises(ConfigError) as err:
        load_mapping(mapping(tmp_path, extra='"Mn" = "mnn"'))
    assert "Did you mean 'mn'" in err.value.message


def test_missing_header_names_the_column_and_suggests(tmp_path: Path) -> None:
    sheet(tmp_path, ["a,1,1.0,-2.0"], header="Sampel,Height,d13C,d18O")
    with pytest.raises(ConfigError, match="Sample"):
        api.ingest(tmp_path / "st", None, mapping(tmp_path))
    assert not (tmp_path / "st").exists()


def test_localities_from_another_sheet(tmp_path: Path) -> None:
    sheet(tmp_path, ["a,1,1.0,-2.0", "b,2,1.5,-2.1"])
    (tmp_path / "loc.csv").write_text(
        "Site,Latitude,Longitude\nL1,12°30′S,45 E\n", encoding="utf-8"
    )
    extra = (
        '[localities_table]\nfile = "loc.csv"\ncolumns = { "Site" = "locality_id", '
        '"Latitude" = "lat", "Longitude" = "lon" }\n'
    )
    m = tmp_path / "m.toml"
    m.write_text(
        BASE.format(file="a.csv", extra="", constants='locality_id = "L1"') + extra,
        encoding="utf-8",
    )
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    df = api.query(store)
    assert df.lat.tolist() == [-12.5, -12.5] and df.lon.tolist() == [45.0, 45.0]


def test_swapped_columns_and_unit_slip_warn(tmp_path: Path) -> None:
    # δ18O values where δ13C belongs and heights far too large for metres
    rows = [f"s{i},{i * 350.0},{-6.0 - i * 0.1},{2.0 + i * 0.1}" for i in range(8)]
    sheet(tmp_path, rows)
    r = api.ingest(tmp_path / "st", None, mapping(tmp_path), dry_run=True)
    rules = {i.rule for i in r.report.warnings}
    assert {"swapped δ columns?", "unit slip?"} <= rules


def test_dry_run_writes_nothing(tmp_path: Path) -> None:
    sheet(tmp_path, ["a,1,1.0,-2.0"])
    r = api.ingest(tmp_path / "st", None, mapping(tmp_path), dry_run=True)
    assert r.dry_run and r.committed == 1 and not (tmp_path / "st").exists()


def test_feet_are_exactly_0_3048_m(tmp_path: Path) -> None:
    # international foot = 0.3048 m exactly (1959 international yard and pound agreement)
    sheet(tmp_path, ["a,10,1.0,-2.0"])
    m = mapping(tmp_path)
    m.write_text(m.read_text().replace('unit = "m"', 'unit = "ft"'), encoding="utf-8")
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    assert api.query(store).position_m.tolist() == [pytest.approx(3.048, abs=1e-12)]


def test_interval_top_below_base_is_refused(tmp_path: Path) -> None:
    (tmp_path / "i.csv").write_text(
        "Sample,Top,Base,d13C,d18O\na,2.0,1.0,1.0,-2\nb,3.0,4.0,1,-2\n", encoding="utf-8"
    )
    m = tmp_path / "m.toml"
    m.write_text(
        BASE.format(file="i.csv", extra="", constants='position_kind = "height"').replace(
            '"Height" = { field = "position", unit = "m" }',
            '"Top" = { field = "position_top", unit = "m" }\n'
            '"Base" = { field = "position_base", unit = "m" }',
        ),
        encoding="utf-8",
    )
    r = api.ingest(tmp_path / "st", None, m, dry_run=True, keep_valid=True)
    assert [(i.cell, i.rule) for i in r.report.errors] == [("B3", "interval order")]


def test_every_field_has_a_stored_column_and_is_documented() -> None:
    from strata13.schemas.fields import BASIS_KEYS, FIELDS, SCALE_KEYS
    from strata13.schemas.records import ANALYSES

    stored = {c for c, _ in ANALYSES}
    developers = (Path(__file__).parents[1] / "DEVELOPERS.md").read_text(encoding="utf-8")
    for name in [f.stored for f in FIELDS] + list(SCALE_KEYS) + list(BASIS_KEYS):
        assert name in stored, name  # nothing a mapping feeds is silently dropped
    for name in [f.name for f in FIELDS] + list(SCALE_KEYS) + list(BASIS_KEYS):
        assert f"`{name}`" in developers, name


def test_ties_do_not_import_the_mapping_module() -> None:
    """mapping reads its ties through ages.ties; the dependency runs that one way only,
    not even through an import inside a function."""
    import ast

    import strata13.compile.ages.ties as ties

    tree = ast.parse(Path(ties.__file__).read_text(encoding="utf-8"))
    imported = {node.module for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)} | {
        a.name for node in ast.walk(tree) if isinstance(node, ast.Import) for a in node.names
    }
    assert "strata13.compile.read.mapping" not in imported
