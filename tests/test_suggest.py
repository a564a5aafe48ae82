"""The shared "did you mean" helper, checked against difflib (Python's standard library)."""

from __future__ import annotations

import difflib

from strata13.suggest import closest, did_you_mean


def test_the_suggestion_is_difflibs_closest_match() -> None:
    options = ["section_id", "sample_id", "position_m", "lithology"]
    want = difflib.get_close_matches("sampel_id", sorted(options), n=1, cutoff=0.6)
    assert closest("sampel_id", options) == want == ["sample_id"]
    assert did_you_mean("sampel_id", options) == " Did you mean 'sample_id'?"


def test_nothing_close_gives_no_suggestion() -> None:
    assert did_you_mean("zzzz", {"section_id", "lithology"}) == ""
    assert closest("zzzz", []) == []


def test_a_lower_cutoff_admits_looser_matches() -> None:
    assert closest("heigth", ["height_ft"], cutoff=0.9) == []
    assert closest("heigth", ["height_ft"], cutoff=0.5) == ["height_ft"]
