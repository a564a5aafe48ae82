"""The mapping file's shape, declared once: which type every key of every block takes.

TOML parses ``constants = 5``, ``{ field = 2 }``, ``{ scale = -inf }`` or
``encoding = "punycode"`` without complaint; the checks in ``mapping.py`` then expect a
table, a field name, a scale name, an encoding that reads text. ``check_shape`` walks the
parsed document once against :data:`SHAPE` before any of them runs and refuses the first
value of the wrong type with one sentence naming the key, the type it must have and the
line. Keys the shape does not know are left to ``mapping.py``, which names them with a
"did you mean".
"""

from __future__ import annotations

import codecs
import math
import re
import string
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from strata13.errors import ConfigError


@dataclass(frozen=True)
class Kind:
    """A value's expected type: how to say it, how to test it, an example."""

    says: str
    test: Callable[[Any], bool]
    example: str = ""


@dataclass(frozen=True)
class Table:
    """A TOML table whose known keys have shapes (unknown keys are mapping.py's)."""

    keys: dict[str, Any]
    says: str = "a table"


@dataclass(frozen=True)
class MapOf:
    """A TOML table whose keys are free (headers, fields, materials) and values alike."""

    value: Any
    says: str = "a table"


@dataclass(frozen=True)
class ListOf:
    """An array of tables (``[[block]]``)."""

    item: Any
    says: str = "a list of [[…]] blocks"


@dataclass(frozen=True)
class Either:
    """One of several shapes (a column is a field name or a table)."""

    options: tuple[Any, ...]
    says: str = ""
    extra: dict[str, Any] = field(default_factory=dict)


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _whole(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


# codecs that are not a character set (they would decode anything, or take quadratic time)
NOT_CHARSETS = {
    "undefined",
    "punycode",
    "idna",
    "unicode_escape",
    "raw_unicode_escape",
    "unicode_internal",
    "charmap",
    "mbcs",
    "oem",
    "utf_7",
}


def _encoding(v: Any) -> bool:
    if not isinstance(v, str):
        return False
    if v == "auto":
        return True
    try:
        info = codecs.lookup(v)
    except (LookupError, ValueError, TypeError):
        return False
    text = getattr(info, "_is_text_encoding", True)
    return bool(text) and info.name.replace("-", "_") not in NOT_CHARSETS


DELIMITERS = set(string.punctuation) - {'"', "'"} | {"\t"}


def _delimiter(v: Any) -> bool:
    return isinstance(v, str) and (v in ("auto", "tab", "\\t") or v in DELIMITERS)


TEXT = Kind("text", lambda v: isinstance(v, str), '"…"')
WHOLE = Kind("a whole number", _whole, "2")
NUMBER = Kind("a finite number", _number, "1.5")
BOOL = Kind("true or false", lambda v: isinstance(v, bool), "true")
TEXT_OR_WHOLE = Kind(
    "text or a whole number", lambda v: isinstance(v, str) or _whole(v), '"S1" or 2'
)
TEXT_OR_NUMBER = Kind(
    "text or a finite number", lambda v: isinstance(v, str) or _number(v), '"bulk" or 1.5'
)
TEXT_LIST = Kind(
    "a list of text",
    lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v),
    '["a", "b"]',
)
ENCODING = Kind(
    "a character encoding that reads text",
    _encoding,
    '"auto", "utf-8", "cp1252" or "latin-1"',
)
DELIMITER = Kind('one ASCII punctuation character, "tab" or "auto"', _delimiter, '";" or "tab"')

TABLE_BLOCK = {
    "file": TEXT,
    "sheet": TEXT_OR_WHOLE,
    "header_row": WHOLE,
    "decimal": TEXT,
    "delimiter": DELIMITER,
    "encoding": ENCODING,
}
COLUMN = Either(
    (
        TEXT,
        Table(
            {
                "field": TEXT,
                "unit": TEXT,
                "scale": TEXT,
                "basis": TEXT,
                "detection_limit": NUMBER,
            }
        ),
    ),
    'a field name or { field = "…", … }',
)
SHAPE = Table(
    {
        "source": Table(
            {
                "id": TEXT,
                "citation": TEXT,
                "year": WHOLE,
                "doi": TEXT,
                "url": TEXT,
                "kind": TEXT,
                "lab": TEXT,
                "republishes": TEXT_LIST,
                "note": TEXT,
                # bibliographic fields for the export's BibTeX (mapping.BIB_KEYS)
                "entry_type": TEXT,
                "authors": TEXT_LIST,
                "title": TEXT,
                "journal": TEXT,
                "volume": TEXT_OR_WHOLE,
                "issue": TEXT_OR_WHOLE,
                "pages": TEXT,
                "publisher": TEXT,
            }
        ),
        "table": Table(TABLE_BLOCK),
        "columns": MapOf(COLUMN),
        "constants": MapOf(TEXT_OR_NUMBER),
        "sections": ListOf(
            Table(
                {
                    "id": TEXT_OR_WHOLE,
                    "locality": TEXT_OR_WHOLE,
                    "name": TEXT,
                    "datum": TEXT,
                    "position_kind": TEXT,
                    "datum_offset_m": NUMBER,
                    "offset_from": TEXT,
                    "offset_source": TEXT,
                    "note": TEXT,
                    "accumulation": Table({"shape": NUMBER, "segment_m": NUMBER}),
                }
            )
        ),
        "localities": ListOf(
            Table(
                {
                    "id": TEXT_OR_WHOLE,
                    "name": TEXT,
                    "lat": TEXT_OR_NUMBER,
                    "lon": TEXT_OR_NUMBER,
                    "precision_km": NUMBER,
                    "aliases": TEXT_LIST,
                    "note": TEXT,
                    "plate": TEXT_OR_WHOLE,
                }
            )
        ),
        "localities_table": Table(TABLE_BLOCK | {"columns": MapOf(COLUMN)}),
        "ties": ListOf(
            Table(
                {
                    "id": TEXT_OR_WHOLE,
                    "section": TEXT,
                    "position": TEXT_OR_NUMBER,
                    "unit": TEXT,
                    "position_uncertainty": TEXT_OR_NUMBER,
                    "age": TEXT_OR_NUMBER,
                    "uncertainty": TEXT_OR_NUMBER,
                    "confidence": TEXT,
                    "basis": TEXT,
                    "boundary": TEXT,
                    "chart": TEXT,
                    "anchor": TEXT_OR_WHOLE,
                    "note": TEXT,
                }
            )
        ),
        "ties_table": Table({"file": TEXT}),
        "normalisation": MapOf(Table({"method": TEXT, "anchors": MapOf(NUMBER), "note": TEXT})),
        "run": Table(
            {
                "anchors": TEXT_LIST,
                "checks": TEXT_LIST,
                "drift": BOOL,
                "slope_tolerance": NUMBER,
                "value_set": Either(
                    (TEXT, MapOf(TEXT)), 'a value-set name or { "material" = "name", … }'
                ),
                "note": TEXT,
            }
        ),
        "offsets": MapOf(Table({"value": NUMBER, "why": TEXT})),
    }
)


def check_shape(doc: dict[str, Any], raw: bytes, path: Path) -> None:
    """Refuse the first value of ``doc`` whose type is not the one :data:`SHAPE` declares."""
    problem = _walk(SHAPE, doc, ())
    if problem is None:
        return
    where, value, shape = problem
    line = line_of(raw.decode("utf-8", errors="replace"), where)
    at = f" (line {line})" if line else ""
    says = shape.says
    example = getattr(shape, "example", "")
    raise ConfigError(
        f"{path.name}{at}: {_label(where, doc)} = {_show(value)} must be {says}.",
        f"Example: {_label(where[-1:]) if where else 'key'} = {example}"
        if example
        else "See the commented example demo_compilation/sheets/quillar_2011.toml.",
    )


def _fits(shape: Any, value: Any) -> bool:
    if isinstance(shape, Kind):
        return bool(shape.test(value))
    if isinstance(shape, (Table, MapOf)):
        return isinstance(value, dict)
    if isinstance(shape, ListOf):
        return isinstance(value, list) and all(isinstance(x, dict) for x in value)
    return any(_fits(o, value) for o in shape.options)


def _walk(
    shape: Any, value: Any, where: tuple[Any, ...]
) -> tuple[tuple[Any, ...], Any, Any] | None:
    """The first (where, value, shape) that does not fit, depth first, in file order."""
    if isinstance(shape, Either):
        fitting = [o for o in shape.options if _fits(o, value)]
        if not fitting:
            return where, value, shape
        return _walk(fitting[0], value, where)
    if not _fits(shape, value):
        return where, value, shape
    if isinstance(shape, Table):
        children = [(k, v, shape.keys[k]) for k, v in value.items() if k in shape.keys]
    elif isinstance(shape, MapOf):
        children = [(k, v, shape.value) for k, v in value.items()]
    elif isinstance(shape, ListOf):
        children = [(i, v, shape.item) for i, v in enumerate(value)]
    else:
        return None
    for key, child, inner in children:
        found = _walk(inner, child, (*where, key))
        if found is not None:
            return found
    return None


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "…"


def _label(where: tuple[Any, ...], doc: dict[str, Any] | None = None) -> str:
    """A key as the user wrote it: [table] encoding, [[sections]] 2 ("g-1") datum_offset_m …
    (an entry of a list of tables is named by its place and, when it has one, its id)."""
    if not where:
        return "the file"
    if len(where) == 1:
        return str(where[0])
    head, rest = where[0], list(where[1:])
    if isinstance(rest[0], int):
        index = rest.pop(0)
        block = f"[[{head}]] {index + 1}"
        entry = (doc or {}).get(head)
        if isinstance(entry, list) and index < len(entry) and isinstance(entry[index], dict):
            ident = entry[index].get("id")
            if isinstance(ident, (str, int)) and not isinstance(ident, bool):
                block += f" ({ident!r})"
    elif head in ("normalisation", "offsets") and len(rest) > 1:
        block = f"[{head}.{rest.pop(0)}]"
    else:
        block = f"[{head}]"
    words = [
        repr(k) if head in ("columns", "constants") and i == 0 else str(k)
        for i, k in enumerate(rest)
    ]
    return " ".join([block, *words])


_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(?:#.*)?$")
_KEY = re.compile(r"""^\s*("(?:[^"\\]|\\.)*"|'[^']*'|[A-Za-z0-9_-]+)\s*=""")


def _parts(name: str) -> list[str]:
    """A dotted header name split outside quotes, quotes removed."""
    out, cur, quote = [], "", ""
    for ch in name:
        if quote:
            if ch == quote:
                quote = ""
            else:
                cur += ch
        elif ch in "\"'":
            quote = ch
        elif ch == ".":
            out.append(cur.strip())
            cur = ""
        else:
            cur += ch
    out.append(cur.strip())
    return out


def _unquote(key: str) -> str:
    if key[:1] in "\"'" and key[-1:] == key[:1]:
        inner = key[1:-1]
        return inner.encode().decode("unicode_escape") if key[0] == '"' and "\\" in inner else inner
    return key


def line_of(text: str, where: tuple[Any, ...]) -> int | None:
    """The line (1-based) where the value at ``where`` is written, when it can be found:
    the key's line under the header that holds it (an inline table: its key's line)."""
    header: list[Any] = []
    counts: dict[str, int] = {}
    best: tuple[int, int] | None = None  # (how much of ``where`` it covers, line)
    for number, line in enumerate(text.splitlines(), start=1):
        h = _HEADER.match(line)
        if h and not _KEY.match(line):
            name = _parts(h.group(2))
            if h.group(1) == "[[":
                joined = ".".join(name)
                counts[joined] = counts.get(joined, -1) + 1
                header = [*name, counts[joined]]
            else:
                header = name
            if tuple(header) == tuple(where[: len(header)]) and len(header) == len(where):
                best = max(best or (0, 0), (len(header), number))
            continue
        k = _KEY.match(line)
        if not k:
            continue
        key = _unquote(k.group(1))
        path = (*header, key)
        if len(path) <= len(where) and tuple(where[: len(path)]) == path:
            if best is None or len(path) > best[0]:
                best = (len(path), number)
    return best[1] if best else None
