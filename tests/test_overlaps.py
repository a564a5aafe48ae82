"""Duplicate finder across sources, decisions file and the view-level exclusion set.

Every locality, source, sample and value below is invented. External bases are named at
each check: the VSMOW→VPDB δ18O relation of IUPAC/CIAAW (Brand et al. 2014: δ18O_VPDB =
0.97001·δ18O_VSMOW − 29.99 ‰, and its inverse 1.03092·δ18O_VPDB + 30.92 ‰), the
international foot (exactly 0.3048 m), and the haversine formula on a sphere of radius
6371.0 km (closed forms). Scores are checked against the rule stated in the module
docstring (the definition under test).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from strata13.compile.integrity.overlaps import (
    COLUMNS,
    EARTH_RADIUS_KM,
    Decision,
    duplicates_to_drop,
    find_overlaps,
    haversine_km,
    normalise_name,
    read_decisions,
)

from strata13.errors import ConfigError, DomainError, InputFileError, OptionError

FOOT_M = 0.3048  # international foot, exact by definition (1959 agreement)


def vsmow_to_vpdb(d18o_vsmow: np.ndarray) -> np.ndarray:
    """IUPAC/CIAAW relation (Brand et al. 2014), as the store's harmonisation applies it."""
    return 0.97001 * d18o_vsmow - 29.99


def vpdb_to_vsmow(d18o_vpdb: np.ndarray) -> np.ndarray:
    """Inverse relation as printed by Brand et al. 2014 (1.03092, 30.92)."""
    return 1.03092 * d18o_vpdb + 30.92


def pairs_of(out: pd.DataFrame) -> list[tuple[str, str]]:
    return list(zip(out.record_a, out.record_b, strict=True))


def frame(**cols) -> pd.DataFrame:
    """Records with defaults: one locality, heights, no coordinates."""
    n = len(next(iter(cols.values())))
    base = {
        "record_id": [f"r{i}" for i in range(n)],
        "source_id": ["src_a"] * n,
        "locality_id": ["quillar"] * n,
        "locality_name": ["Quillar Ridge"] * n,
        "position_kind": ["height"] * n,
    }
    base.update(cols)
    return pd.DataFrame(base)


# ------------------------------------------------------------------ the re-publication case


@pytest.fixture(scope="module")
def republished() -> pd.DataFrame:
    """30 records of an original source, their re-publication, and a neighbouring source.

    * ``field_1994`` measured heights in feet (2.0 ft spacing; stored in metres, exact
      conversion) and δ18O on VPDB;
    * ``recomp_2011`` re-publishes them with heights in metres rounded to 0.01 m and δ18O
      on VSMOW rounded to 0.01 ‰ (harmonised back to VPDB by the store), its own locality
      id and sample labels;
    * ``nearby_2003`` sampled the same ridge 0.3 m above each of those heights (within the
      0.5 m tolerance) with δ13C 0.6 ‰ heavier (beyond the 0.15 ‰ tolerance).
    """
    rng = np.random.default_rng(7)
    k = np.arange(30)
    feet = 2.0 * k + 0.5
    d13c = np.round(rng.uniform(-1.0, 3.0, 30), 2)
    d18o = np.round(rng.uniform(-6.0, -1.0, 30), 2)
    a = frame(
        record_id=[f"fa{i:02d}" for i in k],
        source_id=["field_1994"] * 30,
        position_m=feet * FOOT_M,
        d13c_carb=d13c,
        d18o_carb=d18o,
        sample_id=[f"QR-{i:02d}" for i in k],
        lat=-14.5,
        lon=-70.25,
    )
    reported_vsmow = np.round(vpdb_to_vsmow(d18o), 2)
    b = frame(
        record_id=[f"rb{i:02d}" for i in k],
        source_id=["recomp_2011"] * 30,
        locality_id=["rc-loc-4"] * 30,
        locality_name=["quillar ridge"] * 30,
        position_m=np.round(feet * FOOT_M, 2),
        d13c_carb=d13c,
        d18o_carb=vsmow_to_vpdb(reported_vsmow),
        sample_id=[f"Q{i}" for i in k],
        lat=-14.5,
        lon=-70.25,
    )
    c = frame(
        record_id=[f"nc{i:02d}" for i in k],
        source_id=["nearby_2003"] * 30,
        locality_id=["quillar"] * 30,
        position_m=feet * FOOT_M + 0.3,
        d13c_carb=d13c + 0.6,
        d18o_carb=d18o,
        sample_id=[f"N{i}" for i in k],
        lat=-14.5,
        lon=-70.25,
    )
    return pd.concat([a, b, c], ignore_index=True)


def test_republication_setup_is_within_rounding(republished: pd.DataFrame) -> None:
    """Basis: the exact foot and the IUPAC δ18O relation; the re-published values differ
    from the originals by rounding only (< 0.01 m, < 0.01 ‰)."""
    a = republished[republished.source_id == "field_1994"].reset_index(drop=True)
    b = republished[republished.source_id == "recomp_2011"].reset_index(drop=True)
    assert (abs(a.position_m - b.position_m) <= 0.005 + 1e-12).all()
    assert (abs(a.d18o_carb - b.d18o_carb) < 0.01).all()
    assert (abs(a.d18o_carb - b.d18o_carb) > 0).any()  # the round trip is not exact


def test_republication_matched_30_of_30_and_no_false_pairs(republished: pd.DataFrame) -> None:
    """Basis: the invented scenario above — every re-published record pairs with its
    original, none with the neighbouring source whose values differ beyond tolerance."""
    out = find_overlaps(republished)
    assert list(out.columns) == list(COLUMNS)
    assert len(out) == 30
    assert set(out.source_a) == {"field_1994"} and set(out.source_b) == {"recomp_2011"}
    assert sorted(pairs_of(out)) == [(f"fa{i:02d}", f"rb{i:02d}") for i in range(30)]
    assert not (out.source_a.eq("nearby_2003") | out.source_b.eq("nearby_2003")).any()
    assert out.score.between(0.0, 1.0).all()
    row = out[out.record_a == "fa07"].iloc[0]
    assert "same locality name 'Quillar Ridge' / 'quillar ridge'" in row.reasons
    assert "sample ids QR-07 / Q7" in row.reasons
    assert "δ18O" in row.reasons and "positions" in row.reasons


def test_neighbour_alone_is_not_matched(republished: pd.DataFrame) -> None:
    """Basis: the tolerance rule — positions within 0.5 m are not enough when δ13C differs
    by 0.6 ‰ (> 0.15 ‰)."""
    out = find_overlaps(republished, source="nearby_2003")
    assert out.empty and list(out.columns) == list(COLUMNS)


# ------------------------------------------------------------------ distance


def test_haversine_one_degree_of_latitude() -> None:
    """Basis: closed form — one degree of a great circle is 2πR/360 = 111.19 km for
    R = 6371.0 km (common convention)."""
    expected = 2 * math.pi * 6371.0 / 360
    assert EARTH_RADIUS_KM == 6371.0
    assert haversine_km(10.0, 20.0, 11.0, 20.0) == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(111.19, abs=0.005)
    assert haversine_km(0.0, 0.0, 0.0, 1.0) == pytest.approx(expected, rel=1e-12)
    assert haversine_km(0.0, 30.0, 90.0, -100.0) == pytest.approx(math.pi * 6371.0 / 2)


def test_haversine_matches_spherical_law_of_cosines() -> None:
    """Basis: the spherical law of cosines (closed form), well conditioned at 100s of km."""
    lat1, lon1, lat2, lon2 = 45.0, 7.5, 41.2, 12.9
    p1, p2, dl = map(math.radians, (lat1, lat2, lon2 - lon1))
    central = math.acos(math.sin(p1) * math.sin(p2) + math.cos(p1) * math.cos(p2) * math.cos(dl))
    assert haversine_km(lat1, lon1, lat2, lon2) == pytest.approx(6371.0 * central, rel=1e-9)


def test_coordinates_link_differently_named_localities() -> None:
    """Basis: haversine distance against coord_tol_km; ~3.3 km apart pairs, ~11 km not."""
    recs = frame(
        record_id=["a1", "b1", "c1"],
        source_id=["src_a", "src_b", "src_c"],
        locality_id=["l1", "l2", "l3"],
        locality_name=["Quillar Ridge", "Cerro Blanco", "Pampa Honda"],
        lat=[-14.50, -14.53, -14.60],
        lon=[-70.25, -70.25, -70.25],
        position_m=[3.0, 3.0, 3.0],
        d13c_carb=[1.0, 1.0, 1.0],
    )
    out = find_overlaps(recs)
    assert pairs_of(out) == [("a1", "b1")]
    km = haversine_km(-14.50, -70.25, -14.53, -70.25)
    assert f"{km:.2f} km apart" in out.reasons[0]


def test_aliases_and_names_link_localities() -> None:
    """Basis: the locality rule — names equal ignoring case and punctuation, or aliases."""
    assert normalise_name("Quillar-Ridge  (Sect. 2)") == normalise_name("quillar ridge sect 2")
    assert normalise_name("Cañón") == "canon"
    recs = frame(
        record_id=["a1", "b1"],
        source_id=["src_a", "src_b"],
        locality_id=["l1", "l2"],
        locality_name=["Quillar Ridge", "Cerro Quillar"],
        position_m=[3.0, 3.0],
        d13c_carb=[1.0, 1.0],
    )
    assert find_overlaps(recs).empty
    out = find_overlaps(recs, aliases={"quillar ridge": {"Cerro Quillar"}})
    assert len(out) == 1 and "linked by aliases" in out.reasons[0]


# ------------------------------------------------------------------ tolerances and score


def test_tolerance_edges_and_position_kinds() -> None:
    """Basis: the tolerance rule — |Δ| ≤ tolerance lists a pair (decimal 0.15 exactly,
    despite binary rounding), 0.16 does not; a height never pairs with a depth; a range
    is compared by its midpoint."""
    recs = frame(
        record_id=["a1", "b1", "a2", "b2", "a3", "b3", "a4", "b4"],
        source_id=["src_a", "src_b"] * 4,
        position_m=[0.0, 0.5, 10.0, 10.0, 20.0, 20.0, np.nan, 30.05],
        top_m=[np.nan] * 6 + [29.9, np.nan],
        base_m=[np.nan] * 6 + [30.1, np.nan],
        position_kind=["height"] * 4 + ["height", "depth", "height", None],
        d13c_carb=[1.45, 1.30, 1.45, 1.29, 2.0, 2.0, 0.5, 0.5],
    )
    out = find_overlaps(recs)
    assert sorted(pairs_of(out)) == [("a1", "b1"), ("a4", "b4")]
    assert out.set_index("record_a").loc["a4", "position_a_m"] == pytest.approx(30.0)


def test_score_follows_the_documented_rule() -> None:
    """Basis: the module's rule — weighted mean of closeness (position 1, δ13C 2, δ18O 1,
    locality 1, equal sample id 1); declared lineage halves the distance to 1."""
    recs = frame(
        record_id=["a1", "b1"],
        source_id=["src_a", "src_b"],
        position_m=[5.0, 5.25],
        d13c_carb=[1.0, 1.03],
        d18o_carb=[-2.0, np.nan],
    )
    base = (1.0 + (1 - 0.25 / 0.5) + 2 * (1 - 0.03 / 0.15)) / 4  # δ18O in one record only
    out = find_overlaps(recs)
    assert out.score[0] == pytest.approx(base, abs=1e-6)
    assert "δ18O in one record only" in out.reasons[0]
    lin = find_overlaps(recs, declared={"src_b": {"src_a"}})
    assert lin.score[0] == pytest.approx(base + 0.5 * (1 - base), abs=1e-6)
    assert lin.score[0] > out.score[0]
    assert "declared lineage: src_b re-publishes src_a" in lin.reasons[0]
    same_id = find_overlaps(recs.assign(sample_id=["Q-7", "q7"]))
    assert same_id.score[0] == pytest.approx((4 * base + 1) / 5, abs=1e-6)
    assert "same sample id 'Q-7'" in same_id.reasons[0]


def test_declared_lineage_raises_scores_and_orients_pairs(republished: pd.DataFrame) -> None:
    """Basis: the module's rule — lineage (declared or a record's original source) raises
    every imperfect score and puts the original as record_a."""
    plain = find_overlaps(republished).set_index("record_a")
    decl = find_overlaps(republished, declared={"recomp_2011": {"field_1994"}})
    decl = decl.set_index("record_a")
    assert (decl.score >= plain.score.loc[decl.index]).all()
    imperfect = plain.score < 1
    assert imperfect.any()
    assert (decl.score[imperfect] > plain.score[imperfect]).all()
    # a re-publisher whose id sorts first is still record_b when the lineage is known
    renamed = republished.replace({"source_id": {"recomp_2011": "aa_recomp"}})
    unknown = find_overlaps(renamed)
    assert set(unknown.source_a) == {"aa_recomp"}
    via_record = find_overlaps(
        renamed.assign(
            original_source_id=np.where(renamed.source_id == "aa_recomp", "field_1994", None)
        )
    )
    assert set(via_record.source_a) == {"field_1994"}
    assert via_record.reasons.str.contains("names field_1994 as its original source").all()


# ------------------------------------------------------------------ one-to-one, filter, order


def test_one_to_one_keeps_the_best() -> None:
    """Basis: the one-to-one rule — a record pairs with at most one record per other
    source, the best score winning."""
    recs = frame(
        record_id=["a1", "b1", "b2", "b3", "c1", "c2"],
        source_id=["src_a", "src_b", "src_b", "src_b", "src_c", "src_c"],
        position_m=[10.0, 9.9, 10.0, 10.1, 10.02, 10.03],
        d13c_carb=[2.0, 2.0, 2.01, 2.0, 2.0, 2.0],
    )
    out = find_overlaps(recs)
    pairs = set(pairs_of(out))
    assert ("a1", "b2") in pairs and ("a1", "c1") in pairs
    assert not {("a1", "b1"), ("a1", "b3"), ("a1", "c2")} & pairs
    assert not out.duplicated(["record_a", "source_b"]).any()
    assert not out.duplicated(["record_b", "source_a"]).any()


def test_one_to_one_on_dense_random_sections() -> None:
    """Basis: the one-to-one rule on invented dense data (many candidates per record)."""
    rng = np.random.default_rng(11)
    n = 600
    recs = frame(
        record_id=[f"x{i:04d}" for i in range(n)],
        source_id=rng.choice(["s1", "s2", "s3", "s4"], n),
        position_m=rng.uniform(0, 20, n).round(2),
        d13c_carb=rng.normal(1.0, 0.1, n).round(2),
    )
    out = find_overlaps(recs)
    assert len(out) > 50
    assert (out.source_a != out.source_b).all()
    assert not out.duplicated(["record_a", "source_b"]).any()
    assert not out.duplicated(["record_b", "source_a"]).any()
    assert (abs(out.position_a_m - out.position_b_m) <= 0.5 + 1e-9).all()
    assert (abs(out.d13c_a - out.d13c_b) <= 0.15 + 1e-9).all()


def test_source_filter(republished: pd.DataFrame) -> None:
    """Basis: the filter's definition — only pairs involving the named source."""
    three = pd.concat(
        [
            republished,
            republished[republished.source_id == "field_1994"].assign(
                source_id="copy_2020", record_id=lambda d: "cp" + d.record_id.str[2:]
            ),
        ],
        ignore_index=True,
    )
    every = find_overlaps(three)
    assert len(every) == 90
    only = find_overlaps(three, source="copy_2020")
    assert len(only) == 60
    assert (only.source_a.eq("copy_2020") | only.source_b.eq("copy_2020")).all()
    with pytest.raises(DomainError) as err:
        find_overlaps(three, source="no_such_source")
    assert err.value.hint


def test_order_is_deterministic(republished: pd.DataFrame) -> None:
    """Basis: the ordering rule — score (high first), then record ids, whatever the input
    order."""
    out = find_overlaps(republished)
    shuffled = find_overlaps(republished.sample(frac=1.0, random_state=3))
    pd.testing.assert_frame_equal(out, shuffled)
    expected = out.sort_values(
        ["score", "record_a", "record_b"], ascending=[False, True, True]
    ).reset_index(drop=True)
    pd.testing.assert_frame_equal(out, expected)


def test_unusable_records_and_bad_options() -> None:
    """Basis: the input rules — records without a position or δ13C are counted, not
    compared; tolerances must be positive; required columns are named."""
    recs = frame(
        record_id=["a1", "b1", "b2"],
        source_id=["src_a", "src_b", "src_b"],
        position_m=[1.0, 1.0, np.nan],
        d13c_carb=[0.5, np.nan, 0.5],
    )
    out = find_overlaps(recs)
    assert out.empty and out.attrs["left_out"] == 2
    with pytest.raises(OptionError):
        find_overlaps(recs, position_tol_m=0)
    with pytest.raises(OptionError):
        find_overlaps(recs, value_tol_permil=-0.1)
    with pytest.raises(DomainError, match="d13c_carb"):
        find_overlaps(recs.drop(columns="d13c_carb"))


# ------------------------------------------------------------------ decisions


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "decisions.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_read_decisions(tmp_path: Path) -> None:
    """Basis: the file format defined here (header record_a,record_b,decision,note)."""
    path = write(
        tmp_path,
        "\ufeffrecord_a,record_b,decision,note\n"
        "fa01,rb01,confirm,same sample QR-01\n"
        "\n# checked in the field notebook\n"
        'fa02,rb02, Reject ,"heights differ, see notes"\n'
        "fa01,rb01,confirm,again\n",
    )
    got = read_decisions(path)
    assert got == [
        Decision("fa01", "rb01", "confirm", "same sample QR-01"),
        Decision("fa02", "rb02", "reject", "heights differ, see notes"),
    ]
    short = write(tmp_path, "record_a,record_b,decision\nx,y,confirm\n")
    assert read_decisions(short) == [Decision("x", "y", "confirm", "")]


def test_read_decisions_names_every_bad_line(tmp_path: Path) -> None:
    """Basis: the file format — each bad line is named with its number, all at once."""
    path = write(
        tmp_path,
        "record_a,record_b,decision,note\n"
        "a,b,confirm,\n"
        "c,d,maybe,\n"
        ",e,confirm,\n"
        "f,f,reject,\n"
        "b,a,reject,\n"
        "g,h,confirm,n,extra\n",
    )
    with pytest.raises(ConfigError) as err:
        read_decisions(path)
    msg = str(err.value)
    assert "5 bad line(s)" in msg
    assert "line 3: decision 'maybe'" in msg
    for n in (4, 5, 6, 7):
        assert f"line {n}:" in msg
    assert "contradicts confirm on line 2" in msg
    assert err.value.hint


def test_read_decisions_bad_header_and_missing_file(tmp_path: Path) -> None:
    """Basis: the file format — a wrong header is a configuration error; a missing file an
    input-file error."""
    with pytest.raises(ConfigError, match="header"):
        read_decisions(write(tmp_path, "a,b,c,d\nx,y,confirm,\n"))
    with pytest.raises(InputFileError):
        read_decisions(tmp_path / "absent.csv")


def test_duplicates_to_drop() -> None:
    """Basis: the exclusion rule — keep record_a, drop record_b, unless record_a's source
    is known to re-publish record_b's; rejected pairs drop nothing; a cycle of
    confirmations keeps one record."""
    decisions = [
        Decision("fa01", "rb01", "confirm", ""),
        Decision("fa02", "rb02", "reject", ""),
        ("rb03", "fa03", "confirm", ""),
    ]
    assert duplicates_to_drop(decisions) == {"rb01", "fa03"}
    told = duplicates_to_drop(
        decisions,
        source_of={
            "rb03": "recomp_2011",
            "fa03": "field_1994",
            "fa01": "field_1994",
            "rb01": "recomp_2011",
        },
        declared={"recomp_2011": {"field_1994"}},
    )
    assert told == {"rb01", "rb03"}
    cycle = [("x", "y", "confirm", ""), ("y", "z", "confirm", ""), ("z", "x", "confirm", "")]
    dropped = duplicates_to_drop(cycle)
    assert dropped == {"y", "z"}
    assert duplicates_to_drop([]) == set()
    with pytest.raises(OptionError):
        duplicates_to_drop([("x", "y", "maybe", "")])
