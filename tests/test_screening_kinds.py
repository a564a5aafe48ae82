"""The registry of screening-rule kinds: every kind a rule file may name is parsed and
screened by its own entry, and a kind left out of the registry is refused at once."""

from __future__ import annotations

import tomllib
import typing

import numpy as np
import pyarrow as pa
import pytest
from strata13.compile.screening.evaluate import evaluate
from strata13.compile.screening.kinds import _ENTRIES, KINDS, Kind, _registry, kind_of
from strata13.compile.screening.rules import (
    Rule,
    RuleSet,
    Scope,
    Spec,
    default_rules_path,
    load_rules,
    parse_canonical,
    parse_rules,
)

from strata13.errors import ConfigError

HEADER = '[ruleset]\nname = "t"\nversion = "1"\ndescription = "test rules"\n'
COMMON = (
    'description = "Rule of thumb for a test."\ncitation = "common practice"\n'
    'confidence = "test"\nseverity = "fail"\n'
)
# One valid rule body per kind: a kind added to the registry needs one here too.
SAMPLES = {
    "value-limit": 'field = "mn_ppm"\npass_if = "below"\nlimit = 300\nunit = "ppm"',
    "ratio-limit": (
        'numerator = "mn_ppm"\ndenominator = "sr_ppm"\nratio_by = "mass"\n'
        'pass_if = "below"\nlimit = 10'
    ),
    "covariance": "min_n = 5",
    "allowed-values": 'field = "component"\nexcluded = ["cement"]',
}


def one_rule(kind: str, body: str) -> str:
    return f'{HEADER}\n[[rule]]\nname = "only-rule"\nkind = "{kind}"\n{COMMON}{body}\n'


def records(n: int = 12) -> pa.Table:
    rng = np.random.default_rng(7)
    return pa.table(
        {
            "record_id": [f"r{i}" for i in range(n)],
            "source_id": ["src"] * n,
            "section_id": ["sec"] * n,
            "component": ["bulk", "cement"] * (n // 2),
            "mn_ppm": rng.uniform(50, 600, n),
            "sr_ppm": rng.uniform(50, 900, n),
            "d13c_carb": rng.normal(1.0, 1.0, n),
            "d18o_carb": rng.normal(-5.0, 1.0, n),
            "position_m": np.arange(n, dtype=float),
        }
    )


def test_every_kind_in_the_default_rules_has_a_parser_and_an_evaluator() -> None:
    doc = tomllib.loads(default_rules_path().read_text(encoding="utf-8"))
    named = {entry["kind"] for entry in doc["rule"]}
    assert named, "the shipped rule file names no kinds"
    for name in named:
        assert name in KINDS, f"the default rules use {name!r}, which is not registered"
        assert callable(KINDS[name].parse) and callable(KINDS[name].screen)
    for rule in load_rules().rules:
        assert kind_of(rule.spec) is KINDS[rule.kind]


def test_the_kinds_the_parser_accepts_are_the_registered_ones() -> None:
    with pytest.raises(ConfigError) as e:
        parse_rules(one_rule("no-such-kind", ""), "kinds.toml")
    listed = e.value.hint.removeprefix("Rule kinds: ").removesuffix(".").split(", ")
    assert listed == list(KINDS) == list(SAMPLES)
    for name in listed:
        assert callable(KINDS[name].parse) and callable(KINDS[name].screen)


@pytest.mark.parametrize("name", list(SAMPLES))
def test_each_kind_parses_reads_back_and_screens_every_record(name: str) -> None:
    rs = parse_rules(one_rule(name, SAMPLES[name]), "kinds.toml")
    (rule,) = rs.rules
    assert rule.kind == name and isinstance(rule.spec, KINDS[name].spec)
    assert parse_canonical(rs.canonical_text()) == rs  # the spec's fields are its keys
    table = records()
    results, overall, _ = evaluate(table, rs)
    assert results.num_rows == overall.num_rows == table.num_rows
    assert set(results.column("outcome").to_pylist()) <= {"pass", "fail", "untested"}
    assert "pass" in results.column("outcome").to_pylist()


def test_every_spec_class_has_exactly_one_kind() -> None:
    specs = [k.spec for k in KINDS.values()]
    assert sorted(c.__name__ for c in specs) == sorted(c.__name__ for c in typing.get_args(Spec))
    assert len(set(specs)) == len(specs)


def test_a_registry_missing_a_kind_is_refused() -> None:
    for left_out in _ENTRIES:
        rest = [k for k in _ENTRIES if k is not left_out]
        with pytest.raises(TypeError, match=left_out.spec.__name__):
            _registry(*rest)


def test_a_registry_with_a_broken_entry_is_refused() -> None:
    value_limit = KINDS["value-limit"]
    with pytest.raises(TypeError, match="registered twice"):
        _registry(*_ENTRIES, value_limit)
    twin = Kind("value-cap", value_limit.spec, value_limit.parse, value_limit.screen)
    with pytest.raises(TypeError, match="share one spec class"):
        _registry(*_ENTRIES, twin)
    no_evaluator = Kind("value-limit", value_limit.spec, value_limit.parse, None)
    with pytest.raises(TypeError, match="needs a parser and an evaluator"):
        _registry(no_evaluator, *_ENTRIES[1:])


def test_a_hand_built_rule_of_no_registered_kind_is_refused() -> None:
    rule = Rule("odd", "odd", "d", "common practice", "c", "fail", Scope(), object())
    rs = RuleSet("t", "1", "hand-built", (rule,))
    with pytest.raises(TypeError, match="not the spec of a registered screening kind"):
        evaluate(records(), rs)
