"""Paleo placement: rotation models (our CSV), slerp, plate circuits, reconstruction, plate
polygons. Every number here is invented; each check names what it is checked against."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import shapely
from scipy.spatial.transform import Rotation
from strata13.compile.paleo import plates, rotations
from strata13.compile.paleo.rotations import (
    BEYOND,
    NO_AGE,
    NO_PLATE,
    OK,
    UNKNOWN_PLATE,
    euler_rotation,
    frame_rotation,
    load_model,
    paleolat_sigma,
    parse_model,
    reconstruct,
    relative_rotation,
)

from strata13.errors import ConfigError, InputFileError

HEAD = "# model: test\n# frame: paleomagnetic\n"
COLS = "plate_id,age_ma,pole_lat,pole_lon,angle_deg,relative_to,pole_sigma_deg,comment\n"

MODEL = (
    HEAD
    + COLS
    + """\
1,0,90,0,0,0,,present
1,50,90,0,30,0,,spin about the north pole
1,100,20,40,60,0,2,
2,0,0,0,0,1,,
2,80,10,-60,-25,1,,
3,0,0,0,0,2,,
3,60,-30,120,15,2,1,
"""
)


def model(text: str = MODEL) -> rotations.RotationModel:
    return parse_model(text, "m.csv")


# --- closed forms -------------------------------------------------------------------------


def test_quarter_turn_about_north_pole() -> None:
    # Closed form (right-hand rule): 90° about +z takes x = (0°N, 0°E) to y = (0°N, 90°E).
    text = HEAD + COLS + "1,0,90,0,0,0,,\n1,10,90,0,90,0,,\n"
    out = reconstruct(
        np.array([0.0]), np.array([0.0]), np.array([1]), np.array([10.0]), model(text)
    )
    assert out.paleolat[0] == pytest.approx(0.0, abs=1e-12)
    assert out.paleolon[0] == pytest.approx(90.0, abs=1e-12)
    assert out.status[0] == OK


@pytest.mark.parametrize("angle", [10.0, 35.0, -20.0])
def test_equatorial_pole_moves_latitude_by_the_angle(angle: float) -> None:
    # Closed form: about the pole (0°N, 0°E) a point at (0°N, 90°E) goes to latitude = angle
    # on the same meridian (y·cosθ + z·sinθ).
    text = HEAD + COLS + f"1,0,0,0,0,0,,\n1,10,0,0,{angle},0,,\n"
    out = reconstruct([0.0], [90.0], [1], [10.0], model(text))
    assert out.paleolat[0] == pytest.approx(angle, abs=1e-12)
    assert out.paleolon[0] == pytest.approx(90.0, abs=1e-9)


def test_point_on_the_pole_axis_keeps_its_latitude() -> None:
    # Closed form: a rotation leaves points on its axis fixed.
    text = HEAD + COLS + "1,0,0,0,0,0,,\n1,10,35,-70,47,0,,\n"
    out = reconstruct([35.0, -35.0], [-70.0, 110.0], [1, 1], [10.0, 4.0], model(text))
    np.testing.assert_allclose(out.paleolat, [35.0, -35.0], atol=1e-10)


def test_interpolation_at_tabulated_age_returns_the_row() -> None:
    # Common practice: slerp passes through its knots; reference built with scipy directly.
    m = model()
    got = relative_rotation(m, 1, np.array([100.0]))
    want = euler_rotation(20, 40, 60)
    assert (got[0] * want.inv()).magnitude() == pytest.approx(0.0, abs=1e-12)


def test_halfway_about_one_pole_the_angle_is_the_mean() -> None:
    # Closed form: rotations about a common axis form a one-parameter group; slerp is
    # linear in angle along it, so halfway between 10° and 30° is 20°.
    text = HEAD + COLS + "1,0,90,0,0,0,,\n1,10,40,25,10,0,,\n1,30,40,25,30,0,,\n"
    got = relative_rotation(model(text), 1, np.array([20.0]))[0]
    assert (got * euler_rotation(40, 25, 20).inv()).magnitude() == pytest.approx(0, abs=1e-12)


def test_composition_through_a_two_step_circuit_matches_scipy_product() -> None:
    # scipy Rotation product computed independently: R(3→0) = R(1→0)·R(2→1)·R(3→2)
    # at an age tabulated for every plate (so no interpolation enters).
    text = (
        HEAD
        + COLS
        + """\
1,0,90,0,0,0,,
1,40,20,40,60,0,,
2,0,0,0,0,1,,
2,40,10,-60,-25,1,,
3,0,0,0,0,2,,
3,40,-30,120,15,2,,
"""
    )
    m = model(text)
    want = euler_rotation(20, 40, 60) * euler_rotation(10, -60, -25) * euler_rotation(-30, 120, 15)
    got = frame_rotation(m, 3, np.array([40.0]))[0]
    assert (got * want.inv()).magnitude() == pytest.approx(0.0, abs=1e-12)
    # the other order is a different rotation: the test can tell the orders apart
    wrong = euler_rotation(-30, 120, 15) * euler_rotation(10, -60, -25) * euler_rotation(20, 40, 60)
    assert (got * wrong.inv()).magnitude() > 1e-3


def test_reconstruct_equals_a_per_point_scipy_loop() -> None:
    # Vectorisation check against scipy Rotation/Slerp applied one point at a time.
    from scipy.spatial.transform import Slerp

    m = model()
    rng = np.random.default_rng(3)
    n = 300
    lat = rng.uniform(-80, 80, n)
    lon = rng.uniform(-180, 180, n)
    plate = rng.choice([1, 2, 3], n)
    age = rng.choice([0.0, 12.5, 30.0, 50.0, 59.0, 60.0], n)
    out = reconstruct(lat, lon, plate, age, m)

    def rel(p: int, t: float) -> Rotation:
        tr = m.tracks[p]
        return Slerp(tr.ages, Rotation.from_rotvec(tr.poles * tr.angles_rad[:, None]))([t])[0]

    for i in range(n):
        chain = [int(plate[i])]
        while m.tracks[chain[-1]].relative_to != 0:
            chain.append(m.tracks[chain[-1]].relative_to)
        r = Rotation.identity()
        for q in chain:  # innermost first: R = R(F→0)·…·R(P→F)
            r = rel(q, age[i]) * r
        v = rotations.unit_vectors(np.array([lat[i]]), np.array([lon[i]]))
        want_lat, want_lon = rotations.lat_lon(r.apply(v))
        assert out.paleolat[i] == pytest.approx(want_lat[0], abs=1e-9)
        dlon = (out.paleolon[i] - want_lon[0] + 180) % 360 - 180
        assert dlon == pytest.approx(0.0, abs=1e-9)


def test_status_for_unreconstructable_records() -> None:
    # Common practice: never extrapolate; say why a record has no paleo-position.
    m = model()  # plate 3's circuit ends at 60 Ma (its own oldest row)
    out = reconstruct(
        [10, 10, 10, 10, 10, 10],
        [5, 5, 5, 5, 5, 5],
        [1, -1, 9, 1, 3, 3],
        [20, 20, 20, np.nan, 61, 60],
        m,
    )
    assert list(out.status) == [OK, NO_PLATE, UNKNOWN_PLATE, NO_AGE, BEYOND, OK]
    assert np.isnan(out.paleolat[1:5]).all() and np.isfinite(out.paleolat[[0, 5]]).all()


def test_paleolat_sigma_monte_carlo() -> None:
    # Common practice: a zero-width cone gives zero spread; a wider cone a wider spread;
    # a fixed seed repeats; a circuit without any σ gives NaN.
    base = HEAD + COLS + "1,0,90,0,0,0,,\n1,10,0,0,30,0,{s},\n2,0,0,0,0,0,,\n2,10,0,0,30,0,,\n"
    args = ([0.0, 0.0], [90.0, 90.0], [1, 2], [10.0, 10.0])
    s0 = paleolat_sigma(*args, model(base.format(s=0)), n_draws=50)
    s2 = paleolat_sigma(*args, model(base.format(s=2)), n_draws=400)
    s4 = paleolat_sigma(*args, model(base.format(s=4)), n_draws=400)
    assert s0[0] == pytest.approx(0.0, abs=1e-9) and np.isnan(s0[1])
    assert 0 < s2[0] < s4[0]
    np.testing.assert_array_equal(s2, paleolat_sigma(*args, model(base.format(s=2)), n_draws=400))


# --- validation ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "rows, line, words",
    [
        ("1,0,90,0,0,2,,\n2,0,90,0,0,1,,\n", 4, "loops"),
        ("1,0,90,0,0,7,,\n", 4, "plate 7"),
        ("1,0,90,0,0,0,,\n2,10,90,0,5,1,,\n", 5, "no row at 0 Ma"),
        ("1,0,90,0,0,0,,\n1,10,95,0,5,0,,\n", 5, "pole_lat 95"),
        ("1,0,90,0,0,0,,\n1,10,abc,0,5,0,,\n", 5, "not a number"),
        ("1,0,90,0,0,0,,\n1,0,80,0,0,0,,\n", 5, "repeats line 4"),
        ("1,0,90,0,5,0,,\n", 4, "not 0"),
        ("1,0,90,0,0,0,,\n1,10,90,0,5,2,,\n2,0,0,0,0,0,,\n", 5, "relative to 2 here"),
    ],
)
def test_validation_names_the_line(rows: str, line: int, words: str) -> None:
    # Common practice: a malformed model is refused with its line and a fix.
    with pytest.raises(ConfigError) as err:
        parse_model(HEAD + COLS + rows, "m.csv")
    assert f"m.csv line {line}" in err.value.message
    assert words in err.value.message
    assert err.value.hint and err.value.exit_code == 2


def test_header_and_columns_are_required(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="frame"):
        parse_model("# model: x\n" + COLS + "1,0,90,0,0,0,,\n")
    with pytest.raises(ConfigError, match="missing: relative_to"):
        parse_model(HEAD + "plate_id,age_ma,pole_lat,pole_lon,angle_deg\n")
    with pytest.raises(InputFileError, match="does not exist"):  # exit 2, as every file option
        load_model(tmp_path / "nope.csv")
    path = tmp_path / "m.csv"
    path.write_text(MODEL, encoding="utf-8")
    m = load_model(path)
    assert (m.name, m.frame, sorted(m.tracks)) == ("test", "paleomagnetic", [1, 2, 3])
    assert len(m.digest) == 64


# --- plate polygons -----------------------------------------------------------------------

SQUARE_A = [[[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]]
SQUARE_B = [[[10, 0], [20, 0], [20, 10], [10, 10], [10, 0]]]  # shares an edge with A
TRIANGLE = [[[-30, -20], [-5, -25], [-12, -2], [-30, -20]]]


def collection(*items: tuple[object, list]) -> dict:
    return {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {} if pid is None else {"plate_id": pid},
                "geometry": {"type": "Polygon", "coordinates": coords},
            }
            for pid, coords in items
        ],
    }


def test_assignment_matches_shapely_contains_on_random_points(tmp_path: Path) -> None:
    # shapely Polygon.contains, point by point, as the independent reference.
    path = tmp_path / "p.geojson"
    path.write_text(json.dumps(collection((101, SQUARE_A), (202, SQUARE_B), (303, TRIANGLE))))
    polys = plates.load_polygons(path)
    rng = np.random.default_rng(7)
    lon = rng.uniform(-40, 30, 2000)
    lat = rng.uniform(-30, 15, 2000)
    got = plates.assign(lat, lon, polys)
    shapes = [
        (101, shapely.Polygon(SQUARE_A[0])),
        (202, shapely.Polygon(SQUARE_B[0])),
        (303, shapely.Polygon(TRIANGLE[0])),
    ]
    want = np.array(
        [
            next((p for p, s in shapes if s.contains(shapely.Point(x, y))), -1)
            for x, y in zip(lon, lat, strict=True)
        ]
    )
    np.testing.assert_array_equal(got.plate_id, want)
    assert got.n_unassigned == int((want == -1).sum()) > 0  # counted, none dropped
    assert len(got.plate_id) == 2000


def test_unassigned_overrides_and_shared_edge() -> None:
    polys = plates.parse_polygons(collection((101, SQUARE_A), (202, SQUARE_B)))
    got = plates.assign(
        [5, 5, 50, 5],
        [5, 10, 50, 15],
        polys,
        overrides={"terrane-x": 303},
        locality_ids=["a", "b", "c", "terrane-x"],
    )
    # shared edge at lon 10 goes to the smaller id (documented rule); (50, 50) in no polygon
    assert got.plate_id.tolist() == [101, 101, -1, 303]
    assert (got.n_unassigned, got.n_overridden) == (1, 1)


def test_overlapping_polygons_of_different_plates_are_refused() -> None:
    overlap = [[[5, 5], [15, 5], [15, 15], [5, 15], [5, 5]]]
    with pytest.raises(ConfigError, match=r"feature 1 \(plate 101\) and feature 2 \(plate 202\)"):
        plates.parse_polygons(collection((101, SQUARE_A), (202, overlap)))
    plates.parse_polygons(collection((101, SQUARE_A), (101, overlap)))  # same plate: fine


def test_polygon_validation() -> None:
    with pytest.raises(ConfigError, match="no 'plate_id'"):
        plates.parse_polygons(collection((None, SQUARE_A)))
    bowtie = [[[0, 0], [10, 10], [10, 0], [0, 10], [0, 0]]]
    with pytest.raises(ConfigError, match="invalid.*Self-intersection"):
        plates.parse_polygons(collection((101, bowtie)))
    with pytest.raises(ConfigError, match="not a whole number"):
        plates.parse_polygons(collection(("x", SQUARE_A)))


# --- more closed forms and general-purpose references -------------------------------------


def one_plate(
    pole_lat: float, pole_lon: float, angle: float, age: float = 10.0
) -> rotations.RotationModel:
    """A one-plate model built row by row: identity at 0 Ma, the given rotation at ``age``."""
    return model(
        HEAD + COLS + f"1,0,90,0,0,0,,\n1,{age!r},{pole_lat!r},{pole_lon!r},{angle!r},0,,\n"
    )


@pytest.mark.parametrize(
    "pole, angle, point, want",
    [
        # Closed form, right-hand rule: +30° about +y = (0°N, 90°E) takes x to
        # (cos 30°, 0, −sin 30°), i.e. (−30°N, 0°E).
        ((0.0, 90.0), 30.0, (0.0, 0.0), (-30.0, 0.0)),
        # Closed form: +30° about the north pole adds 30° of longitude, latitude unchanged.
        ((90.0, 0.0), 30.0, (10.0, 20.0), (10.0, 50.0)),
    ],
)
def test_thirty_degree_closed_forms_and_fixed_pole(
    pole: tuple[float, float], angle: float, point: tuple[float, float], want: tuple[float, float]
) -> None:
    m = one_plate(pole[0], pole[1], angle)
    out = reconstruct([point[0], pole[0]], [point[1], pole[1]], [1, 1], [10.0, 10.0], m)
    assert out.paleolat[0] == pytest.approx(want[0], abs=1e-12)
    assert out.paleolon[0] == pytest.approx(want[1], abs=1e-12)
    # Closed form: the Euler pole lies on the axis and does not move.
    assert out.paleolat[1] == pytest.approx(pole[0], abs=1e-12)
    if abs(pole[0]) < 90:
        assert out.paleolon[1] == pytest.approx(pole[1], abs=1e-12)


def _haversine(
    lat1: np.ndarray, lon1: np.ndarray, lat2: np.ndarray, lon2: np.ndarray
) -> np.ndarray:
    """Great-circle distance in radians (haversine formula, closed form)."""
    p1, p2, dl = np.radians(lat1), np.radians(lat2), np.radians(lon2 - lon1)
    a = np.sin((p2 - p1) / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dl / 2) ** 2
    return 2 * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0)))


@pytest.mark.parametrize("plate, age", [(1, 73.4), (2, 50.0), (3, 37.3)])
def test_reconstruction_preserves_great_circle_distances(plate: int, age: float) -> None:
    # Haversine (closed form): a rotation is an isometry of the sphere, so the distance
    # between two points on one plate at one age is unchanged, whatever the circuit.
    rng = np.random.default_rng(11 + plate)
    n = 1000
    lat = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    lon = rng.uniform(-180, 180, n)
    out = reconstruct(lat, lon, np.full(n, plate), np.full(n, age), model())
    assert (out.status == OK).all()
    i, j = rng.permutation(n), rng.permutation(n)
    before = _haversine(lat[i], lon[i], lat[j], lon[j])
    after = _haversine(out.paleolat[i], out.paleolon[i], out.paleolat[j], out.paleolon[j])
    np.testing.assert_allclose(after, before, rtol=0, atol=1e-9)


def test_random_rotations_agree_with_scipy_rotvec() -> None:
    # scipy Rotation.from_rotvec(axis · angle).apply as the general-purpose reference; the
    # axis is built here from the pole's coordinates with the closed-form cos/sin formula.
    rng = np.random.default_rng(29)
    for _ in range(40):
        plat = float(np.degrees(np.arcsin(rng.uniform(-1, 1))))
        plon = float(rng.uniform(-180, 360))
        angle = float(rng.uniform(-359, 359))
        age = float(rng.uniform(1, 250))
        m = one_plate(plat, plon, angle, age)
        lat = np.degrees(np.arcsin(rng.uniform(-1, 1, 200)))
        lon = rng.uniform(-180, 180, 200)
        out = reconstruct(lat, lon, np.ones(200), np.full(200, age), m)
        pa, po = np.radians(plat), np.radians(plon)
        axis = np.array([np.cos(pa) * np.cos(po), np.cos(pa) * np.sin(po), np.sin(pa)])
        la, lo = np.radians(lat), np.radians(lon)
        xyz = np.column_stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])
        want = Rotation.from_rotvec(axis * np.radians(angle)).apply(xyz)
        gla, glo = np.radians(out.paleolat), np.radians(out.paleolon)
        got = np.column_stack([np.cos(gla) * np.cos(glo), np.cos(gla) * np.sin(glo), np.sin(gla)])
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-9)
        want_lat = np.degrees(np.arcsin(np.clip(want[:, 2], -1, 1)))
        np.testing.assert_allclose(out.paleolat, want_lat, rtol=0, atol=1e-9)


# Plate 202 crosses the antimeridian (drawn 170…190, as the module docstring says); plate 101
# is drawn in ordinary longitudes (−170…−160) and shares the edge lon 190 = −170 with it.
ACROSS = [[[170, -10], [190, -10], [190, 10], [170, 10], [170, -10]]]
EAST_OF_IT = [[[-170, -10], [-160, -10], [-160, 10], [-170, 10], [-170, -10]]]


def test_point_in_polygon_across_the_antimeridian() -> None:
    polys = plates.parse_polygons(collection((202, ACROSS), (101, EAST_OF_IT)))
    got = plates.assign([0.0, 0.0, 0.0, 0.0, 30.0], [-175.0, 175.0, 180.0, -180.0, 175.0], polys)
    assert got.plate_id.tolist() == [202, 202, 202, 202, -1]

    # shapely on the unwrapped geometry (lon in 160…200, both plates drawn there; closed sets
    # via intersects) as the independent reference, on random points given in −180…180.
    rng = np.random.default_rng(5)
    n = 3000
    ulon = rng.uniform(160, 200, n)
    lat = rng.uniform(-15, 15, n)
    lon = (ulon + 180) % 360 - 180
    shapes = [
        (101, shapely.Polygon([(x + 360, y) for x, y in EAST_OF_IT[0]])),
        (202, shapely.Polygon(ACROSS[0])),
    ]
    want = np.array(
        [
            next((p for p, s in shapes if s.intersects(shapely.Point(x, y))), -1)
            for x, y in zip(ulon, lat, strict=True)
        ]
    )
    got = plates.assign(lat, lon, polys)
    np.testing.assert_array_equal(got.plate_id, want)
    assert {101, 202, -1} <= set(want.tolist())


def test_antimeridian_boundary_points_follow_the_documented_rule() -> None:
    # Module docstring: closed sets (an edge point belongs to its polygon) and a point on an
    # edge shared by two plates goes to the smaller plate id.
    polys = plates.parse_polygons(collection((202, ACROSS), (101, EAST_OF_IT)))
    lat = [10.0, -10.0, 0.0, 0.0, 5.0, 10.0, 0.0]
    lon = [-175.0, 175.0, 170.0, -170.0, 190.0 - 360.0, -170.0, -160.0]
    got = plates.assign(lat, lon, polys)
    # top edge, bottom edge, west edge of 202; shared edge (twice, once a corner) → 101;
    # east edge of 101
    assert got.plate_id.tolist() == [202, 202, 202, 101, 101, 101, 101]
