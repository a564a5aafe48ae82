"""Screening rule files: TOML read, checked and turned into a hashable ``RuleSet``.

A rule file has a ``[ruleset]`` header (name, version, description) and ``[[rule]]``
entries. Every rule carries a description, a citation (a reference, or the literal
"common practice"), a confidence note, a severity (``fail`` or ``warn``), an optional
``scope`` and exactly one ``kind`` (registered in ``kinds.KINDS``, which binds each to its
spec class below, its parser here and its evaluator in ``evaluate``):

* ``value-limit``    — one stored column against a limit: ``field``, ``pass_if``, ``limit``,
  ``unit`` (converted to the stored unit first);
* ``ratio-limit``    — ``numerator`` / ``denominator`` (concentration columns), ``ratio_by``
  ``mass`` or ``molar``, ``pass_if``, ``limit``;
* ``covariance``     — δ13C against δ18O within a group (``group_by`` ``section``,
  ``section-unit`` or ``window`` with ``window_m``), flagged when ``r ≥ min_r`` with
  ``p < alpha``; groups under ``min_n`` records are untested;
* ``allowed-values`` — a categorical column with ``allowed`` or ``excluded`` values.

A rule set may declare its **minimum evidence** in ``[[evidence]]`` entries: for the
components an entry names (one entry may name none: every other component), each item of
``requires`` is a rule name or a list of rule names of which at least one must be tested
(pass, warn or fail) before a record can pass or warn; otherwise it is untested with the
missing rules named. Without an entry a record needs one applicable rule tested.

``pass_if`` names say what happens exactly at the limit: ``below`` (< passes, equal fails),
``at_most`` (≤ passes), ``above`` (> passes, equal fails), ``at_least`` (≥ passes).

The thresholds are rules of thumb: the user's judgement and their lab's practice decide.
Every problem is a ConfigError naming the rule and the fix. The commented default is
``schemas/data/screening_rules.toml``.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.schemas.fields import BY_NAME, CONC_FIELDS, DELTA_FIELDS, FIELDS, UNITS
from strata13.schemas.vocabularies import vocabulary

from strata13.errors import ConfigError
from strata13.suggest import did_you_mean

if TYPE_CHECKING:
    from strata13.compile.screening.kinds import Kind

RULE_NAME = re.compile(r"^[a-z0-9][a-z0-9-]{0,62}[a-z0-9]$")
SEVERITIES = ("fail", "warn")
# What passes, and so what happens exactly at the limit (the name says it).
PASS_IF = {"below": "<", "at_most": "≤", "above": ">", "at_least": "≥"}
RATIO_BY = ("mass", "molar")
GROUP_BY = ("section", "section-unit", "window")

# Standard atomic weights (IUPAC/CIAAW, abridged to the precision commonly quoted), g/mol.
# From memory: Mn 54.938, Sr 87.62, Fe 55.845, Ca 40.078, Mg 24.305.
ATOMIC_MASS = {"Mn": 54.938, "Sr": 87.62, "Fe": 55.845, "Ca": 40.078, "Mg": 24.305}
ATOMIC_MASS_SOURCE = "IUPAC standard atomic weights (abridged), from memory"

TOP_KEYS = {"ruleset", "rule", "evidence"}
EVIDENCE_KEYS = {"component", "requires", "description", "citation"}
HEADER_KEYS = {"name", "version", "description"}
COMMON_KEYS = {"name", "kind", "description", "citation", "confidence", "severity", "scope"}
SCOPE_KEYS = {"age_min_ma", "age_max_ma", "component", "mineralogy", "setting"}


@dataclass(frozen=True)
class NumericField:
    """A stored numeric column a rule may test, with what its censoring columns are."""

    column: str
    label: str
    unit_kind: str
    stored_unit: str
    censor: str | None = None  # prefix of <c>_qualifier, <c>_dl, <c>_basis
    ppm_factor: float | None = None  # stored unit -> ppm (mass fraction); None: no ratio
    element: str | None = None  # for molar ratios


def _numeric_fields() -> dict[str, NumericField]:
    labels = {
        "mn": ("Mn", "Mn"),
        "sr": ("Sr", "Sr"),
        "fe": ("Fe", "Fe"),
        "mg_ca": ("Mg/Ca", None),
        "caco3": ("CaCO3", None),
        "toc": ("TOC", None),
    }
    per_ppm = {"ppm": 1.0, "%": 1.0e4}
    out: dict[str, NumericField] = {}
    for c in CONC_FIELDS:
        f = BY_NAME[c]
        label, element = labels[c]
        out[f.stored] = NumericField(
            f.stored,
            label,
            f.unit_kind or "",
            f.stored_unit or "",
            c,
            per_ppm.get(f.stored_unit or ""),
            element,
        )
    for d in DELTA_FIELDS:
        label = {"d13c_carb": "δ13C carb", "d18o_carb": "δ18O carb", "d13c_org": "δ13C org"}[d]
        out[d] = NumericField(d, label, "permil", "‰")
    return out


NUMERIC_FIELDS = _numeric_fields()
CATEGORICAL_FIELDS: dict[str, str | None] = {
    **{f.stored: f.vocab for f in FIELDS if f.kind == "vocab"},
    "preservation": None,
}


@dataclass(frozen=True)
class Scope:
    """Where a rule applies. Empty tuples mean "any"; ages are inclusive bounds in Ma."""

    age_min_ma: float | None = None
    age_max_ma: float | None = None
    component: tuple[str, ...] = ()
    mineralogy: tuple[str, ...] = ()
    setting: tuple[str, ...] = ()

    def canonical(self) -> dict[str, Any]:
        out: dict[str, Any] = {}
        if self.age_min_ma is not None:
            out["age_min_ma"] = self.age_min_ma
        if self.age_max_ma is not None:
            out["age_max_ma"] = self.age_max_ma
        for key in ("component", "mineralogy", "setting"):
            if getattr(self, key):
                out[key] = sorted(getattr(self, key))
        return out


@dataclass(frozen=True)
class ValueLimit:
    field: str
    pass_if: str
    limit: float
    unit: str

    @property
    def limit_stored(self) -> float:
        """The limit in the stored column's unit."""
        f = NUMERIC_FIELDS[self.field]
        return self.limit * UNITS[f.unit_kind][self.unit]

    def canonical(self) -> dict[str, Any]:
        return {
            "field": self.field,
            "pass_if": self.pass_if,
            "limit": self.limit,
            "unit": self.unit,
        }


@dataclass(frozen=True)
class RatioLimit:
    numerator: str
    denominator: str
    ratio_by: str
    pass_if: str
    limit: float

    @property
    def factor(self) -> float:
        """Multiplier turning stored numerator / stored denominator into the rule's ratio.

        Both columns go to ppm first; a molar ratio then divides each by its atomic mass.
        """
        n, d = NUMERIC_FIELDS[self.numerator], NUMERIC_FIELDS[self.denominator]
        k = (n.ppm_factor or 1.0) / (d.ppm_factor or 1.0)
        if self.ratio_by == "molar":
            k *= ATOMIC_MASS[d.element or ""] / ATOMIC_MASS[n.element or ""]
        return k

    @property
    def label(self) -> str:
        return (
            f"{NUMERIC_FIELDS[self.numerator].label}/"
            f"{NUMERIC_FIELDS[self.denominator].label} ({self.ratio_by})"
        )

    def canonical(self) -> dict[str, Any]:
        return {
            "numerator": self.numerator,
            "denominator": self.denominator,
            "ratio_by": self.ratio_by,
            "pass_if": self.pass_if,
            "limit": self.limit,
        }


@dataclass(frozen=True)
class Covariance:
    x: str = "d18o_carb"
    y: str = "d13c_carb"
    group_by: str = "section"
    window_m: float | None = None
    min_n: int = 10
    min_r: float = 0.7
    alpha: float = 0.05
    lag1_correction: bool = True

    def canonical(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "x": self.x,
            "y": self.y,
            "group_by": self.group_by,
            "min_n": self.min_n,
            "min_r": self.min_r,
            "alpha": self.alpha,
            "lag1_correction": self.lag1_correction,
        }
        if self.window_m is not None:
            out["window_m"] = self.window_m
        return out


@dataclass(frozen=True)
class AllowedValues:
    field: str
    allowed: tuple[str, ...] | None = None
    excluded: tuple[str, ...] | None = None

    def canonical(self) -> dict[str, Any]:
        out: dict[str, Any] = {"field": self.field}
        if self.allowed is not None:
            out["allowed"] = sorted(self.allowed)
        if self.excluded is not None:
            out["excluded"] = sorted(self.excluded)
        return out


# One spec class per rule kind; ``kinds.KINDS`` binds each to its name, parser and
# evaluator, and refuses at import a class listed here without an entry there.
Spec = ValueLimit | RatioLimit | Covariance | AllowedValues


@dataclass(frozen=True)
class Rule:
    name: str
    kind: str
    description: str
    citation: str
    confidence: str
    severity: str
    scope: Scope
    spec: Spec

    def canonical(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "name": self.name,
            "kind": self.kind,
            "description": self.description,
            "citation": self.citation,
            "confidence": self.confidence,
            "severity": self.severity,
        }
        scope = self.scope.canonical()
        if scope:
            out["scope"] = scope
        out.update(self.spec.canonical())
        return out


@dataclass(frozen=True)
class Evidence:
    """The minimum evidence for some components: every group needs one rule tested.

    ``components`` empty means every component no other entry names (and records with no
    component). ``requires`` holds groups of rule names; a group is met when at least one
    of its rules was tested (pass, warn or fail) for the record.
    """

    components: tuple[str, ...]
    requires: tuple[tuple[str, ...], ...]
    description: str = ""
    citation: str = ""

    def canonical(self) -> dict[str, Any]:
        out: dict[str, Any] = {"requires": [list(g) for g in self.requires]}
        if self.components:
            out["component"] = list(self.components)
        if self.description:
            out["description"] = self.description
        if self.citation:
            out["citation"] = self.citation
        return out

    def label(self) -> str:
        """What the entry asks, in words: "mn-sr-mass or d18o-floor, and d13c-d18o-covariance"."""
        return ", and ".join(" or ".join(g) for g in self.requires)


@dataclass(frozen=True)
class RuleSet:
    """A checked rule file. ``sha256`` and ``canonical_text`` do not depend on comments,
    spacing or key order, so the store and the export manifest can key on them."""

    name: str
    version: str
    description: str
    rules: tuple[Rule, ...]
    origin: str = field(default="", compare=False)
    evidence: tuple[Evidence, ...] = ()

    def canonical(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "ruleset": {
                "name": self.name,
                "version": self.version,
                "description": self.description,
            },
            "rule": [r.canonical() for r in sorted(self.rules, key=lambda r: r.name)],
        }
        if self.evidence:  # absent, not empty: a rule set without it keeps its hash
            out["evidence"] = [
                e.canonical() for e in sorted(self.evidence, key=lambda e: e.components)
            ]
        return out

    def evidence_for(self, component: str | None) -> Evidence | None:
        """The entry that covers ``component`` (named first, then the catch-all), or None."""
        for e in self.evidence:
            if component is not None and component in e.components:
                return e
        for e in self.evidence:
            if not e.components:
                return e
        return None

    def canonical_text(self) -> str:
        """Canonical JSON: sorted keys, no spaces, UTF-8 text; ``parse_canonical`` reads it."""
        return json.dumps(
            self.canonical(),
            sort_keys=True,
            ensure_ascii=False,
            separators=(",", ":"),
            allow_nan=False,
        )

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.canonical_text().encode("utf-8")).hexdigest()

    def rule(self, name: str) -> Rule:
        for r in self.rules:
            if r.name == name:
                return r
        raise KeyError(name)


def default_rules_path() -> Path:
    import strata13.schemas

    return Path(strata13.schemas.__file__).with_name("data") / "screening_rules.toml"


def load_rules(path: Path | str | None = None) -> RuleSet:
    """Read and check a rule file (None: the shipped default). Raises ConfigError (exit 2)."""
    from strata13.compile.read.inputs import read_text

    p = Path(path) if path is not None else default_rules_path()
    return parse_rules(read_text(p, "rule file", "Check the --rules path (a .toml file)."), p.name)


def parse_rules(text: str, origin: str = "rules") -> RuleSet:
    """Check rule-file text; ``origin`` names it in messages."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line = _error_line(exc)
        rule = _rule_at_line(text, line) if line else None
        where = f" at line {line}" if line else ""
        inside = f" (in rule {rule!r})" if rule else ""
        raise ConfigError(
            f"{origin} is not valid TOML{where}{inside}: {_bare(exc)}.",
            "Check quotes, brackets and commas on that line; strings need "
            "double quotes, lists square brackets.",
        ) from None
    return _build(doc, origin)


def parse_canonical(text: str, origin: str = "stored rule set") -> RuleSet:
    """Rebuild a RuleSet from ``RuleSet.canonical_text()`` (checked like a file)."""
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ConfigError(f"{origin} is not valid JSON ({exc}).", "Re-save the rule set.") from None
    return _build(doc, origin)


# --- building and checking -------------------------------------------------------------


def _error_line(exc: tomllib.TOMLDecodeError) -> int | None:
    line = getattr(exc, "lineno", None)
    if isinstance(line, int):
        return line
    m = re.search(r"line (\d+)", str(exc))
    return int(m.group(1)) if m else None


def _bare(exc: tomllib.TOMLDecodeError) -> str:
    msg = getattr(exc, "msg", None) or str(exc)
    return re.sub(r"\s*\(at line \d+, column \d+\)", "", str(msg)).rstrip(".")


def _rule_at_line(text: str, line: int) -> str | None:
    """The name of the [[rule]] block holding ``line`` (1-based), when one can be read."""
    lines = text.splitlines()
    start = None
    for i in range(min(line, len(lines)) - 1, -1, -1):
        if re.match(r"^\s*\[\[\s*rule\s*\]\]", lines[i]):
            start = i
            break
        if re.match(r"^\s*\[", lines[i]) and not re.match(r"^\s*\[\s*rule\.", lines[i]):
            return None
    if start is None:
        return None
    for j in range(start + 1, len(lines)):
        if re.match(r"^\s*\[\[", lines[j]):
            break
        m = re.match(r"""^\s*name\s*=\s*["']([^"']*)["']""", lines[j])
        if m:
            return m.group(1)
    return None


class _Ctx:
    """Who is speaking in a message: the file and the rule."""

    def __init__(self, origin: str, rule: str, block: str = "rule") -> None:
        self.origin, self.rule, self.block = origin, rule, block

    def fail(self, what: str, hint: str) -> ConfigError:
        return ConfigError(f"{self.origin}: {self.block} {self.rule}: {what}", hint)

    def text(self, block: dict[str, Any], key: str, required: bool = True) -> str:
        value = block.get(key)
        if value is None and not required:
            return ""
        if not isinstance(value, str) or not value.strip():
            raise self.fail(
                f"{key} is missing or empty.", _TEXT_HINTS.get(key, f'Add {key} = "…".')
            )
        return value.strip()

    def number(self, block: dict[str, Any], key: str, default: float | None = None) -> float:
        value = block.get(key, default)
        if value is None:
            raise self.fail(f"{key} is missing.", f"Add {key} = <number>.")
        if (
            isinstance(value, bool)
            or not isinstance(value, (int, float))
            or not math.isfinite(value)
        ):
            raise self.fail(
                f"{key} = {value!r} is not a finite number.",
                f"Write {key} as a plain number, e.g. {key} = 10.",
            )
        return float(value)

    def choice(
        self, block: dict[str, Any], key: str, options: tuple[str, ...], default: str | None = None
    ) -> str:
        value = block.get(key, default)
        if value is None:
            raise self.fail(f"{key} is missing.", f"Add {key} = one of {', '.join(options)}.")
        if value not in options:
            raise self.fail(
                f"{key} = {value!r} is not one of {', '.join(options)}."
                + did_you_mean(str(value), options),
                f'Use {key} = "{options[0]}" (or another of the listed values).',
            )
        return str(value)


_TEXT_HINTS = {
    "citation": 'Give the reference the threshold comes from, or citation = "common practice".',
    "description": "Say in a sentence what the rule checks and that it is a rule of thumb.",
    "confidence": 'Say how firmly the value stands, e.g. confidence = "from memory, low".',
}


def _build(doc: Any, origin: str) -> RuleSet:
    if not isinstance(doc, dict):
        raise ConfigError(f"{origin} is not a rule file.", "Start with a [ruleset] header.")
    for key in doc:
        if key not in TOP_KEYS:
            raise ConfigError(
                f"{origin}: unknown top-level key {key!r}." + did_you_mean(key, TOP_KEYS),
                "A rule file holds one [ruleset] header and [[rule]] entries.",
            )
    header = doc.get("ruleset")
    if not isinstance(header, dict):
        raise ConfigError(
            f"{origin} has no [ruleset] header.",
            "Add [ruleset] with name, version and description.",
        )
    for key in header:
        if key not in HEADER_KEYS:
            raise ConfigError(
                f"{origin}: unknown key {key!r} in [ruleset]." + did_you_mean(key, HEADER_KEYS),
                f"Keys of [ruleset]: {', '.join(sorted(HEADER_KEYS))}.",
            )
    for key in ("name", "version"):
        if not isinstance(header.get(key), str) or not header[key].strip():
            raise ConfigError(
                f'{origin}: [ruleset] needs {key} = "…".',
                "Name and version identify the rule set in exports.",
            )
    description = header.get("description", "")
    if not isinstance(description, str):
        raise ConfigError(f"{origin}: [ruleset] description must be text.", "")
    entries = doc.get("rule", [])
    if not isinstance(entries, list) or not entries:
        raise ConfigError(f"{origin} has no [[rule]] entries.", "Add at least one [[rule]].")
    rules: list[Rule] = []
    seen: set[str] = set()
    for i, entry in enumerate(entries, start=1):
        rule = _rule(entry, i, origin)
        if rule.name in seen:
            raise ConfigError(
                f"{origin}: two rules are named {rule.name!r}.", "Give each [[rule]] its own name."
            )
        seen.add(rule.name)
        rules.append(rule)
    evidence = _evidence(doc.get("evidence", []), {r.name for r in rules}, origin)
    return RuleSet(
        header["name"].strip(),
        header["version"].strip(),
        description.strip(),
        tuple(rules),
        origin,
        evidence,
    )


def _evidence(entries: Any, names: set[str], origin: str) -> tuple[Evidence, ...]:
    """[[evidence]] entries, checked: known rules, each component in one entry at most."""
    if not isinstance(entries, list):
        raise ConfigError(
            f"{origin}: evidence must be [[evidence]] entries.",
            "Write each as [[evidence]] with component = [...] and requires = [...].",
        )
    out: list[Evidence] = []
    claimed: dict[str, int] = {}
    catch_all: int | None = None
    for i, entry in enumerate(entries, start=1):
        ctx = _Ctx(origin, f"#{i}", "[[evidence]]")
        where = f"{origin}: [[evidence]] #{i}"
        if not isinstance(entry, dict):
            raise ConfigError(f"{where} is not a table.", "Write it as an [[evidence]] block.")
        for key in entry:
            if key not in EVIDENCE_KEYS:
                raise ConfigError(
                    f"{where}: unknown key {key!r}." + did_you_mean(key, EVIDENCE_KEYS),
                    f"Keys of [[evidence]]: {', '.join(sorted(EVIDENCE_KEYS))}.",
                )
        components = _terms(entry.get("component"), "component", "component", ctx)
        groups = _requires(entry.get("requires"), names, where)
        for c in components:
            if c in claimed:
                raise ConfigError(
                    f"{where}: component {c!r} is already in [[evidence]] #{claimed[c]}.",
                    "Name each component in one [[evidence]] entry.",
                )
            claimed[c] = i
        if not components:
            if catch_all is not None:
                raise ConfigError(
                    f"{where}: [[evidence]] #{catch_all} already covers every other component.",
                    "Give one of them a component list.",
                )
            catch_all = i
        text = {k: entry.get(k, "") for k in ("description", "citation")}
        for k, v in text.items():
            if not isinstance(v, str):
                raise ConfigError(f"{where}: {k} must be text.", f'Write {k} = "…".')
        out.append(
            Evidence(components, groups, text["description"].strip(), text["citation"].strip())
        )
    return tuple(out)


def _requires(value: Any, names: set[str], where: str) -> tuple[tuple[str, ...], ...]:
    """``requires``: rule names, or lists of rule names of which one is enough."""
    hint = 'Example: requires = [["mn-sr-mass", "d18o-floor"], "d13c-d18o-covariance"]'
    if not isinstance(value, list) or not value:
        raise ConfigError(f"{where}: requires must be a non-empty list.", hint)
    groups: list[tuple[str, ...]] = []
    for item in value:
        group = [item] if isinstance(item, str) else item
        if not isinstance(group, list) or not group or not all(isinstance(g, str) for g in group):
            raise ConfigError(
                f"{where}: requires item {item!r} is not a rule name or a list of them.", hint
            )
        for g in group:
            if g not in names:
                raise ConfigError(
                    f"{where}: requires names rule {g!r}, which the rule set does not have."
                    + did_you_mean(g, names),
                    f"Rules: {', '.join(sorted(names))}.",
                )
        groups.append(tuple(dict.fromkeys(group)))
    return tuple(groups)


def _rule(entry: Any, index: int, origin: str) -> Rule:
    ctx = _Ctx(origin, f"#{index}")
    if not isinstance(entry, dict):
        raise ctx.fail("is not a table.", "Write each rule as a [[rule]] block.")
    name = entry.get("name")
    if not isinstance(name, str) or not RULE_NAME.match(name):
        raise ctx.fail(
            f"name = {name!r} is not a valid rule name.",
            'Use 2–64 lowercase letters, digits and hyphens, e.g. name = "mn-sr".',
        )
    ctx.rule = repr(name)
    kind = _kind(entry.get("kind"), ctx)
    allowed = COMMON_KEYS | kind.keys
    for key in entry:
        if key not in allowed:
            raise ctx.fail(
                f"unknown key {key!r}." + did_you_mean(key, allowed),
                f"Keys of a {kind.name} rule: {', '.join(sorted(allowed))}.",
            )
    description = ctx.text(entry, "description")
    citation = ctx.text(entry, "citation")
    confidence = ctx.text(entry, "confidence")
    severity = ctx.choice(entry, "severity", SEVERITIES)
    scope = _scope(entry.get("scope", {}), ctx)
    spec = kind.parse(entry, ctx)
    return Rule(name, kind.name, description, citation, confidence, severity, scope, spec)


def _kind(value: Any, ctx: _Ctx) -> Kind[Any]:
    """The registered kind a rule names; anything else is refused with the list of kinds."""
    from strata13.compile.screening.kinds import KINDS  # kinds imports this module

    if value is None:
        raise ctx.fail("has no kind.", f"Add kind = one of {', '.join(KINDS)}.")
    if not isinstance(value, str) or value not in KINDS:
        raise ctx.fail(
            f"kind = {value!r} is not a rule kind." + did_you_mean(str(value), KINDS),
            f"Rule kinds: {', '.join(KINDS)}.",
        )
    return KINDS[value]


def _scope(block: Any, ctx: _Ctx) -> Scope:
    if not isinstance(block, dict):
        raise ctx.fail(
            "scope must be a table.",
            'Example: scope = { age_max_ma = 538.8, component = ["bulk"] }',
        )
    for key in block:
        if key not in SCOPE_KEYS:
            raise ctx.fail(
                f"unknown scope key {key!r}." + did_you_mean(key, SCOPE_KEYS),
                f"Scope keys: {', '.join(sorted(SCOPE_KEYS))}.",
            )
    lo = ctx.number(block, "age_min_ma") if "age_min_ma" in block else None
    hi = ctx.number(block, "age_max_ma") if "age_max_ma" in block else None
    if lo is not None and hi is not None and lo > hi:
        raise ctx.fail(
            f"scope age_min_ma = {lo:g} is older than age_max_ma = {hi:g}.",
            "Ages are in Ma: age_min_ma is the younger bound.",
        )
    lists = {
        key: _terms(block.get(key), key, key, ctx) for key in ("component", "mineralogy", "setting")
    }
    return Scope(lo, hi, **lists)


def _terms(value: Any, key: str, vocab: str | None, ctx: _Ctx) -> tuple[str, ...]:
    """A list of vocabulary terms (a single string is a list of one), canonicalised."""
    if value is None:
        return ()
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
        raise ctx.fail(
            f"{key} must be a non-empty list of text values.", f'Example: {key} = ["…", "…"]'
        )
    if vocab is None:
        return tuple(dict.fromkeys(v.strip() for v in value))
    voc = vocabulary(vocab)
    out: list[str] = []
    for v in value:
        term = voc.resolve(v)
        if term is None:
            sug = voc.suggest(v)
            raise ctx.fail(
                f"{key} value {v!r} is not in the {vocab} vocabulary."
                + (f" Did you mean {sug!r}?" if sug else ""),
                f"Known terms: {', '.join(voc.terms)}.",
            )
        out.append(term)
    return tuple(dict.fromkeys(out))


def _unknown_field(
    name: Any, key: str, options: set[str] | dict[str, Any], ctx: _Ctx, what: str
) -> ConfigError:
    """An unknown column; mapping-file names (``mn``) point to their stored column."""
    f = BY_NAME.get(str(name))
    if f is not None and f.stored in options:
        hint = f" Did you mean {f.stored!r} (the stored column)?"
    elif str(name).endswith("_reported") and str(name)[:-9] in options:
        hint = f" Did you mean {str(name)[:-9]!r} (screens test harmonised ‰ VPDB values)?"
    else:
        hint = did_you_mean(str(name), options)
    return ctx.fail(
        f"{key} = {name!r} is not a {what} column." + hint,
        f"{what.capitalize()} columns: {', '.join(sorted(options))}.",
    )


def _numeric(entry: dict[str, Any], key: str, ctx: _Ctx, default: str | None = None) -> str:
    name = entry.get(key, default)
    if name is None:
        raise ctx.fail(f"{key} is missing.", f'Add {key} = "<stored column>", e.g. "mn_ppm".')
    if name in CATEGORICAL_FIELDS:
        raise ctx.fail(
            f"{key} = {name!r} is a categorical column.",
            'Test categories with kind = "allowed-values".',
        )
    if name not in NUMERIC_FIELDS:
        raise _unknown_field(name, key, NUMERIC_FIELDS, ctx, "numeric")
    return str(name)


# --- the kinds' own keys (each parser is bound to its kind in kinds.KINDS) ---------------


def parse_value_limit(entry: dict[str, Any], ctx: _Ctx) -> ValueLimit:
    """A value-limit's column, comparison, limit and a unit that fits the column."""
    name = _numeric(entry, "field", ctx)
    f = NUMERIC_FIELDS[name]
    pass_if = ctx.choice(entry, "pass_if", tuple(PASS_IF))
    limit = ctx.number(entry, "limit")
    unit = entry.get("unit")
    units = UNITS[f.unit_kind]
    if unit not in units:
        raise ctx.fail(
            f"unit = {unit!r} does not fit {name}." + did_you_mean(str(unit), units),
            f"Units for {name}: {', '.join(units)} (stored in {f.stored_unit}).",
        )
    return ValueLimit(name, pass_if, limit, str(unit))


def parse_ratio_limit(entry: dict[str, Any], ctx: _Ctx) -> RatioLimit:
    """Two different concentration columns (elements, for a molar ratio) and a limit ≥ 0."""
    num = _numeric(entry, "numerator", ctx)
    den = _numeric(entry, "denominator", ctx)
    ratio_by = ctx.choice(entry, "ratio_by", RATIO_BY)
    for key, name in (("numerator", num), ("denominator", den)):
        f = NUMERIC_FIELDS[name]
        if f.ppm_factor is None:
            raise ctx.fail(
                f"{key} = {name!r} is not a concentration (it is in {f.stored_unit}).",
                "Ratios are formed from concentration columns such as mn_ppm, sr_ppm, fe_ppm.",
            )
        if ratio_by == "molar" and f.element is None:
            raise ctx.fail(
                f"a molar ratio needs an element, and {name!r} is not one.",
                f'Use ratio_by = "mass", or elements with atomic masses: '
                f"{', '.join(sorted(ATOMIC_MASS))}.",
            )
    if num == den:
        raise ctx.fail("numerator and denominator are the same column.", "Pick two columns.")
    pass_if = ctx.choice(entry, "pass_if", tuple(PASS_IF))
    limit = ctx.number(entry, "limit")
    if limit < 0:
        raise ctx.fail(
            f"limit = {limit:g} is negative; a concentration ratio is not.", "Give a limit ≥ 0."
        )
    return RatioLimit(num, den, ratio_by, pass_if, limit)


def parse_covariance(entry: dict[str, Any], ctx: _Ctx) -> Covariance:
    """Two numeric columns (δ18O, δ13C unless given), the grouping (window_m exactly when
    by window) and the test's limits; keys left out take ``Covariance``'s defaults."""
    d = Covariance()
    x = _numeric(entry, "x", ctx, d.x)
    y = _numeric(entry, "y", ctx, d.y)
    if x == y:
        raise ctx.fail("x and y are the same column.", 'Use x = "d18o_carb", y = "d13c_carb".')
    group_by = ctx.choice(entry, "group_by", GROUP_BY, d.group_by)
    window = None
    if group_by == "window":
        window = ctx.number(entry, "window_m")
        if window <= 0:
            raise ctx.fail("window_m must be > 0.", "Give the window width in metres.")
    elif "window_m" in entry:
        raise ctx.fail(
            f"window_m is given but group_by = {group_by!r}.",
            'Use group_by = "window" or drop window_m.',
        )
    min_n = entry.get("min_n", d.min_n)
    if isinstance(min_n, bool) or not isinstance(min_n, int) or min_n < 3:
        raise ctx.fail(
            f"min_n = {min_n!r} must be a whole number ≥ 3.",
            "A correlation needs at least 3 records; 10 is common practice.",
        )
    min_r = ctx.number(entry, "min_r", d.min_r)
    if not -1.0 <= min_r <= 1.0:
        raise ctx.fail(f"min_r = {min_r:g} is outside −1 … 1.", "Example: min_r = 0.7")
    alpha = ctx.number(entry, "alpha", d.alpha)
    if not 0.0 < alpha < 1.0:
        raise ctx.fail(f"alpha = {alpha:g} must lie between 0 and 1.", "Example: alpha = 0.05")
    lag1 = entry.get("lag1_correction", d.lag1_correction)
    if not isinstance(lag1, bool):
        raise ctx.fail("lag1_correction must be true or false.", "")
    return Covariance(x, y, group_by, window, int(min_n), min_r, alpha, lag1)


def parse_allowed_values(entry: dict[str, Any], ctx: _Ctx) -> AllowedValues:
    """A categorical column and exactly one of allowed or excluded, as vocabulary terms."""
    name = entry.get("field")
    if name is None:
        raise ctx.fail("field is missing.", 'Add field = "component" (a categorical column).')
    if name in NUMERIC_FIELDS:
        raise ctx.fail(f"field = {name!r} is numeric.", 'Use kind = "value-limit" for numbers.')
    if name not in CATEGORICAL_FIELDS:
        raise _unknown_field(name, "field", CATEGORICAL_FIELDS, ctx, "categorical")
    has_a, has_e = "allowed" in entry, "excluded" in entry
    if has_a == has_e:
        raise ctx.fail(
            "needs exactly one of allowed or excluded.",
            'Example: excluded = ["cement"] or allowed = ["bulk", "micrite"].',
        )
    key = "allowed" if has_a else "excluded"
    terms = _terms(entry[key], key, CATEGORICAL_FIELDS[name], ctx)
    return AllowedValues(str(name), terms if has_a else None, None if has_a else terms)
