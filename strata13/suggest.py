"""One "did you mean" for every message that names an unknown word.

Below ``compile/`` and ``schemas/`` (like the error tree), so both can use it.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

CUTOFF = 0.6  # difflib's default similarity ratio: close enough to be a likely typo


def closest(word: str, options: Iterable[str], n: int = 1, cutoff: float = CUTOFF) -> list[str]:
    """Up to ``n`` options most like ``word`` (difflib's ratio ≥ ``cutoff``), best first."""
    return difflib.get_close_matches(str(word), sorted(set(options)), n=n, cutoff=cutoff)


def did_you_mean(word: str, options: Iterable[str], cutoff: float = CUTOFF) -> str:
    """`` Did you mean 'x'?`` for the closest option, or an empty string."""
    hit = closest(word, options, 1, cutoff)
    return f" Did you mean {hit[0]!r}?" if hit else ""
