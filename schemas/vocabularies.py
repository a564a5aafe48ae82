"""Controlled vocabularies, read from the CSV files in ``vocab/``.

Each file has ``term,description,aliases`` (aliases separated by ``|``). Matching is
case-insensitive and ignores surrounding spaces; an alias maps to its term; anything else
gets a "did you mean" hint (strata13.suggest).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from functools import cache
from pathlib import Path

from strata13.suggest import closest

VOCAB_DIR = Path(__file__).with_name("vocab")


@dataclass(frozen=True)
class Vocabulary:
    name: str
    terms: tuple[str, ...]
    lookup: dict[str, str]  # normalised term or alias -> term

    def resolve(self, value: str) -> str | None:
        """The canonical term for ``value``, or None if it is not in the vocabulary."""
        return self.lookup.get(_norm(value))

    def suggest(self, value: str) -> str | None:
        """The closest known term, for a "did you mean" hint."""
        hits = closest(_norm(value), self.lookup, n=1, cutoff=0.6)
        return self.lookup[hits[0]] if hits else None


def _norm(value: str) -> str:
    return " ".join(str(value).strip().lower().replace("_", " ").split())


@cache
def vocabulary(name: str) -> Vocabulary:
    """Load one vocabulary by file stem (``lithology``, ``component`` …)."""
    path = VOCAB_DIR / f"{name}.csv"
    terms: list[str] = []
    lookup: dict[str, str] = {}
    with path.open(encoding="utf-8", newline="") as fh:
        for row in csv.DictReader(fh):
            term = row["term"].strip()
            terms.append(term)
            lookup[_norm(term)] = term
            for alias in (row.get("aliases") or "").split("|"):
                if alias.strip():
                    lookup.setdefault(_norm(alias), term)
    return Vocabulary(name, tuple(terms), lookup)


def names() -> list[str]:
    return sorted(p.stem for p in VOCAB_DIR.glob("*.csv"))
