"""The screening-rule kinds: one entry per kind binds its spec, parser and evaluator.

A kind's name is what a rule file writes (``kind = "value-limit"``). Its spec class holds
the checked form of the kind's own keys: the keys a rule may give are the spec's fields,
the same names ``RuleSet.canonical`` writes, so a stored rule set reads back. Its parser
(in ``rules``) checks those keys, its evaluator (in ``evaluate``) gives an outcome per
record. Adding a kind is a spec class in ``rules.Spec``, its parser, its evaluator and one
entry in ``KINDS``. A spec class without an entry, an entry without a parser or an
evaluator, or a name or class given twice stops the import of this module: a rule file can
never name a kind that nothing screens, and no kind falls through to another's code.

``rules`` and ``evaluate`` import this module inside the functions that dispatch, since it
imports both of them.
"""

from __future__ import annotations

import dataclasses
import typing
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import TYPE_CHECKING, Any, Generic, TypeVar

from strata13.compile.screening import evaluate, rules
from strata13.compile.screening.rules import (
    COMMON_KEYS,
    AllowedValues,
    Covariance,
    RatioLimit,
    Rule,
    Spec,
    ValueLimit,
)

if TYPE_CHECKING:
    import numpy as np
    from strata13.compile.screening.evaluate import Verdict, _Columns, _Detail
    from strata13.compile.screening.rules import _Ctx

S = TypeVar("S", bound=Spec)


@dataclass(frozen=True)
class Kind(Generic[S]):
    """One rule kind: its name in rule files, its spec class, parser and evaluator.

    ``parse(entry, ctx)`` checks a ``[[rule]]`` table's kind keys into the spec, raising
    ConfigError through ``ctx``. ``screen(rule, spec, columns, detail, in_scope)`` gives
    the Verdict; ``in_scope`` marks the records the rule may test, which matters to kinds
    that pool records (a covariance group), not to those judging each record alone.
    """

    name: str
    spec: type[S]
    parse: Callable[[dict[str, Any], _Ctx], S]
    screen: Callable[[Rule, S, _Columns, _Detail, np.ndarray], Verdict]

    @property
    def keys(self) -> frozenset[str]:
        """The keys of this kind a rule may give (besides ``rules.COMMON_KEYS``)."""
        return frozenset(f.name for f in dataclasses.fields(self.spec))


def _registry(*kinds: Kind[Any]) -> dict[str, Kind[Any]]:
    """The kinds by name, in the order given (messages list them so), once checked."""
    by_name: dict[str, Kind[Any]] = {}
    for kind in kinds:
        _check_entry(kind, by_name)
        by_name[kind.name] = kind
    missing = set(typing.get_args(Spec)) - {k.spec for k in by_name.values()}
    if missing:
        names = ", ".join(sorted(c.__name__ for c in missing))
        raise TypeError(f"screening spec classes without a kind in KINDS: {names}")
    return by_name


def _check_entry(kind: Kind[Any], registered: Mapping[str, Kind[Any]]) -> None:
    """Refuse an entry that could not parse or screen, or that repeats one registered."""
    if not callable(kind.parse) or not callable(kind.screen):
        raise TypeError(f"screening kind {kind.name!r} needs a parser and an evaluator")
    if kind.spec not in typing.get_args(Spec):
        raise TypeError(f"screening kind {kind.name!r}: {kind.spec.__name__} is not in Spec")
    if kind.name in registered:
        raise TypeError(f"screening kind {kind.name!r} is registered twice")
    twin = next((k.name for k in registered.values() if k.spec is kind.spec), None)
    if twin is not None:
        raise TypeError(f"screening kinds {twin!r} and {kind.name!r} share one spec class")
    clash = kind.keys & COMMON_KEYS
    if clash:
        raise TypeError(f"screening kind {kind.name!r} redefines common keys {sorted(clash)}")


# Left unannotated, so that mypy checks each entry's parser and evaluator against its spec
# class (a Kind[Any] context would let a mismatched pair through).
_ENTRIES = (
    Kind("value-limit", ValueLimit, rules.parse_value_limit, evaluate.screen_value_limit),
    Kind("ratio-limit", RatioLimit, rules.parse_ratio_limit, evaluate.screen_ratio_limit),
    Kind("covariance", Covariance, rules.parse_covariance, evaluate.screen_covariance),
    Kind(
        "allowed-values", AllowedValues, rules.parse_allowed_values, evaluate.screen_allowed_values
    ),
)
KINDS: Mapping[str, Kind[Any]] = MappingProxyType(_registry(*_ENTRIES))
_BY_SPEC = {k.spec: k for k in KINDS.values()}


def kind_of(spec: Spec) -> Kind[Any]:
    """The kind whose spec class ``spec`` is; a class not registered (only a hand-built
    Rule can carry one) is refused rather than screened as some other kind."""
    kind = _BY_SPEC.get(type(spec))
    if kind is None:
        raise TypeError(f"{type(spec).__name__} is not the spec of a registered screening kind")
    return kind
