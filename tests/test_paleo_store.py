"""Paleo-positions in a store: replace-rotations, placement at each record's age, filters.

The demo's rotation model and plate polygons are invented (demo_compilation/rotations.csv,
plates.geojson). The independent check rebuilds each record's rotation with scipy's
Rotation and Slerp from the model's rows (general-purpose library), not with strata13.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np
import pytest
from scipy.spatial.transform import Rotation, Slerp
from strata13.compile import api
from strata13.compile.demo import demo_folder

from tests.conftest import run_cli, tree_bytes

MODEL = demo_folder() / "rotations.csv"
POLYGONS = demo_folder() / "plates.geojson"


def _rows() -> dict[int, list[tuple[float, float, float, float]]]:
    """The model's rows per plate: (age, pole lat, pole lon, angle)."""
    text = "\n".join(ln for ln in MODEL.read_text().splitlines() if not ln.startswith("#"))
    out: dict[int, list[tuple[float, float, float, float]]] = {}
    for r in csv.DictReader(io.StringIO(text)):
        out.setdefault(int(r["plate_id"]), []).append(
            (float(r["age_ma"]), float(r["pole_lat"]), float(r["pole_lon"]), float(r["angle_deg"]))
        )
    return out


def _unit(lat: float, lon: float) -> np.ndarray:
    la, lo = np.radians(lat), np.radians(lon)
    return np.array([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])


def _expected(lat: float, lon: float, plate: int, age: float) -> tuple[float, float]:
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
        lat, lon = _expected(r.lat, r.lon, int(r.plate_id), r.age_ma)
        assert r.paleolat == pytest.approx(lat, abs=1e-6)
        assert r.paleolon == pytest.approx(lon, abs=1e-6)
    assert (dated.paleolat_sigma > 0).all()  # the invented model gives pole cones
    # plates by polygon: the northern sections on 101, the southern cores on 202
    assert set(dated[dated.lat > 0].plate_id) == {101}
    assert set(dated[dated.lat < 0].plate_id) == {202}


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
    mantle = tmp_path / "m.csv"
    mantle.write_text(
        MODEL.read_text().replace("# frame: paleomagnetic", "# frame: mantle"), encoding="utf-8"
    )
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
    bad = tmp_path / "bad.csv"
    bad.write_text(MODEL.read_text().replace("101,170,40,", "101,170,95,"), encoding="utf-8")
    target = tmp_path / "st"
    r = run_cli("init", "--store", target, "--rotations", bad, POLYGONS)
    assert r.code == 2 and "line" in r.err and not target.exists()


def test_replace_rotations_with_a_missing_file_leaves_the_store_unchanged(
    demo_store: Path, tmp_path: Path
) -> None:
    before = tree_bytes(demo_store)
    r = run_cli("replace-rotations", tmp_path / "nope.csv", POLYGONS, "--store", demo_store)
    assert r.code == 2 and "does not exist" in r.err
    assert tree_bytes(demo_store) == before


def test_a_locality_plate_in_the_mapping_wins_over_the_polygons(tmp_path: Path) -> None:
    # a displaced terrane: the invented Ystrel drill site sits in plate 202's polygon today,
    # but its mapping puts it on plate 101, so its records rotate with 101
    sheets = demo_folder() / "sheets"
    for name in ("ystrel_cores_2021.csv", "ystrel_ties.csv"):
        (tmp_path / name).write_bytes((sheets / name).read_bytes())
    text = (sheets / "ystrel_cores_2021.toml").read_text(encoding="utf-8")
    mapped = text.replace('lat = "42°36′S"', 'lat = "42°36′S"\nplate = 101')
    (tmp_path / "y.toml").write_text(mapped, encoding="utf-8")
    store = api.init_store(tmp_path / "st", rotations=(MODEL, POLYGONS))
    api.ingest(store, None, tmp_path / "y.toml")
    df = api.query(store)
    dated = df[df.age_ma.notna()]
    assert len(dated) and set(dated.plate_id) == {101}
    r = dated.iloc[0]
    lat, lon = _expected(r.lat, r.lon, 101, r.age_ma)
    assert r.paleolat == pytest.approx(lat, abs=1e-6) and r.paleolon == pytest.approx(lon, abs=1e-6)
