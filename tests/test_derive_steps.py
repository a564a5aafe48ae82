"""Derive's building blocks: a step's stored map gives the value after it, chains hash
their steps, and settings hash per setting and keep keys they do not know."""

from __future__ import annotations

import hashlib
import json

import pytest
from strata13.compile.derive.settings import Settings
from strata13.compile.derive.steps import IDENTITY, Step, chain_id, value_after


def test_value_after_applies_the_stored_affine_map() -> None:
    # VSMOW→VPDB with the IUPAC-2014 relation δ(VPDB) = 0.97001 δ(VSMOW) − 29.99
    # (Brand et al. 2014, Pure Appl. Chem. 86, 425; cited from memory)
    step = Step("δ18O VSMOW → VPDB", "linear", "IUPAC", maps=(0.97001, -29.99)).as_dict()
    assert value_after(step, 30.0) == pytest.approx(0.97001 * 30.0 - 29.99, abs=1e-12)
    assert value_after(Step("x", "identity", "", maps=IDENTITY).as_dict(), 1.5) == 1.5
    # a correction sets the value, whatever it was
    assert value_after(Step("correction", "set", "", maps=(0.0, -2.5)).as_dict(), 9.0) == -2.5


def test_a_step_without_a_map_says_nothing_about_the_value_after() -> None:
    assert value_after(Step("age model", "draws", "ties").as_dict(), 1.0) is None
    assert value_after(Step("x", "identity", "", maps=IDENTITY).as_dict(), None) is None


def test_steps_round_trip_through_their_stored_form() -> None:
    step = Step("age model", "m", "s", {"n": 3}, flags=("f",), extra={"ties": ["a", "b"]})
    stored = json.loads(json.dumps(step.as_dict()))
    assert stored["ties"] == ["a", "b"] and "size_permil" not in stored
    assert Step.from_dict(stored) == step


def test_chain_ids_are_the_sha256_of_the_sorted_json() -> None:
    steps = [Step("reported on VPDB", "as reported", "authors", maps=IDENTITY).as_dict()]
    text = json.dumps(steps, sort_keys=True, ensure_ascii=False)
    assert chain_id(steps) == (hashlib.sha256(text.encode()).hexdigest()[:16], text)


def test_settings_hash_per_setting_and_keep_unknown_keys() -> None:
    base = Settings()
    other = base.but(age_extrapolation=True)
    changed = {k for k in base.hashes() if base.hashes()[k] != other.hashes().get(k)}
    assert changed == {"age_extrapolation"} and base.hash() != other.hash()
    kept = Settings.from_stored({"time_scale": "ICS2012", "a_later_setting": 1})
    assert kept.time_scale == "ICS2012" and kept.stored()["a_later_setting"] == 1
    assert Settings.from_stored(kept.stored()) == kept
    with pytest.raises(AttributeError):  # frozen: a change is a new value
        base.time_scale = "ICS2012"  # type: ignore[misc]


def test_derive_changes_only_the_columns_the_schema_declares_derived(demo_sheets) -> None:
    from strata13.compile.ages.ties import ties_table
    from strata13.compile.check.validate import prepare
    from strata13.compile.derive.engine import derive
    from strata13.compile.read.mapping import load_mapping
    from strata13.schemas.records import DERIVED, REPORTED

    mapping = load_mapping(demo_sheets / "quillar_2011.toml")
    prepared = prepare(mapping)
    out = derive(prepared.records, Settings(), ties_table(mapping.ties)).table
    before, after = prepared.records, out
    assert after.column_names == before.column_names
    changed = {c for c in before.column_names if not before.column(c).equals(after.column(c))}
    assert changed and changed <= DERIVED  # something was derived, nothing reported moved
    assert set(REPORTED) | DERIVED == set(before.column_names) and not set(REPORTED) & DERIVED
