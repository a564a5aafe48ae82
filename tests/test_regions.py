"""Region filters agree with shapely (an independent library) on random points, across the
antimeridian and on boundaries (closed sets)."""

from __future__ import annotations

import duckdb
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from strata13.compile.query.regions import from_geojson, parse_bbox

from strata13.errors import OptionError


def sql_hits(region, lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    con = duckdb.connect()
    con.execute("CREATE TABLE p (i INTEGER, lon DOUBLE, lat DOUBLE)")
    con.executemany(
        "INSERT INTO p VALUES (?, ?, ?)",
        [(i, float(a), float(b)) for i, (a, b) in enumerate(zip(lon, lat, strict=True))],
    )
    where, params = region.sql()
    ids = {r[0] for r in con.execute(f"SELECT i FROM p WHERE {where}", params).fetchall()}
    return np.array([i in ids for i in range(len(lon))])


def test_polygon_matches_shapely_on_random_points() -> None:
    rng = np.random.default_rng(1)
    geo = {"type": "Polygon", "coordinates": [[[0, 0], [10, 0], [12, 8], [3, 11], [0, 0]]]}
    region = from_geojson(geo, "p", "test")
    lon, lat = rng.uniform(-5, 15, 2000), rng.uniform(-5, 15, 2000)
    expected = shapely.intersects_xy(shapely.geometry.shape(geo), lon, lat)
    exact = region.contains(lon, lat)
    assert (exact == expected).all()
    # the SQL bounding box never drops a point the exact test keeps
    assert (sql_hits(region, lon, lat) | ~exact).all()


def test_bbox_across_antimeridian() -> None:
    region = parse_bbox("bbox:170,-10,-170,10")
    lon = np.array([175.0, -175.0, 180.0, -180.0, 0.0, 165.0, -165.0])
    lat = np.zeros(len(lon))
    expected = [True, True, True, True, False, False, False]
    assert region.contains(lon, lat).tolist() == expected
    assert sql_hits(region, lon, lat).tolist() == expected


def test_boundary_points_are_inside_in_sql_and_exact() -> None:
    region = parse_bbox("bbox:-10,30,25,50")
    lon = np.array([-10.0, 25.0, 0.0, 0.0, -10.0000001])
    lat = np.array([40.0, 40.0, 30.0, 50.0, 40.0])
    assert region.contains(lon, lat).tolist() == [True, True, True, True, False]
    assert sql_hits(region, lon, lat).tolist() == [True, True, True, True, False]


@settings(max_examples=60, deadline=None)
@given(st.floats(-179, 179), st.floats(-80, 80), st.floats(1, 40), st.floats(1, 30))
def test_random_boxes_agree_with_shapely(w: float, s: float, width: float, height: float) -> None:
    e = w + width
    n = min(s + height, 90)
    e_wrapped = e - 360 if e > 180 else e
    region = parse_bbox(f"bbox:{w},{s},{e_wrapped},{n}")
    rng = np.random.default_rng(0)
    lon = rng.uniform(-180, 180, 300)
    lat = rng.uniform(-90, 90, 300)
    box = shapely.box(w, s, e, n)
    expected = shapely.intersects_xy(box, lon, lat) | shapely.intersects_xy(box, lon + 360, lat)
    assert (region.contains(lon, lat) == expected).all()
    assert (sql_hits(region, lon, lat) == expected).all()


@pytest.mark.parametrize("bad", ["bbox:1,2,3", "bbox:a,b,c,d", "bbox:0,50,10,40"])
def test_bad_bbox_is_an_option_error(bad: str) -> None:
    with pytest.raises(OptionError):
        parse_bbox(bad)


def test_ring_jumping_the_antimeridian_is_read_the_short_way() -> None:
    geo = {
        "type": "Polygon",
        "coordinates": [[[170, -10], [-170, -10], [-170, 10], [170, 10], [170, -10]]],
    }
    region = from_geojson(geo, "pacific", "test")
    lon = np.array([175.0, -175.0, 180.0, 0.0, 100.0, -100.0])
    lat = np.zeros(len(lon))
    # the same polygon drawn with longitudes beyond 180, tested with shapely directly
    box = shapely.box(170, -10, 190, 10)
    expected = shapely.intersects_xy(box, lon, lat) | shapely.intersects_xy(box, lon + 360, lat)
    assert (
        region.contains(lon, lat).tolist()
        == expected.tolist()
        == [True, True, True, False, False, False]
    )
    assert sql_hits(region, lon, lat).tolist() == expected.tolist()


def test_named_regions_ignore_case_and_empty_is_refused() -> None:
    from strata13.compile.query.regions import resolve_region

    named = {"Northern Shelf": '{"type": "Polygon", "coordinates": [[[0,0],[1,0],[1,1],[0,0]]]}'}
    assert resolve_region("northern shelf", named).name == "Northern Shelf"
    with pytest.raises(OptionError):
        resolve_region("  ", named)
