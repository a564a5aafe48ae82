"""Four screen states and the rule set's minimum evidence ([[evidence]]).

The state logic is checked against a brute-force reference written here record by record
(plain Python over the outcome words, independent of the vectorised numpy in
``screening/overall.py``), on random outcome matrices and on a hand-made truth table.
"""

from __future__ import annotations

import itertools

import numpy as np
import pyarrow as pa
import pytest
from strata13.compile.screening.evaluate import OUTCOMES, evaluate
from strata13.compile.screening.overall import STATES, overall
from strata13.compile.screening.rules import load_rules, parse_canonical, parse_rules

from strata13.errors import ConfigError

HEADER = '[ruleset]\nname = "t"\nversion = "1"\ndescription = "test rules"\n'
COMMON = 'description = "Rule for a test."\ncitation = "common practice"\nconfidence = "test"\n'


def rule(name: str, field: str, severity: str = "fail") -> str:
    return (
        f'\n[[rule]]\nname = "{name}"\n{COMMON}severity = "{severity}"\n'
        f'kind = "value-limit"\nfield = "{field}"\npass_if = "below"\nlimit = 100\nunit = "ppm"\n'
    )


RULES = rule("mn-rule", "mn_ppm") + rule("fe-rule", "fe_ppm") + rule("sr-warn", "sr_ppm", "warn")
EVIDENCE = """
[[evidence]]
component = ["bulk", "micrite"]
requires = [["mn-rule", "fe-rule"], "sr-warn"]

[[evidence]]
component = ["brachiopod"]
requires = ["fe-rule"]
"""


def ruleset(extra: str = EVIDENCE):
    return parse_rules(HEADER + RULES + extra, "test.toml")


def reference_state(words: list[str], component: str | None, rs, untested_passes: bool) -> str:
    """The documented policy, one record at a time."""
    decided = {"pass", "warn", "fail"} | ({"untested"} if untested_passes else set())
    by_rule = dict(zip([r.name for r in rs.rules], words, strict=True))
    if "fail" in words:
        return "fail"
    entry = next((e for e in rs.evidence if component in e.components), None)
    entry = entry or next((e for e in rs.evidence if not e.components), None)
    if entry is None:
        met = any(w in decided for w in words)
    else:
        met = all(any(by_rule[r] in decided for r in group) for group in entry.requires)
    if not met:
        return "untested"
    return "warn" if "warn" in words else "pass"


@pytest.mark.parametrize("untested_passes", [False, True])
@pytest.mark.parametrize(
    "extra",
    [EVIDENCE, "", EVIDENCE + '\n[[evidence]]\nrequires = ["mn-rule"]\n'],
    ids=["evidence", "none", "catch-all"],
)
def test_states_equal_a_record_by_record_reference(extra: str, untested_passes: bool) -> None:
    rs = ruleset(extra)
    rng = np.random.default_rng(7)
    n = 3000
    m = rng.integers(0, len(OUTCOMES), size=(len(rs.rules), n)).astype(np.int8)
    comps = rng.choice(np.array(["bulk", "micrite", "brachiopod", "ooid", None]), n)
    state, reason = overall(m, rs, pa.array(comps.tolist(), pa.string()), untested_passes)
    got = [STATES[s] for s in state]
    want = [
        reference_state([OUTCOMES[c] for c in m[:, j]], comps[j], rs, untested_passes)
        for j in range(n)
    ]
    assert got == want
    assert set(got) == set(STATES)  # every state occurs, so the comparison means something
    texts = reason.cast(pa.string()).to_pylist()
    assert all(t.startswith(s + ":") for t, s in zip(texts, got, strict=True))


def test_reasons_name_the_failing_warning_and_missing_rules() -> None:
    rs = ruleset()
    t = pa.table(
        {
            "record_id": ["r0", "r1", "r2", "r3", "r4", "r5"],
            "source_id": ["s"] * 6,
            "section_id": ["x"] * 6,
            "component": ["bulk", "bulk", "bulk", "bulk", "brachiopod", "ooid"],
            # mn-rule: Mn < 100 passes; fe-rule: Fe < 100; sr-warn (warn): Sr < 100
            "mn_ppm": [50.0, 500.0, None, None, None, None],
            "fe_ppm": [None, None, 50.0, None, 50.0, None],
            "sr_ppm": [50.0, 50.0, 500.0, 50.0, None, None],
        }
    )
    _, ov, _ = evaluate(t, rs)
    states = ov.column("screen").to_pylist()
    why = ov.column("reason").to_pylist()
    assert states == ["pass", "fail", "warn", "untested", "pass", "untested"]
    assert why[1].startswith("fail: mn-rule")
    assert why[2].startswith("warn: sr-warn")
    # r3 has sr-warn tested but neither mn-rule nor fe-rule: the missing group is named
    assert "needs one of mn-rule, fe-rule" in why[3] and "needs sr-warn" not in why[3]
    # ooid has no entry: one applicable rule is enough, and none could be tested
    assert why[5] == "untested: no applicable rule could be tested"


def test_rules_outside_their_scope_do_not_count_as_evidence() -> None:
    text = (
        HEADER
        + rule("mn-rule", "mn_ppm")
        + rule("fe-rule", "fe_ppm").replace(
            "limit = 100\n", "limit = 100\nscope = { age_max_ma = 100 }\n"
        )
        + '\n[[evidence]]\ncomponent = ["bulk"]\nrequires = ["mn-rule", "fe-rule"]\n'
    )
    rs = parse_rules(text, "t.toml")
    t = pa.table(
        {
            "record_id": ["r0"],
            "source_id": ["s"],
            "section_id": ["x"],
            "component": ["bulk"],
            "age_ma": [183.0],
            "mn_ppm": [50.0],
            "fe_ppm": [50.0],
        }
    )
    _, ov, _ = evaluate(t, rs)
    assert ov.column("screen").to_pylist() == ["untested"]
    assert "needs fe-rule" in ov.column("reason").to_pylist()[0]


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        ('\n[[evidence]]\ncomponent = ["bulk"]\nrequires = ["mn-rul"]\n', "Did you mean 'mn-rule'"),
        (
            '\n[[evidence]]\ncomponent = ["bulk"]\nrequires = ["mn-rule"]\n'
            '\n[[evidence]]\ncomponent = ["bulk"]\nrequires = ["fe-rule"]\n',
            "already in [[evidence]] #1",
        ),
        (
            '\n[[evidence]]\nrequires = ["mn-rule"]\n\n[[evidence]]\nrequires = ["fe-rule"]\n',
            "already covers every other component",
        ),
        (
            '\n[[evidence]]\ncomponent = ["bulk"]\nrequire = ["mn-rule"]\n',
            "Did you mean 'requires'",
        ),
        ('\n[[evidence]]\ncomponent = ["bulk"]\nrequires = []\n', "non-empty list"),
        ('\n[[evidence]]\ncomponent = ["bulkk"]\nrequires = ["mn-rule"]\n', "component vocabulary"),
        ('\n[[evidence]]\ncomponent = ["bulk"]\nrequires = [3]\n', "not a rule name"),
    ],
)
def test_bad_evidence_is_refused_in_one_sentence(extra: str, message: str) -> None:
    with pytest.raises(ConfigError) as err:
        parse_rules(HEADER + RULES + extra, "t.toml")
    assert message in str(err.value) and "t.toml: [[evidence]]" in str(err.value)


def test_evidence_is_part_of_the_hash_and_survives_the_store_round_trip() -> None:
    with_e, without = ruleset(), ruleset("")
    assert with_e.sha256 != without.sha256
    assert "evidence" not in without.canonical()  # older rule sets keep their hash
    again = parse_canonical(with_e.canonical_text())
    assert again.sha256 == with_e.sha256 and set(again.evidence) == set(with_e.evidence)


def test_the_shipped_rule_set_declares_evidence_for_every_screened_carbonate() -> None:
    rs = load_rules()
    screened = set(itertools.chain.from_iterable(r.scope.component for r in rs.rules))
    covered = set(itertools.chain.from_iterable(e.components for e in rs.evidence))
    # cements fail outright (no-cements), so they need no evidence entry
    assert screened - covered == {"cement"}
    assert all(e.citation == "common practice" for e in rs.evidence)


def test_cross_plot_titles_keep_a_correlation_near_one_from_reading_as_one() -> None:
    from strata13.compile.screening.plots import _line

    rule = {"rule": "d13c-d18o-covariance", "outcome": "warn"}
    line = _line(rule | {"r": 0.996042, "r2": 0.9921, "n": 16, "n_eff": 3.87, "p": 0.0055})
    head, numbers = line.split("\n")
    assert head == "rule d13c-d18o-covariance: warned (kept)"  # the rule and its outcome
    assert numbers.startswith("r = 0.996, r² = 0.99,")
    line = _line(rule | {"r": -0.99996, "r2": 0.99992, "n": 9, "n_eff": 9.0, "p": 0.01})
    assert line.split("\n")[1].startswith("r = −0.99996, r² = 0.9999,")  # a true minus
