"""The package's bibliography: every source the records depend on, and the methods.

Sources: the data sources of the exported records, the originals they re-publish, the
sources of the age ties that dated them (a source may give ties only) and the in-house
runs. Each becomes a BibTeX entry of the type its mapping declares (``entry_type``; an
article when a journal is given), with the fields the mapping gives; without them, a
``@misc`` entry whose ``note`` holds the citation as written.

Methods: the time-scale charts the ages pass through, the reference-material values the
in-house runs were normalised with, the VSMOW–VPDB relation, the screening rules'
citations, the age-model method and (with a curve) LOESS. Their details come only from
the project's own files (the chart tables' headers, the reference-material and relation
tables, the rule set, the method docstrings); most of them are short citations (authors,
year, journal, volume:page) without a title, so they are ``@misc`` entries with what is
known — nothing is completed from memory.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

__all__ = ["Entry", "bibtex", "method_entries", "parse_short", "plain_text", "source_entries"]

# The age-model method, as compile/ages/agemodel.py's docstring cites it (title included).
AGE_MODEL_REFERENCE = {
    "author": "Haslett and Parnell",
    "year": "2008",
    "title": "A simple monotone process with application to radiocarbon-dated depth chronologies",
    "journal": "Applied Statistics",
    "volume": "57",
    "pages": "399",
}
# LOESS, as compile/synthesis/curve.py's docstring cites it (no title there).
LOESS_REFERENCE = "Cleveland 1979, JASA 74:829"


@dataclass
class Entry:
    """One bibliography entry: BibTeX key and type, its fields in order, what it is cited
    for, and its plain-text reference."""

    key: str
    kind: str
    fields: dict[str, str]
    role: str
    text: str
    group: str = "source"  # source | method
    extra_roles: list[str] = field(default_factory=list)


_YEAR = r"(?P<year>1[6-9]\d\d|2[01]\d\d)[a-z]?"
_SHORT = re.compile(
    r"^(?P<authors>[A-Z][^\d;()]*?[a-z.])\s*,?\s*\(?" + _YEAR + r"\)?\s*[,.:]?\s*(?P<rest>.*)$"
)
_DOI = re.compile(r"doi:\s*(?P<doi>10\.\d{4,9}/\S+?)[.,;)]?(?:\s|$)", re.IGNORECASE)


def parse_short(text: str) -> dict[str, str]:
    """Author, year, where published and DOI of a short citation ("Kaufman & Knoll 1995,
    Precambrian Research 73:27"); an empty dict when it does not read as one."""
    m = _SHORT.match(text.strip())
    if not m:
        return {}
    names = m.group("authors").strip().rstrip(",")
    others = bool(re.search(r"\bet al\.?$", names))
    names = re.sub(r"\s*\bet al\.?$", "", names)
    parts = [p.strip() for p in re.split(r"\s*(?:&|,|\band\b)\s*", names) if p.strip()]
    if not parts or any(not p[0].isupper() for p in parts):
        return {}
    out = {"author": " and ".join(parts + (["others"] if others else [])), "year": m["year"]}
    rest = m.group("rest").strip().rstrip(".")
    doi = _DOI.search(rest + " ")
    if doi:
        out["doi"] = doi["doi"]
        rest = _DOI.sub("", rest + " ").strip().rstrip(",;").strip()
    if rest:
        out["howpublished"] = rest
    return out


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")[:60] or "ref"


def _pages(p: str) -> str:
    """A page range with BibTeX's double hyphen."""
    return re.sub(r"\s*(?:--|-|–|—)\s*", "--", p.strip())


def _source_fields(s: dict[str, Any]) -> tuple[str, dict[str, str]]:
    """(entry type, fields) of one stored source."""
    authors = [a for a in (s.get("authors") or "").split("|") if a.strip()]
    kind = s.get("entry_type") or ("article" if s.get("journal") else "misc")
    structured = bool(s.get("title"))
    f: dict[str, str] = {}
    if authors:
        f["author"] = " and ".join(authors)
    elif s.get("kind") == "in-house" and s.get("lab"):
        f["author"] = "{" + str(s["lab"]) + "}"
    if s.get("title"):
        f["title"] = str(s["title"])
    if s.get("journal"):
        f["booktitle" if kind in ("incollection", "inproceedings") else "journal"] = str(
            s["journal"]
        )
    if s.get("year") is not None:
        f["year"] = str(s["year"])
    if s.get("volume"):
        f["number" if kind == "techreport" else "volume"] = str(s["volume"])
    if s.get("issue"):
        f["number"] = str(s["issue"])
    if s.get("pages"):
        f["pages"] = _pages(str(s["pages"]))
    if s.get("publisher"):
        where = {"techreport": "institution", "phdthesis": "school", "mastersthesis": "school"}
        f[where.get(kind, "howpublished" if kind in ("misc", "unpublished") else "publisher")] = (
            str(s["publisher"])
        )
    if s.get("doi"):
        f["doi"] = str(s["doi"])
    if s.get("url"):
        f["url"] = str(s["url"])
    if not structured:
        kind = "misc"
        f["note"] = str(s.get("citation") or "")
    return kind, f


def source_entries(
    sources: dict[str, dict[str, Any]],
    roles: dict[str, list[str]],
    unknown: dict[str, str],
) -> list[Entry]:
    """Entries for the stored ``sources`` (id -> row) with what each is cited for
    (``roles``: id -> reasons, in order), and for re-published originals the store does
    not hold (``unknown``: the citation text as the mapping gave it -> the reason)."""
    out = []
    for sid in sorted(roles):
        s = sources.get(sid)
        if s is None:
            continue
        kind, f = _source_fields(s)
        role = "; ".join(roles[sid])
        f["note"] = f"{f['note']} ({role})" if "note" in f else role
        text = str(s.get("citation") or sid) + (f" doi:{s['doi']}" if s.get("doi") else "")
        out.append(Entry(sid, kind, {**f, "keywords": f"strata13 source {sid}"}, role, text))
    for citation, role in sorted(unknown.items()):
        f = {**parse_short(citation)}
        f["note"] = f"{citation} ({role})"
        out.append(Entry(f"original-{_slug(citation)}", "misc", f, role, citation))
    return out


def method_entries(methods: list[tuple[str, str, str, str]]) -> list[Entry]:
    """Entries for method references: (key, title, citation text, what it is cited for).
    A citation text of several references (";"-separated) stays one entry, read for its
    first author and year where it reads as a short citation."""
    out: dict[str, Entry] = {}
    for key, title, citation, role in methods:
        if key in out:
            if role not in out[key].extra_roles and role != out[key].role:
                out[key].extra_roles.append(role)
            continue
        read: dict[str, str] = {}
        for part in citation.split(";"):  # the first part that reads whole (not inside
            if part.count("(") != part.count(")"):  # another's parentheses)
                continue
            read = parse_short(re.sub(r"^\s*(?:cite|see also)\s+", "", part.strip()))
            if read:
                break
        f = {k: v for k, v in read.items() if k != "howpublished"}
        f = {"title": title, **f, "howpublished": citation, "note": role}
        doi = _DOI.search(citation + " ")
        if doi and "doi" not in f:
            f["doi"] = doi["doi"]
        out[key] = Entry(key, "misc", f, role, f"{title}. {citation}", group="method")
    for e in out.values():
        if e.extra_roles:
            e.role = "; ".join([e.role, *e.extra_roles])
            e.fields["note"] = e.role
    return list(out.values())


def age_model_entry(role: str) -> Entry:
    """The age-model method's article (its details from compile/ages/agemodel.py)."""
    f = {**AGE_MODEL_REFERENCE, "note": role}
    text = (
        f"Haslett & Parnell {f['year']}. {f['title']}. {f['journal']} {f['volume']}:{f['pages']}."
    )
    return Entry("method-age-model", "article", f, role, text, group="method")


def _value(k: str, v: str) -> str:
    """A BibTeX field value in braces: LaTeX specials escaped outside DOIs and URLs;
    braces kept when balanced (a corporate author), escaped otherwise."""
    if k in ("doi", "url"):
        return v.replace("{", "").replace("}", "").replace("\\", "/")
    # a backslash that starts no LaTeX command or escape (one at the end would escape the
    # closing brace) is a literal backslash
    # (set aside while the braces are counted, so its own {} are never escaped)
    v = re.sub(r"\\(?![A-Za-z&%#_{}$~^\"'`])", "\x00", v.replace("\x00", ""))
    depth, balanced, escaped = 0, True, False
    for ch in v:
        if not escaped:
            depth += (ch == "{") - (ch == "}")
            balanced = balanced and depth >= 0
        escaped = ch == "\\" and not escaped
    if not balanced or depth:
        v = re.sub(r"(?<!\\)([{}])", r"\\\1", v)
    v = re.sub(r"(?<!\\)([&%#])", r"\\\1", v)
    return v.replace("\x00", "\\textbackslash{}")


def bibtex(entries: list[Entry]) -> str:
    """The entries as BibTeX, sources first, each in the order of its fields."""
    blocks = []
    for e in entries:
        body = ",\n".join(f"  {k} = {{{_value(k, v)}}}" for k, v in e.fields.items() if v)
        blocks.append(f"@{e.kind}{{{e.key},\n{body}\n}}\n")
    return "\n".join(blocks)


def plain_text(entries: list[Entry]) -> str:
    """The entries as a plain-text reference list: sources, then methods."""
    out = []
    for group, heading in (("source", "Data sources"), ("method", "Methods and reference values")):
        items = [e for e in entries if e.group == group]
        if not items:
            continue
        out.append(f"{heading}\n")
        out += [f"[{e.key}] {e.text}\n    cited for: {e.role}\n" for e in items]
        out.append("\n")
    return "".join(out).rstrip("\n") + "\n"
