"""Paleo placement: rotation models (our TOML), slerp, plate circuits, spans, reconstruction,
plate polygons. Every name and number here is invented; each check names what it is
checked against."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import shapely
from scipy.spatial.transform import Rotation, Slerp
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

HEAD = """\
[model]
name = "test"
frame = "paleomagnetic"
citation = "invented for the tests"
"""

# (age, axis lat, axis lon, angle, σ or None)
Pole = tuple[float, float, float, float, float | None]


def pole_tables(prefix: str, poles: list[Pole]) -> str:
    out = ""
    for age, lat, lon, angle, sigma in poles:
        out += f"[[{prefix}.pole]]\nage_ma = {age!r}\naxis_lat = {lat!r}\n"
        out += f"axis_lon = {lon!r}\nangle_deg = {angle!r}\n"
        if sigma is not None:
            out += f"sigma_deg = {sigma!r}\n"
    return out


def document(plates_: dict[str, tuple[str, list[Pole]] | list[tuple[str, list[Pole]]]]) -> str:
    """A model document: each plate one (partner, poles) span or a list of spans."""
    text = HEAD
    for name, spec in plates_.items():
        text += f"\n[plate.{name}]\n"
        if isinstance(spec, tuple):
            text += f'moves_against = "{spec[0]}"\n' + pole_tables(f"plate.{name}", spec[1])
            continue
        for partner, poles in spec:
            text += f'[[plate.{name}.span]]\nmoves_against = "{partner}"\n'
            text += pole_tables(f"plate.{name}.span", poles)
    return text


PM = "paleomagnetic"
SPEC: dict[str, Any] = {
    "arden-block": (PM, [(50, 90, 0, 30, None), (100, 20, 40, 60, 2)]),
    "belko-block": ("arden-block", [(80, 10, -60, -25, None)]),
    "corrin-block": ("belko-block", [(60, -30, 120, 15, 1)]),
}
MODEL = document(SPEC)


def model(text: str = MODEL) -> rotations.RotationModel:
    return parse_model(text, "m.toml")


def one_plate(
    pole_lat: float, pole_lon: float, angle: float, age: float = 10.0
) -> rotations.RotationModel:
    """A one-plate model: today's identity implied, the given rotation at ``age``."""
    return model(document({"arden-block": (PM, [(age, pole_lat, pole_lon, angle, None)])}))


def scipy_track(poles: list[Pole]) -> tuple[list[float], Rotation]:
    """The reference's own tabulation: identity at 0 Ma, then each pole's rotation vector."""
    ages = [0.0] + [float(p[0]) for p in poles]
    vecs = [np.zeros(3)] + [
        rotations.unit_vectors(np.array([p[1]]), np.array([p[2]]))[0] * np.radians(p[3])
        for p in poles
    ]
    return ages, Rotation.from_rotvec(vecs)


# --- the format ---------------------------------------------------------------------------


def test_a_literal_document_reads_as_written(tmp_path: Path) -> None:
    path = tmp_path / "m.toml"
    path.write_text(
        """\
[model]
name = "kestrel-2031"
frame = "mantle"
citation = "Invented, 2031."
description = "two plates"

[plate.arden-block]
moves_against = "mantle"
description = "the big one"

[[plate.arden-block.pole]]
age_ma = 20
axis_lat = 10.5
axis_lon = 200
angle_deg = -4.25
sigma_deg = 0.5
note = "first"

[[plate.arden-block.pole]]
age_ma = 40.0
axis_lat = 11
axis_lon = 201
angle_deg = -9

[plate.belko-block]
moves_against = "arden-block"
[[plate.belko-block.pole]]
age_ma = 30
axis_lat = 0
axis_lon = 0
angle_deg = 3
""",
        encoding="utf-8",
    )
    m = load_model(path)
    assert (m.name, m.frame, m.citation, m.description) == (
        "kestrel-2031",
        "mantle",
        "Invented, 2031.",
        "two plates",
    )
    assert m.names == ("arden-block", "belko-block") and len(m.digest) == 64
    (span,) = m.plates["arden-block"].spans
    assert span.partner == "mantle" and span.ages.tolist() == [0.0, 20.0, 40.0]  # 0 implied
    assert span.where == ("", "plate.arden-block.pole[1]", "plate.arden-block.pole[2]")
    np.testing.assert_allclose(np.degrees(span.sigma_rad[1]), 0.5)
    assert span.sigma_rad[0] == 0 and np.isnan(span.sigma_rad[2])  # today exact; not given
    assert m.plates["belko-block"].spans[0].partner == "arden-block"
    with pytest.raises(InputFileError, match="does not exist"):  # exit 2, as every file option
        load_model(tmp_path / "nope.toml")


def test_the_readme_example_and_the_demo_model_read() -> None:
    # The README documents the format with an example document: it must read as described.
    import re

    from strata13.compile.demo import demo_folder

    readme = (Path(__file__).parents[1] / "README.md").read_text(encoding="utf-8")
    (block,) = [b for b in re.findall(r"```toml\n(.*?)```", readme, re.S) if "[model]" in b]
    m = parse_model(block, "README")
    terrane = m.plates["skellan-terrane"]
    assert [s.partner for s in terrane.spans] == ["brevandel-block", "paleomagnetic"]
    assert terrane.spans[1].ages.tolist() == [120.0, 200.0] and terrane.oldest_ma == 200
    demo = load_model(demo_folder() / "rotations.toml")
    assert demo.names == ("brevandel-block", "calderin-block")
    polys = plates.load_polygons(demo_folder() / "plates.geojson")
    plates.check_against_model(polys, demo.names, "plates.geojson")
    assert polys.names == demo.names


def test_the_retired_csv_layout_is_refused_with_one_sentence() -> None:
    csv_text = "# model: x\n# frame: paleomagnetic\nplate_id,age_ma\n1,0\n"
    for text, name in ((csv_text, "m.txt"), (MODEL, "m.csv")):
        with pytest.raises(ConfigError) as err:
            parse_model(text, name)
        assert "retired CSV layout" in err.value.message and "TOML" in err.value.message
        assert "Paleogeography" in err.value.hint and err.value.exit_code == 2


def test_toml_syntax_errors_name_the_line() -> None:
    with pytest.raises(ConfigError, match="not valid TOML at line 5"):
        parse_model(HEAD + "[plate.a\n", "m.toml")


# --- closed forms -------------------------------------------------------------------------


def test_quarter_turn_about_north_pole() -> None:
    # Closed form (right-hand rule): 90° about +z takes x = (0°N, 0°E) to y = (0°N, 90°E).
    out = reconstruct([0.0], [0.0], ["arden-block"], [10.0], one_plate(90, 0, 90))
    assert out.paleolat[0] == pytest.approx(0.0, abs=1e-12)
    assert out.paleolon[0] == pytest.approx(90.0, abs=1e-12)
    assert out.status[0] == OK


@pytest.mark.parametrize("angle", [10.0, 35.0, -20.0])
def test_equatorial_pole_moves_latitude_by_the_angle(angle: float) -> None:
    # Closed form: about the pole (0°N, 0°E) a point at (0°N, 90°E) goes to latitude = angle
    # on the same meridian (y·cosθ + z·sinθ).
    out = reconstruct([0.0], [90.0], ["arden-block"], [10.0], one_plate(0, 0, angle))
    assert out.paleolat[0] == pytest.approx(angle, abs=1e-12)
    assert out.paleolon[0] == pytest.approx(90.0, abs=1e-9)


def test_point_on_the_pole_axis_keeps_its_latitude() -> None:
    # Closed form: a rotation leaves points on its axis fixed.
    m = one_plate(35, -70, 47)
    out = reconstruct([35.0, -35.0], [-70.0, 110.0], ["arden-block"] * 2, [10.0, 4.0], m)
    np.testing.assert_allclose(out.paleolat, [35.0, -35.0], atol=1e-10)


def test_interpolation_at_tabulated_age_returns_the_pole() -> None:
    # Common practice: slerp passes through its knots; reference built with scipy directly.
    got = relative_rotation(model(), "arden-block", np.array([100.0]))
    want = euler_rotation(20, 40, 60)
    assert (got[0] * want.inv()).magnitude() == pytest.approx(0.0, abs=1e-12)


def test_halfway_about_one_pole_the_angle_is_the_mean() -> None:
    # Closed form: rotations about a common axis form a one-parameter group; slerp is
    # linear in angle along it, so halfway between 10° and 30° is 20°.
    m = model(document({"arden-block": (PM, [(10, 40, 25, 10, None), (30, 40, 25, 30, None)])}))
    got = relative_rotation(m, "arden-block", np.array([20.0]))[0]
    assert (got * euler_rotation(40, 25, 20).inv()).magnitude() == pytest.approx(0, abs=1e-12)


def test_composition_through_a_two_step_circuit_matches_scipy_product() -> None:
    # scipy Rotation product computed independently: R(c→frame) = R(a→frame)·R(b→a)·R(c→b)
    # at an age tabulated for every plate (so no interpolation enters).
    m = model(
        document(
            {
                "arden-block": (PM, [(40, 20, 40, 60, None)]),
                "belko-block": ("arden-block", [(40, 10, -60, -25, None)]),
                "corrin-block": ("belko-block", [(40, -30, 120, 15, None)]),
            }
        )
    )
    want = euler_rotation(20, 40, 60) * euler_rotation(10, -60, -25) * euler_rotation(-30, 120, 15)
    got = frame_rotation(m, "corrin-block", np.array([40.0]))[0]
    assert (got * want.inv()).magnitude() == pytest.approx(0.0, abs=1e-12)
    # the other order is a different rotation: the test can tell the orders apart
    wrong = euler_rotation(-30, 120, 15) * euler_rotation(10, -60, -25) * euler_rotation(20, 40, 60)
    assert (got * wrong.inv()).magnitude() > 1e-3


def test_reconstruct_equals_a_per_point_scipy_loop() -> None:
    # Vectorisation check against scipy Rotation/Slerp applied one point at a time, the
    # tracks tabulated here from SPEC (not read back from the model).
    m = model()
    rng = np.random.default_rng(3)
    n = 300
    lat = rng.uniform(-80, 80, n)
    lon = rng.uniform(-180, 180, n)
    names = rng.choice(sorted(SPEC), n)
    age = rng.choice([0.0, 12.5, 30.0, 50.0, 59.0, 60.0], n)
    out = reconstruct(lat, lon, names, age, m)
    tracks = {p: scipy_track(poles) for p, (_, poles) in SPEC.items()}
    for i in range(n):
        r = Rotation.identity()
        plate = str(names[i])
        while plate != PM:  # innermost first: R = R(F→frame)·…·R(P→F)
            ages, rots = tracks[plate]
            r = Slerp(ages, rots)([age[i]])[0] * r
            plate = SPEC[plate][0]
        v = rotations.unit_vectors(np.array([lat[i]]), np.array([lon[i]]))
        want_lat, want_lon = rotations.lat_lon(r.apply(v))
        assert out.paleolat[i] == pytest.approx(want_lat[0], abs=1e-9)
        dlon = (out.paleolon[i] - want_lon[0] + 180) % 360 - 180
        assert dlon == pytest.approx(0.0, abs=1e-9)


def test_status_for_unreconstructable_records() -> None:
    # Common practice: never extrapolate; say why a record has no paleo-position.
    m = model()  # corrin-block's circuit ends at 60 Ma (its own oldest pole)
    out = reconstruct(
        [10] * 7,
        [5] * 7,
        ["arden-block", None, "nowhere-block", "arden-block", "corrin-block", "corrin-block", ""],
        [20, 20, 20, np.nan, 61, 60, 20],
        m,
    )
    assert list(out.status) == [OK, NO_PLATE, UNKNOWN_PLATE, NO_AGE, BEYOND, OK, NO_PLATE]
    assert np.isnan(out.paleolat[1:5]).all() and np.isfinite(out.paleolat[[0, 5]]).all()


def test_paleolat_sigma_monte_carlo_properties() -> None:
    # Common practice: a zero-width cone gives zero spread; a wider cone a wider spread;
    # a fixed seed repeats; a circuit without any σ gives NaN (unknown, not zero).
    def m(s: float) -> rotations.RotationModel:
        return model(
            document(
                {
                    "arden-block": (PM, [(10, 0, 0, 30, s)]),
                    "belko-block": (PM, [(10, 0, 0, 30, None)]),
                }
            )
        )

    args = ([0.0, 0.0], [90.0, 90.0], ["arden-block", "belko-block"], [10.0, 10.0])
    s0 = paleolat_sigma(*args, m(0), n_draws=50)
    s2 = paleolat_sigma(*args, m(2), n_draws=400)
    s4 = paleolat_sigma(*args, m(4), n_draws=400)
    assert s0[0] == pytest.approx(0.0, abs=1e-9) and np.isnan(s0[1])
    assert 0 < s2[0] < s4[0]
    np.testing.assert_array_equal(s2, paleolat_sigma(*args, m(2), n_draws=400))
    # the present is exact (σ 0); a pole without σ makes the σ unknown wherever it enters
    mixed = model(document({"arden-block": (PM, [(10, 0, 0, 30, 2), (20, 0, 0, 40, None)])}))
    got = paleolat_sigma([0.0] * 4, [90.0] * 4, ["arden-block"] * 4, [0, 5, 10, 15], mixed)
    assert got[0] == 0 and got[1] > 0 and got[2] > 0 and np.isnan(got[3])


@pytest.mark.parametrize(
    "pole, angle, point", [((20.0, 10.0), 30.0, (5.0, 60.0)), ((35.0, -20.0), -50.0, (-10.0, 40.0))]
)
def test_paleolat_sigma_matches_first_order_error_propagation(
    pole: tuple[float, float], angle: float, point: tuple[float, float]
) -> None:
    # Linear error propagation (closed form for a small cone): a pole displaced by δ in its
    # tangent plane, δ ~ N(0, σ²·I₂), moves the paleolatitude by J·δ, so its 1σ is σ·|J|.
    # J by central differences of scipy's Rotation.from_rotvec, independent of strata13.
    sigma = 0.3
    m = model(document({"arden-block": (PM, [(10, pole[0], pole[1], angle, sigma)])}))
    got = paleolat_sigma([point[0]], [point[1]], ["arden-block"], [10.0], m, n_draws=4000)[0]
    axis = rotations.unit_vectors(np.array([pole[0]]), np.array([pole[1]]))[0]
    e1 = np.cross(axis, [0.0, 0.0, 1.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(axis, e1)
    v = rotations.unit_vectors(np.array([point[0]]), np.array([point[1]]))[0]

    def lat_after(a: np.ndarray) -> float:
        r = Rotation.from_rotvec(a / np.linalg.norm(a) * np.radians(angle))
        return float(np.degrees(np.arcsin(r.apply(v)[2])))

    h = 1e-6
    jac = [(lat_after(axis + h * e) - lat_after(axis - h * e)) / (2 * h) for e in (e1, e2)]
    want = np.radians(sigma) * np.hypot(*jac)
    assert want > 0.05
    # 4000 draws: the sample SD's relative error is about 1/sqrt(2·4000) ≈ 1.1 %
    assert got == pytest.approx(want, rel=0.05)


# --- a plate that changes what it moves against -------------------------------------------

BASE_A = [
    (60.0, 30.0, -40.0, 20.0, 1.0),
    (120.0, 25.0, -45.0, 41.0, 1.0),
    (200.0, 20.0, -50, 70.0, None),
]
BASE_B = [(100.0, -10.0, 80.0, -15.0, 0.7), (200.0, -12.0, 85.0, -33.0, 0.5)]
YOUNG = [(40.0, 5.0, 10.0, 8.0, 0.6), (90.0, 8.0, 12.0, 19.0, 0.8)]
OLDER = [(130.0, 60.0, 170.0, 31.0, 1.1), (170.0, 62.0, 175.0, 44.0, 0.9)]


def _slerp(poles: list[Pole], age: float) -> Rotation:
    ages, rots = scipy_track(poles)
    return Slerp(ages, rots)([age])[0]


def _meeting_pole() -> Pole:
    """The older span's first pole, relative to base-b at 90 Ma, that puts the drifter where
    its younger span has it: R_b(90)⁻¹ · R_a(90) · R_young(90) (scipy)."""
    r = _slerp(BASE_B, 90.0).inv() * _slerp(BASE_A, 90.0) * _slerp(YOUNG, 90.0)
    vec = r.as_rotvec()
    angle = float(np.degrees(np.linalg.norm(vec)))
    lat, lon = rotations.lat_lon((vec / np.linalg.norm(vec))[None, :])
    return (90.0, float(lat[0]), float(lon[0]), angle, 0.4)


def _span_models(meeting: Pole) -> tuple[rotations.RotationModel, rotations.RotationModel]:
    base = {"base-a": (PM, BASE_A), "base-b": (PM, BASE_B)}
    spans = model(document({**base, "drifter": [("base-a", YOUNG), ("base-b", [meeting, *OLDER])]}))
    split = model(
        document(
            {
                **base,
                "drifter-young": ("base-a", YOUNG),
                "drifter-old": ("base-b", [meeting, *OLDER]),
            }
        )
    )
    return spans, split


def test_a_plate_changing_partner_reconstructs_as_the_two_plate_split() -> None:
    # The two-plate split it replaces (one plate per partner, records older than the switch
    # on the older one) as the reference, and scipy's Slerp and product directly.
    spans, split = _span_models(_meeting_pole())
    rng = np.random.default_rng(17)
    n = 2000
    lat = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    lon = rng.uniform(-180, 180, n)
    age = np.concatenate([[0.0, 40.0, 90.0, 90.0 + 1e-9, 170.0, 170.5], rng.uniform(0, 175, n - 6)])
    got = reconstruct(lat, lon, np.full(n, "drifter"), age, spans)
    names = np.where(age <= 90.0, "drifter-young", "drifter-old")
    want = reconstruct(lat, lon, names, age, split)
    np.testing.assert_array_equal(got.status, want.status)
    assert (got.status == BEYOND).sum() == (age > 170).sum() > 0
    ok = got.status == OK
    np.testing.assert_allclose(got.paleolat[ok], want.paleolat[ok], rtol=0, atol=1e-12)
    dlon = (got.paleolon[ok] - want.paleolon[ok] + 180) % 360 - 180
    np.testing.assert_allclose(dlon, 0.0, atol=1e-9)
    for i in np.flatnonzero(ok)[:200]:  # scipy, one point at a time
        t = float(age[i])
        if t <= 90:
            r = _slerp(BASE_A, t) * _slerp(YOUNG, t)
        else:
            ages, rots = scipy_track([_meeting_pole(), *OLDER])
            r = _slerp(BASE_B, t) * Slerp(ages[1:], rots[1:])([t])[0]
        v = r.apply(rotations.unit_vectors(lat[i : i + 1], lon[i : i + 1]))
        assert got.paleolat[i] == pytest.approx(rotations.lat_lon(v)[0][0], abs=1e-9)
    # the σ follows the same circuits: the two models draw their poles in another order,
    # so the two estimates agree within their Monte Carlo error (about 1.6 % each at 2000
    # draws; 8 % allowed)
    pick = np.flatnonzero(ok & (age > 0))[:40]
    s_got = paleolat_sigma(lat[pick], lon[pick], np.full(40, "drifter"), age[pick], spans, 2000)
    s_want = paleolat_sigma(lat[pick], lon[pick], names[pick], age[pick], split, 2000)
    assert np.isfinite(s_got).all() and (s_got > 0).all()
    np.testing.assert_allclose(s_got, s_want, rtol=0.08)
    # base-a's pole at 200 Ma states no σ: where it enters, the σ is unknown in both
    late = reconstruct([0.0], [0.0], ["base-a"], [150.0], spans)
    assert late.status[0] == OK
    for m in (spans, split):
        assert np.isnan(paleolat_sigma([0.0], [0.0], ["base-a"], [150.0], m))[0]


def test_the_position_is_continuous_where_the_spans_meet() -> None:
    spans, _ = _span_models(_meeting_pole())
    v = rotations.unit_vectors(np.array([12.0]), np.array([-30.0]))
    before = frame_rotation(spans, "drifter", np.array([90.0 - 1e-7]))[0].apply(v)
    after = frame_rotation(spans, "drifter", np.array([90.0 + 1e-7]))[0].apply(v)
    assert np.degrees(np.linalg.norm(before - after)) < 1e-4


def test_a_jump_where_spans_meet_is_refused() -> None:
    age, lat, lon, angle, sigma = _meeting_pole()
    with pytest.raises(ConfigError) as err:
        _span_models((age, lat, lon, angle + 1.0, sigma))
    assert "plate.drifter.span[2].pole[1]" in err.value.message
    assert "jump 1" in err.value.message and "0.05°" in err.value.message


@pytest.mark.parametrize(
    "second, where, words",
    [
        ([(80.0, 0, 0, 1, None), (130.0, 0, 0, 2, None)], "span[2].pole[1]", "starts at 80 Ma"),
        ([(90.0, 0, 0, 1, None)], "plate.drifter.span[2]", "at least one older pole"),
    ],
)
def test_spans_must_meet(second: list[Pole], where: str, words: str) -> None:
    text = document(
        {
            "base-a": (PM, BASE_A),
            "base-b": (PM, BASE_B),
            "drifter": [("base-a", YOUNG), ("base-b", second)],
        }
    )
    with pytest.raises(ConfigError) as err:
        parse_model(text, "m.toml")
    assert where in err.value.message and words in err.value.message


def test_a_loop_at_some_ages_only_is_refused() -> None:
    # p moves against q from 50 Ma on, q against p from 60 Ma on: a loop in (60, 100] Ma.
    # (Angles 0 throughout, so only the circuits matter.)
    def doc(q_switch: float) -> str:
        z = 0.0
        return document(
            {
                "p-block": [
                    (PM, [(50, 0, 0, z, None)]),
                    ("q-block", [(50, 0, 0, z, None), (100, 0, 0, z, None)]),
                ],
                "q-block": [
                    (PM, [(q_switch, 0, 0, z, None)]),
                    ("p-block", [(q_switch, 0, 0, z, None), (120, 0, 0, z, None)]),
                ],
            }
        )

    with pytest.raises(ConfigError, match=r"loops at 100 Ma \(p-block → q-block → p-block\)"):
        parse_model(doc(60), "m.toml")
    # q switching at 100 Ma, where p's circuit ends: the same partners never overlap in time
    m = parse_model(doc(100), "m.toml")
    assert m.circuit("p-block", 100) == ["p-block", "q-block"]
    assert m.circuit("q-block", 110) == ["q-block", "p-block"]  # p is beyond 100 Ma there
    assert reconstruct([0], [0], ["q-block"], [110], m).status[0] == BEYOND


# --- validation ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "spec, where, words",
    [
        (
            {
                "a-block": ("b-block", [(10, 0, 0, 1, None)]),
                "b-block": ("a-block", [(10, 0, 0, 1, None)]),
            },
            "plate.",
            "loops at 10 Ma",
        ),
        ({"a-block": ("z-block", [(10, 0, 0, 1, None)])}, "plate.a-block", "neither a plate"),
        (
            {"a-block": (PM, [(10, 95, 0, 5, None)])},
            "plate.a-block.pole[1]",
            "axis_lat 95 is outside",
        ),
        ({"a-block": (PM, [(10, 0, 400, 5, None)])}, "plate.a-block.pole[1]", "axis_lon 400"),
        ({"a-block": (PM, [(10, 0, 0, 5, 95)])}, "plate.a-block.pole[1]", "sigma_deg 95"),
        (
            {"a-block": (PM, [(10, 0, 0, 5, None), (10, 0, 0, 6, None)])},
            "plate.a-block.pole[2]",
            "not older",
        ),
        (
            {"a-block": (PM, [(20, 0, 0, 5, None), (10, 0, 0, 6, None)])},
            "plate.a-block.pole[2]",
            "youngest first",
        ),
        (
            {"a-block": (PM, [(0, 0, 0, 0, None), (10, 0, 0, 6, None)])},
            "plate.a-block.pole[1]",
            "implied",
        ),
        (
            {"a-block": ("mantle", [(10, 0, 0, 1, None)])},
            "plate.a-block",
            "model's frame is 'paleomagnetic'",
        ),
        ({"a-block": ("a-block", [(10, 0, 0, 1, None)])}, "plate.a-block", "against itself"),
        ({"A_block": (PM, [(10, 0, 0, 1, None)])}, "plate.A_block", "not a plate name"),
        ({"a-block": (PM, [])}, "plate.a-block", "has no poles"),
    ],
)
def test_validation_names_the_plate_and_pole(spec: dict, where: str, words: str) -> None:
    # Common practice: a malformed model is refused with the place of each problem and a fix.
    with pytest.raises(ConfigError) as err:
        parse_model(document(spec), "m.toml")
    assert err.value.message.startswith("the rotation model m.toml has")
    assert where in err.value.message and words in err.value.message
    assert err.value.hint and err.value.exit_code == 2


def test_every_problem_is_reported_at_once() -> None:
    text = document(
        {
            "a-block": (PM, [(10, 0, 0, 1, None), (20, 95, 0, 1, None), (30, 0, 0, "x", None)]),
            "b-block": ("a-blok", [(10, 0, 0, 1, None)]),
        }
    )
    text = text.replace(
        "[[plate.b-block.pole]]\nage_ma = 10\n",
        "[[plate.b-block.pole]]\nage_ma = 10\nangel_deg = 3\n",
    )
    with pytest.raises(ConfigError) as err:
        parse_model(text, "m.toml")
    msg = err.value.message
    assert "has 4 problems" in msg
    assert "plate.a-block.pole[2]: axis_lat 95 is outside" in msg
    assert "plate.a-block.pole[3]: angle_deg 'x' is not a number" in msg
    assert "plate.b-block.pole[1]: unknown key 'angel_deg'. Did you mean 'angle_deg'?" in msg
    assert "plate.b-block: moves against 'a-blok'" in msg and "Did you mean 'a-block'?" in msg


def test_the_header_is_checked() -> None:
    body = document({"a-block": (PM, [(10, 0, 0, 1, None)])}).split("\n", 4)[4]
    with pytest.raises(ConfigError) as err:
        parse_model('[model]\nname = "x"\nframe = "magnetic"\n' + body, "m.toml")
    assert "model: citation is missing" in err.value.message
    assert "frame 'magnetic' is not one of paleomagnetic, mantle, other" in err.value.message
    with pytest.raises(ConfigError, match=r"the \[model\] table is missing"):
        parse_model(body, "m.toml")
    with pytest.raises(ConfigError, match="has no plates"):
        parse_model(HEAD, "m.toml")


# --- plate polygons -----------------------------------------------------------------------

SQUARE_A = [[[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]]
SQUARE_B = [[[10, 0], [20, 0], [20, 10], [10, 10], [10, 0]]]  # shares an edge with A
TRIANGLE = [[[-30, -20], [-5, -25], [-12, -2], [-30, -20]]]


def collection(*items: tuple[object, list], key: str = "plate") -> dict:
    return {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {} if name is None else {key: name},
                "geometry": {"type": "Polygon", "coordinates": coords},
            }
            for name, coords in items
        ],
    }


def test_assignment_matches_shapely_contains_on_random_points(tmp_path: Path) -> None:
    # shapely Polygon.contains, point by point, as the independent reference.
    path = tmp_path / "p.geojson"
    path.write_text(
        json.dumps(collection(("arden", SQUARE_A), ("belko", SQUARE_B), ("corrin", TRIANGLE)))
    )
    polys = plates.load_polygons(path)
    rng = np.random.default_rng(7)
    lon = rng.uniform(-40, 30, 2000)
    lat = rng.uniform(-30, 15, 2000)
    got = plates.assign(lat, lon, polys)
    shapes = [
        ("arden", shapely.Polygon(SQUARE_A[0])),
        ("belko", shapely.Polygon(SQUARE_B[0])),
        ("corrin", shapely.Polygon(TRIANGLE[0])),
    ]
    want = np.array(
        [
            next((p for p, s in shapes if s.contains(shapely.Point(x, y))), "")
            for x, y in zip(lon, lat, strict=True)
        ],
        dtype=object,
    )
    np.testing.assert_array_equal(got.plate, want)
    assert got.n_unassigned == int((want == "").sum()) > 0  # counted, none dropped
    assert len(got.plate) == 2000


def test_unassigned_overrides_and_shared_edge() -> None:
    polys = plates.parse_polygons(collection(("belko", SQUARE_A), ("arden", SQUARE_B)))
    got = plates.assign(
        [5, 5, 50, 5],
        [5, 10, 50, 15],
        polys,
        overrides={"terrane-x": "corrin"},
        locality_ids=["a", "b", "terrane-x", "c"],
    )
    # shared edge at lon 10 goes to the name that sorts first (documented rule: arden, the
    # polygon east of the edge); (50, 50) in no polygon but overridden
    assert got.plate.tolist() == ["belko", "arden", "corrin", "arden"]
    assert (got.n_unassigned, got.n_overridden) == (0, 1)
    with pytest.raises(ConfigError, match="is a number"):
        plates.assign([5], [5], polys, overrides={"a": 101}, locality_ids=["a"])  # type: ignore[dict-item]


def test_overlapping_polygons_of_different_plates_are_refused() -> None:
    overlap = [[[5, 5], [15, 5], [15, 15], [5, 15], [5, 5]]]
    with pytest.raises(
        ConfigError, match=r"feature 1 \(plate 'arden'\) and feature 2 \(plate 'belko'\)"
    ):
        plates.parse_polygons(collection(("arden", SQUARE_A), ("belko", overlap)))
    plates.parse_polygons(collection(("arden", SQUARE_A), ("arden", overlap)))  # same plate


def test_polygon_validation_reports_every_feature() -> None:
    bowtie = [[[0, 0], [10, 10], [10, 0], [0, 10], [0, 0]]]
    with pytest.raises(ConfigError) as err:
        plates.parse_polygons(
            collection((None, SQUARE_A), ("arden", bowtie), (7, SQUARE_B), ("Bad Name", TRIANGLE)),
            "p.geojson",
        )
    msg = err.value.message
    assert msg.startswith("p.geojson has 4 problems")
    assert "feature 1 has no 'plate' property" in msg
    assert "feature 2 (plate 'arden'): the polygon is invalid (Self-intersection" in msg
    assert "feature 3: plate 7 is a number" in msg
    assert "feature 4: plate 'Bad Name' is not a plate name" in msg
    with pytest.raises(ConfigError, match="numbered property 'plate_id'; polygons name"):
        plates.parse_polygons(collection((101, SQUARE_A), key="plate_id"))


def test_polygons_naming_a_plate_the_model_lacks_are_refused() -> None:
    polys = plates.parse_polygons(collection(("arden-blok", SQUARE_A), ("belko-block", SQUARE_B)))
    with pytest.raises(ConfigError) as err:
        plates.check_against_model(polys, model().names, "p.geojson")
    assert "'arden-blok' Did you mean 'arden-block'?" in err.value.message
    assert "belko-block" not in err.value.message
    plates.check_against_model(
        plates.parse_polygons(collection(("arden-block", SQUARE_A))), model().names, "p"
    )


# --- more closed forms and general-purpose references -------------------------------------


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
    out = reconstruct(
        [point[0], pole[0]], [point[1], pole[1]], ["arden-block"] * 2, [10.0, 10.0], m
    )
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


@pytest.mark.parametrize(
    "plate, age", [("arden-block", 73.4), ("belko-block", 50.0), ("corrin-block", 37.3)]
)
def test_reconstruction_preserves_great_circle_distances(plate: str, age: float) -> None:
    # Haversine (closed form): a rotation is an isometry of the sphere, so the distance
    # between two points on one plate at one age is unchanged, whatever the circuit.
    rng = np.random.default_rng(len(plate) + int(age))
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
        out = reconstruct(lat, lon, np.full(200, "arden-block"), np.full(200, age), m)
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


# "belko" crosses the antimeridian (drawn 170…190, as the module docstring says); "arden" is
# drawn in ordinary longitudes (−170…−160) and shares the edge lon 190 = −170 with it.
ACROSS = [[[170, -10], [190, -10], [190, 10], [170, 10], [170, -10]]]
EAST_OF_IT = [[[-170, -10], [-160, -10], [-160, 10], [-170, 10], [-170, -10]]]


def test_point_in_polygon_across_the_antimeridian() -> None:
    polys = plates.parse_polygons(collection(("belko", ACROSS), ("arden", EAST_OF_IT)))
    got = plates.assign([0.0, 0.0, 0.0, 0.0, 30.0], [-175.0, 175.0, 180.0, -180.0, 175.0], polys)
    assert got.plate.tolist() == ["belko", "belko", "belko", "belko", ""]

    # shapely on the unwrapped geometry (lon in 160…200, both plates drawn there; closed sets
    # via intersects) as the independent reference, on random points given in −180…180.
    rng = np.random.default_rng(5)
    n = 3000
    ulon = rng.uniform(160, 200, n)
    lat = rng.uniform(-15, 15, n)
    lon = (ulon + 180) % 360 - 180
    shapes = [
        ("arden", shapely.Polygon([(x + 360, y) for x, y in EAST_OF_IT[0]])),
        ("belko", shapely.Polygon(ACROSS[0])),
    ]
    want = np.array(
        [
            next((p for p, s in shapes if s.intersects(shapely.Point(x, y))), "")
            for x, y in zip(ulon, lat, strict=True)
        ],
        dtype=object,
    )
    got = plates.assign(lat, lon, polys)
    np.testing.assert_array_equal(got.plate, want)
    assert {"arden", "belko", ""} <= set(want.tolist())


def test_antimeridian_boundary_points_follow_the_documented_rule() -> None:
    # Module docstring: closed sets (an edge point belongs to its polygon) and a point on an
    # edge shared by two plates goes to the name that sorts first.
    polys = plates.parse_polygons(collection(("belko", ACROSS), ("arden", EAST_OF_IT)))
    lat = [10.0, -10.0, 0.0, 0.0, 5.0, 10.0, 0.0]
    lon = [-175.0, 175.0, 170.0, -170.0, 190.0 - 360.0, -170.0, -160.0]
    got = plates.assign(lat, lon, polys)
    # top edge, bottom edge, west edge of belko; shared edge (twice, once a corner) → arden;
    # east edge of arden
    assert got.plate.tolist() == ["belko", "belko", "belko", "arden", "arden", "arden", "arden"]


def test_reconstruction_across_the_antimeridian_through_polygons_and_model() -> None:
    # Points either side of 180° on the antimeridian plate rotate with it: scipy as reference.
    polys = plates.parse_polygons(collection(("arden-block", ACROSS)))
    lat, lon = np.array([1.0, -2.0, 3.0]), np.array([179.5, -179.5, 180.0])
    got = plates.assign(lat, lon, polys)
    m = one_plate(10, 175, 25, 30)
    out = reconstruct(lat, lon, got.plate, np.full(3, 30.0), m)
    want = euler_rotation(10, 175, 25).apply(rotations.unit_vectors(lat, lon))
    np.testing.assert_allclose(out.paleolat, rotations.lat_lon(want)[0], atol=1e-12)
