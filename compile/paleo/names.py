"""Plate names: the one rule for what a plate may be called (light: mappings check it too).

A plate is named by a slug — lowercase letters, digits and hyphens, starting with a letter
(``brevandel-block``) — and never by a frame word, which is what a plate moves against when
it moves against the model's frame.
"""

from __future__ import annotations

import re
from typing import Any

FRAMES = ("paleomagnetic", "mantle", "other")
SLUG = re.compile(r"[a-z][a-z0-9]*(?:-[a-z0-9]+)*\Z")


def plate_name_problem(value: Any) -> str | None:
    """Why ``value`` is not a plate name (None when it is one), as a clause for a message."""
    if isinstance(value, bool) or isinstance(value, int | float):
        return (
            f'{value!r} is a number; plates are named by a slug in quotes (e.g. "brevandel-block")'
        )
    if not isinstance(value, str) or not SLUG.match(value):
        return (
            f"{value!r} is not a plate name (a slug: lowercase letters, digits and hyphens, "
            "starting with a letter)"
        )
    if value in FRAMES:
        return f"{value!r} is a frame word, not a plate name"
    return None
