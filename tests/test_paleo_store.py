"""Paleo-positions in a store: replace-rotations, placement at each record's age, filters.

The demo's rotation model and plate polygons are invented (demo_compilation/rotations.toml,
plates.geojson). The independent check rebuilds each record's rotation with scipy's
Rotation and Slerp from the model's poles (read with tomllib, not with strata13).
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy.spatial.transform import Rotation, Slerp
from strata13.compile import api
from strata13.compile.demo import demo_folder

from tests.conftest import run_cli, tree_bytes

MODEL = demo_folder() / "rotations.toml"
POLYGONS = demo_folder() / "plates.geojson"
NORTH, SOUTH = "brevandel-block", "calderin-block"  # the demo's invented plates


def _rows() -> dict[str, list[tuple[float, float, float, float]]]:
    """The model's poles per plate, today's identity first: (age, axis lat, axis lon, angle).
    (The demo's plates each move against the frame in one span.)"""
    doc = tomllib.loads(MODEL.read_text(encoding="utf-8"))
    out = {}
    for name, plate in doc["plate"].items():
        assert plate["moves_against"] == doc["model"]["frame"]
        poles = [(p["age_ma"], p["axis_lat"], p["axis_lon"], p["angle_deg"]) for p in plate["pole"]]
        out[name] = [(0.0, 90.0, 0.0, 0.0), *poles]
    return out


def _unit(lat: float, lon: float) -> np.ndarray:
    la, lo = np.radians(lat), np.radians(lon)
    return np.array([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])


def _expected(lat: float, lon: float, plate: str, age: float) -> tuple[float, float]:
    """Reference reconstruction: rotation vectors (right-hand rule) and scipy's Slerp."""
    rows = sorted(_rows()[plate])
    ages = [a for a, *_ in rows]
    rots = Rotation.from_rotvec([_unit(pl, pn) * np.radians(ang) for _, pl, pn, ang in rows])
    v = Slerp(ages, rots)([age]).apply(_unit(lat, lon))[0]
    return float(np.degrees(np.arcsin(v[2]))), float(np.degrees(np.arctan2(v[1], v[0])))


@pytest.fixture()
def placed(demo_store: Path) -> Path:
    res = api.replace_rotations(api.open_store(demo_store), MODEL, POLYGONS)
    assert res.version is not None
    return demo_store


def test_every_dated_record_is_placed_as_scipy_rotates_it(placed: Path) -> None:
    df = api.query(api.open_store(placed), api.Filters(keep_duplicates=True))
    dated = df[df.age_ma.notna()]
    assert len(dated) and (dated.paleo_status == "placed").all()
    assert set(dated.paleo_frame) == {"paleomagnetic"}
    for r in dated.sample(20, random_state=1).itertuples():
        lat, lon = _expected(r.lat, r.lon, r.plate_id, r.age_ma)
        assert r.paleolat == pytest.approx(lat, abs=1e-6)
        assert r.paleolon == pytest.approx(lon, abs=1e-6)
    assert (dated.paleolat_sigma > 0).all()  # the invented model gives pole cones
    # plates by polygon: the northern sections on one block, the southern cores on the other
    assert set(dated[dated.lat > 0].plate_id) == {NORTH}
    assert set(dated[dated.lat < 0].plate_id) == {SOUTH}


def test_replace_rotations_is_one_commit_and_again_changes_nothing(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    before = store.latest_version()
    r = run_cli("replace-rotations", MODEL, POLYGONS, "--store", demo_store)
    assert r.code == 0 and store.latest_version() == before + 1, r.err
    r = run_cli("replace-rotations", MODEL, POLYGONS, "--store", demo_store)
    assert r.code == 0 and "0 changed" in r.err and store.latest_version() == before + 1


def test_paleolat_filter_and_paleo_frame_region(placed: Path) -> None:
    store = api.open_store(placed)
    n = api.sql(
        store,
        "SELECT count(*) FROM records WHERE paleolat BETWEEN -45 AND -30 AND "
        "record_id NOT IN (SELECT drop_record_id FROM duplicates WHERE drop_record_id "
        "IS NOT NULL)",
    ).rows[0][0]
    r = run_cli("query", "--paleolat", "-45:-30", "--format", "csv", "--store", placed)
    assert r.code == 0, r.err
    assert len(r.out.strip().splitlines()) - 1 == n > 0  # negative bounds parse
    # --frame paleo applies the region to paleo-coordinates: the present-day box of the
    # southern basin holds no paleo-position of the invented model's southern plate
    r = run_cli(
        "query",
        "--region",
        "southern basin",
        "--frame",
        "paleo",
        "--format",
        "csv",
        "--store",
        placed,
    )
    assert r.code == 0 and len(r.out.strip().splitlines()) <= 1
    r = run_cli("query", "--paleolat", "95:100", "--store", placed)
    assert r.code == 2 and "−90…90" in r.err


def test_a_mantle_frame_model_warns_on_paleolatitude_filters(
    demo_store: Path, tmp_path: Path
) -> None:
    mantle = tmp_path / "m.toml"
    mantle.write_text(MODEL.read_text().replace('"paleomagnetic"', '"mantle"'), encoding="utf-8")
    api.replace_rotations(api.open_store(demo_store), mantle, POLYGONS)
    r = run_cli("query", "--paleolat", "0:60", "--store", demo_store)
    assert r.code == 0 and "mantle-frame" in r.err


def test_outside_every_polygon_is_counted_not_dropped(demo_store: Path, tmp_path: Path) -> None:
    small = tmp_path / "p.geojson"
    small.write_text(
        POLYGONS.read_text().replace(
            "[[[0, -60], [30, -60], [30, -30], [0, -30], [0, -60]]]",
            "[[[0, -60], [5, -60], [5, -55], [0, -55], [0, -60]]]",
        ),
        encoding="utf-8",
    )
    store = api.open_store(demo_store)
    api.replace_rotations(store, MODEL, small)
    df = api.query(store, api.Filters(keep_duplicates=True))
    south = df[df.lat < 0]
    assert len(south) and south.paleolat.isna().all()
    assert set(south.paleo_status) == {"pending: outside every plate polygon (unassigned)"}
    assert len(df) == api.sql(store, "SELECT count(*) FROM records").rows[0][0]


def test_a_bad_rotation_file_is_refused_and_init_creates_nothing(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(MODEL.read_text().replace("axis_lat = 40", "axis_lat = 95"), encoding="utf-8")
    target = tmp_path / "st"
    r = run_cli("init", "--store", target, "--rotations", bad, POLYGONS)
    assert r.code == 2 and "plate.brevandel-block.pole[1]: axis_lat 95" in r.err
    assert not target.exists()


def test_replace_rotations_with_a_missing_file_leaves_the_store_unchanged(
    demo_store: Path, tmp_path: Path
) -> None:
    before = tree_bytes(demo_store)
    r = run_cli("replace-rotations", tmp_path / "nope.toml", POLYGONS, "--store", demo_store)
    assert r.code == 2 and "does not exist" in r.err
    assert tree_bytes(demo_store) == before


def test_a_locality_plate_in_the_mapping_wins_over_the_polygons(tmp_path: Path) -> None:
    # a displaced terrane: the invented Ystrel drill site sits in the southern block's
    # polygon today, but its mapping puts it on the northern block, so it rotates with that
    sheets = demo_folder() / "sheets"
    for name in ("ystrel_cores_2021.csv", "ystrel_ties.csv"):
        (tmp_path / name).write_bytes((sheets / name).read_bytes())
    text = (sheets / "ystrel_cores_2021.toml").read_text(encoding="utf-8")
    mapped = text.replace('lat = "42°36′S"', f'lat = "42°36′S"\nplate = "{NORTH}"')
    (tmp_path / "y.toml").write_text(mapped, encoding="utf-8")
    store = api.init_store(tmp_path / "st", rotations=(MODEL, POLYGONS))
    api.ingest(store, None, tmp_path / "y.toml")
    df = api.query(store)
    dated = df[df.age_ma.notna()]
    assert len(dated) and set(dated.plate_id) == {NORTH}
    assert set(dated.plate_override) == {NORTH}
    r = dated.iloc[0]
    lat, lon = _expected(r.lat, r.lon, NORTH, r.age_ma)
    assert r.paleolat == pytest.approx(lat, abs=1e-6) and r.paleolon == pytest.approx(lon, abs=1e-6)


# --- stores and files from before plates had names ----------------------------------------

RETIRED_CSV = """\
# model: old-demo
# frame: paleomagnetic
plate_id,age_ma,pole_lat,pole_lon,angle_deg,relative_to,pole_sigma_deg,comment
1,0,90,0,0,0,,
1,200,38,-22,-34,0,,
"""


def _as_made_before_names(path: Path) -> None:
    """Make a placed store look like one written before plates had names: INTEGER plate
    columns and the model in the retired CSV layout."""
    store = api.open_store(path)
    with store.writer() as con:
        con.execute("BEGIN")
        numbers = {"plate_id": f"CASE p_old WHEN '{NORTH}' THEN 1 WHEN '{SOUTH}' THEN 2 END"}
        for col in ("plate_id", "plate_override"):
            con.execute(f"ALTER TABLE lake.analyses RENAME COLUMN {col} TO p_old")
            con.execute(f"ALTER TABLE lake.analyses ADD COLUMN {col} INTEGER")
            con.execute(f"UPDATE lake.analyses SET {col} = {numbers.get(col, 'NULL')}")
            con.execute("ALTER TABLE lake.analyses DROP COLUMN p_old")
        con.execute("DELETE FROM lake.settings WHERE key = 'rotation_model_toml'")
        con.execute(
            "INSERT INTO lake.settings VALUES ('rotation_model_csv', ?, 'x')",
            [json.dumps(RETIRED_CSV)],
        )
        con.execute("COMMIT")


def test_a_store_from_before_plate_names_reads_refuses_rederiving_and_converts(
    placed: Path,
) -> None:
    _as_made_before_names(placed)
    store = api.open_store(placed)
    old = store.latest_version()
    plates_sql = "SELECT DISTINCT plate_id FROM records WHERE plate_id IS NOT NULL ORDER BY 1"
    assert api.sql(store, plates_sql).rows == [("1",), ("2",)]  # read as text, unmigrated
    before = api.query(store, api.Filters(keep_duplicates=True))
    files = tree_bytes(placed)
    # re-deriving needs the model, which this strata13 no longer reads: refused, unchanged
    r = run_cli("reharmonise", "--vsmow-constants", "Coplen-1983", "--store", placed)
    assert r.code == 1 and "retired CSV layout" in r.err and "replace-rotations" in r.err
    assert store.latest_version() == old and tree_bytes(placed) == files
    assert api.query(store, api.Filters(keep_duplicates=True)).equals(before)
    # replacing the model converts the columns and places every record by name
    r = run_cli("replace-rotations", MODEL, POLYGONS, "--store", placed)
    assert r.code == 0, r.err
    assert api.sql(store, plates_sql).rows == [(NORTH,), (SOUTH,)]
    assert "rotation_model_csv" not in store.settings()
    assert store.settings()["rotation_model_toml"] == MODEL.read_text(encoding="utf-8")
    earlier = api.query(store, api.Filters(keep_duplicates=True), as_of=old)
    assert set(earlier.plate_id.dropna()) == {"1", "2"}  # that version keeps its own, as text


def test_retired_csv_models_and_numbered_polygons_are_refused(
    demo_store: Path, tmp_path: Path
) -> None:
    before = tree_bytes(demo_store)
    old = tmp_path / "old.csv"
    old.write_text(RETIRED_CSV, encoding="utf-8")
    r = run_cli("replace-rotations", old, POLYGONS, "--store", demo_store)
    assert r.code == 2 and "retired CSV layout" in r.err and "TOML" in r.err
    numbered = tmp_path / "p.geojson"
    numbered.write_text(
        POLYGONS.read_text().replace(f'"plate": "{NORTH}"', '"plate_id": 1'), encoding="utf-8"
    )
    r = run_cli("replace-rotations", MODEL, numbered, "--store", demo_store)
    assert r.code == 2 and "numbered property 'plate_id'" in r.err
    typo = tmp_path / "q.geojson"
    typo.write_text(POLYGONS.read_text().replace(SOUTH, "caldrin-block"), encoding="utf-8")
    r = run_cli("replace-rotations", MODEL, typo, "--store", demo_store)
    assert r.code == 2 and f"Did you mean '{SOUTH}'?" in r.err
    assert tree_bytes(demo_store) == before


def test_a_numbered_plate_in_a_mapping_is_refused(tmp_path: Path) -> None:
    sheets = demo_folder() / "sheets"
    for name in ("ystrel_cores_2021.csv", "ystrel_ties.csv"):
        (tmp_path / name).write_bytes((sheets / name).read_bytes())
    text = (sheets / "ystrel_cores_2021.toml").read_text(encoding="utf-8")
    (tmp_path / "y.toml").write_text(
        text.replace('lat = "42°36′S"', 'lat = "42°36′S"\nplate = 2'), encoding="utf-8"
    )
    store = api.init_store(tmp_path / "st", rotations=(MODEL, POLYGONS))
    r = run_cli("ingest", "--map", tmp_path / "y.toml", "--store", store.path)
    assert r.code == 2 and "plate = 2 is a number" in r.err and "calderin-block" in r.err


def test_a_plate_the_model_lacks_is_a_stated_status(tmp_path: Path) -> None:
    sheets = demo_folder() / "sheets"
    for name in ("ystrel_cores_2021.csv", "ystrel_ties.csv"):
        (tmp_path / name).write_bytes((sheets / name).read_bytes())
    text = (sheets / "ystrel_cores_2021.toml").read_text(encoding="utf-8")
    (tmp_path / "y.toml").write_text(
        text.replace('lat = "42°36′S"', 'lat = "42°36′S"\nplate = "vellin-terrane"'),
        encoding="utf-8",
    )
    store = api.init_store(tmp_path / "st", rotations=(MODEL, POLYGONS))
    api.ingest(store, None, tmp_path / "y.toml")
    dated = api.query(store).query("age_ma == age_ma")
    assert len(dated) and set(dated.plate_id) == {"vellin-terrane"}
    assert set(dated.paleo_status) == {"pending: plate not in the model"}
    assert dated.paleolat.isna().all()


# --- paleolatitude bands of a chosen width ------------------------------------------------


def test_paleolat_bands_take_a_width(placed: Path, tmp_path: Path) -> None:
    store = api.open_store(placed)
    df = api.query(store, api.Filters(keep_duplicates=True))
    lat = df.paleolat.dropna()
    # the reference: floor(lat / 15) · 15 by numpy, labelled by hand
    low = np.floor(lat.to_numpy() / 15) * 15
    want = sorted({f"{b:+g}° to {b + 15:+g}°" for b in low})
    r = run_cli(
        "coverage",
        "--by",
        "paleolat-band:15",
        "--screened",
        "all",
        "--format",
        "json",
        "--store",
        placed,
    )
    assert r.code == 0, r.err
    got = {row["group"] for row in json.loads(r.out)}
    assert sorted(got - {"no paleolatitude"}) == want and len(want) >= 2
    r = run_cli("coverage", "--by", "paleolat-band", "--format", "json", "--store", placed)
    assert r.code == 0 and "+30° to +60°" in r.out  # the default is 30°
    r = run_cli(
        "curve",
        "--out",
        tmp_path / "c",
        "--interval",
        "Toarcian",
        "--by",
        "paleolat-band:45",
        "--min-sections",
        "3",
        "--boots",
        "20",
        "--store",
        placed,
    )
    assert r.code == 0, r.err
    for bad in ("paleolat-band:25", "paleolat-band:0", "paleolat-band:x", "region:5"):
        r = run_cli("coverage", "--by", bad, "--store", placed)
        assert r.code == 2 and bad in r.err, (bad, r.err)
    r = run_cli("curve", "--out", tmp_path / "d", "--by", "paleolat-band:7", "--store", placed)
    assert r.code == 2 and "divides 180" in r.err
