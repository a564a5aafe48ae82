"""Harmonisation arithmetic against published values (schemas/data and
../shared-style reference values cited per test)."""

from __future__ import annotations

import numpy as np
import pytest
from strata13.compile.harmonise import acid, anchors, oxygen, ratios, runs
from strata13.schemas.materials import shipped_materials

from strata13.errors import DomainError


def value(material: str, value_set: str, field: str) -> float:
    row = next(
        m for m in shipped_materials() if m.material == material and m.value_set == value_set
    )
    return getattr(row, field)


def test_table_values_are_exactly_as_published() -> None:
    # IAEA NBS 19 sheet (by definition of VPDB); IAEA-603 characterization paper;
    # IAEA NBS 18 sheet; Coplen et al. 2006 (LSVEC −46.6 exact); Qi et al. 2003 (−46.48)
    assert value("NBS-19", "VPDB definition", "d13c") == 1.95
    assert value("NBS-19", "VPDB definition", "d18o") == -2.20
    assert value("IAEA-603", "IAEA 2020", "d13c") == 2.460
    assert value("IAEA-603", "IAEA 2020", "d18o") == -2.370
    assert value("NBS-18", "IAEA sheet", "d13c") == -5.014
    assert value("LSVEC", "VPDB-LSVEC 2006", "d13c") == -46.6
    assert value("LSVEC", "before 2006", "d13c") == -46.48
    # sources that disagree are both present
    assert value("NBS-18", "IAEA sheet", "d18o") == -23.2
    assert value("NBS-18", "CIAAW 2014", "d18o") == 7.20
    assert {value("IAEA-CO-1", s, "d13c") for s in ("CIAAW 2014", "IAEA sheet")} == {2.48, 2.492}


@pytest.mark.parametrize("vsmow,vpdb", [(28.65, -2.199), (7.20, -23.006)])
def test_iupac_relation_on_ciaaw_values(vsmow: float, vpdb: float) -> None:
    # CIAAW VSMOW values of NBS 19 and NBS 18 with δ18O(VPDB) = 0.97001 δ18O(VSMOW) − 29.99
    # (Brand et al. 2014): 0.97001 × 28.65 − 29.99 = −2.1987; × 7.20 − 29.99 = −23.0059
    out, step = oxygen.vsmow_to_vpdb(np.array([vsmow]))
    assert out[0] == pytest.approx(vpdb, abs=5e-4)
    assert step.parameters["a"] == 0.97001 and step.size_permil > 0


def test_oxygen_round_trip_returns_the_input() -> None:
    x = np.linspace(-40, 40, 81)
    for name in ("IUPAC-2014", "Coplen-1983", "Friedman-ONeil-1977"):
        there, _ = oxygen.vsmow_to_vpdb(x, name)
        back, _ = oxygen.vpdb_to_vsmow(there, name)
        assert np.max(np.abs(back - x)) < 1e-12


def test_run_normalisation_worked_example() -> None:
    # Worked by hand from the accepted values: IAEA-603 +2.460, NBS-18 −5.014 (IAEA sheets)
    # measured at +2.10 and −5.30: slope 7.474/7.40 = 1.0100, intercept 2.460 − 1.01×2.10
    a = {"IAEA-603": ([2.10], 2.460), "NBS-18": ([-5.30], -5.014)}
    out, step, qc = runs.normalise_run(
        "r1", np.array([-3.00, -6.0426]), a, checks={"IAEA-CO-8": ([-6.0426], -5.764)}
    )
    assert qc.slope == pytest.approx(1.0100, abs=1e-12)
    assert qc.intercept == pytest.approx(0.339, abs=1e-12)
    assert out[0] == pytest.approx(-2.691, abs=1e-9)
    assert out[1] == pytest.approx(-5.764, abs=1e-4)  # IAEA-CO-8 comes back (−5.764, IAEA)
    assert abs(qc.residuals["IAEA-CO-8"]) < 1e-4 and not qc.warnings


def test_run_qc_warns_on_a_slope_far_from_one_and_refuses_bad_runs() -> None:
    _, _, qc = runs.normalise_run("r2", np.array([0.0]), {"A": ([0.0], 0.0), "B": ([1.0], 1.2)})
    assert qc.warnings and "slope" in qc.warnings[0]
    with pytest.raises(DomainError, match="at least two"):
        runs.normalise_run("r3", np.array([0.0]), {"A": ([0.0], 0.0)})
    with pytest.raises(DomainError, match="same value"):
        runs.normalise_run("r4", np.array([0.0]), {"A": ([1.0], 0.0), "B": ([1.0], 2.0)})


def test_calcite_acid_fractionation_at_25c() -> None:
    # Kim, Coplen & Horita 2015: α = 1.01025 at 25 °C
    assert acid.alpha_calcite(25.0) == pytest.approx(1.01025, abs=5e-6)
    # the same equation at 70 °C: 1.008709 (derived in the reference values)
    assert acid.alpha_calcite(70.0) == pytest.approx(1.008709, abs=2e-6)
    _, notes = acid.alpha("calcite", 90.0)
    assert notes and "extrapolated" in notes[0]


def test_reanchoring_identity_and_round_trip() -> None:
    x = np.linspace(-50, 10, 61)
    same, step = anchors.two_point(x, (1.95, -46.6), (1.95, -46.6), ("NBS-19", "LSVEC"), "t")
    assert np.allclose(same, x, atol=1e-12) and step.size_permil == pytest.approx(0, abs=1e-12)
    new, _ = anchors.two_point(x, (1.95, -46.48), (1.95, -46.6), ("NBS-19", "LSVEC"), "t")
    back, _ = anchors.two_point(new, (1.95, -46.6), (1.95, -46.48), ("NBS-19", "LSVEC"), "t")
    assert np.max(np.abs(back - x)) < 1e-12
    # near 0 ‰ the two LSVEC values change δ13C by far less than typical precision
    near_zero, _ = anchors.two_point(
        np.array([0.0]), (1.95, -46.48), (1.95, -46.6), ("NBS-19", "LSVEC"), "t"
    )
    assert abs(near_zero[0]) < 0.01
    off, step = anchors.one_point(x, 2.46, 2.46, "IAEA-603", "t")
    assert np.allclose(off, x) and step.flags


def test_ratios_and_atom_fraction() -> None:
    # R(VPDB) 0.0111802 -> x(13C) = R/(1+R) = 1.1057 % (carbon ≈ 98.9 % 12C, 1.1 % 13C:
    # common practice); δ13C = −25 ‰ -> R = 0.0111802 × 0.975 = 0.0109007
    assert float(ratios.atom_fraction(np.array([ratios.R_VPDB_13C]))[0]) * 100 == pytest.approx(
        1.1057, abs=1e-4
    )
    assert float(ratios.delta_to_ratio(np.array([-25.0]))[0]) == pytest.approx(0.0109007, abs=1e-7)
    r = ratios.delta_to_ratio(np.array([-25.0, 0.0, 3.1]))
    assert np.allclose(ratios.ratio_to_delta(r), [-25.0, 0.0, 3.1], atol=1e-12)
    assert ratios.big_delta_13c(np.array([2.0]), np.array([-27.5]))[0] == 29.5
