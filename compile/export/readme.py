"""README.txt of an export package: what a data-repository curator asks of a deposit.

Title, creators (placeholders where only the user knows), the licence left for the user to
choose (said plainly), the version, what each file is, how the values were derived, how to
cite and how to reproduce. When the exported sources describe their data as invented (the
demo's do), the README says so first. Nothing in it depends on the clock, not even the
store version's commit time (the manifest has it), so the same data give the same README.
"""

from __future__ import annotations

import textwrap
from typing import TYPE_CHECKING, Any

from strata13.compile.export.bibliography import Entry
from strata13.compile.export.citing import COMMON_PRACTICE
from strata13.schemas.package_tables import TABLE_MEANINGS

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = ["readme"]

_FIXED = {
    "columns.csv": "data dictionary: table, column, type, unit, meaning and allowed values of "
    "every column of every table in this package",
    "bibliography.bib": "BibTeX entries of every source the records depend on (data, "
    "re-published originals, sources of age ties, in-house runs) and of the methods and "
    "reference values used; each entry's note says what it is cited for",
    "bibliography.txt": "the same references as plain text",
    "README.txt": "this file",
    "manifest.json": "tool, schema and store versions, settings, filters, counts, the command "
    "that reproduces this package, and the SHA-256 and size of every other file",
}
_CURVE = {
    "curve.csv": "the composite curve on its age grid: centre and uncertainty band per group",
    "bins.csv": "section-weighted bin statistics under the curve",
    "influence.csv": "how much each section moves the curve (leave-one-section-out)",
    "robustness_curves.csv": "the curve refitted with other settings, for comparison",
    "curve_manifest.json": "the curve's parameters, notes and files",
}


def describe_file(name: str) -> str:
    """What one file of the package is."""
    if name in _FIXED:
        return _FIXED[name]
    stem, _, ext = name.rpartition(".")
    fmt = {"parquet": "Parquet", "csv": "CSV (UTF-8, comma-separated)"}.get(ext, ext.upper())
    if "/" in name:
        folder, base = name.split("/", 1)
        if base in _CURVE:
            return f"{_CURVE[base]} ({folder}/)"
        if ext in ("png", "svg", "pdf"):
            return f"figure of the composite curve, {ext.upper()} ({folder}/)"
        return f"part of the composite curve ({folder}/)"
    if stem in TABLE_MEANINGS:
        if ext == "parquet":
            return f"the same table as {stem}.csv, as Parquet (column types as in columns.csv)"
        return f"{TABLE_MEANINGS[stem]}; {fmt}"
    return fmt


def _wrap(text: str, indent: str = "") -> str:
    return textwrap.fill(text, width=88, initial_indent=indent, subsequent_indent=indent + "  ")


def _authors(entries: list[Entry]) -> list[str]:
    names: list[str] = []
    for e in entries:
        if e.group != "source":
            continue
        for a in e.fields.get("author", "").split(" and "):
            a = a.strip().strip("{}")
            if a and a != "others" and a not in names:
                names.append(a)
    return names


def invented(entries: list[Entry]) -> int:
    """How many source entries describe their data as invented."""
    return sum(
        1
        for e in entries
        if e.group == "source" and "invented" in " ".join([e.text, *e.fields.values()]).lower()
    )


def _interval(filters: dict[str, Any]) -> str:
    iv = filters.get("interval")
    if isinstance(iv, dict) and iv.get("given"):
        return (
            f" for {iv['given']} ({iv.get('older_ma')}–{iv.get('younger_ma')} Ma, "
            f"{iv.get('time_scale')})"
        )
    rng = filters.get("interval_ma")
    if rng:
        return f" for {rng[1]}–{rng[0]} Ma"
    return ""


def readme(
    fields: dict[str, Any],
    files: list[str],
    entries: list[Entry],
    related: dict[str, pa.Table],
    *,
    demo: bool = False,
) -> str:
    """The README.txt text (``fields``: the manifest's fields; ``files``: every file
    written so far, this one and the manifest are added; ``demo``: the store was made by
    ``strata13 demo``)."""
    counts = fields["counts"]
    settings = fields.get("settings") or {}
    filters = fields.get("filters") or {}
    n_sources = sum(1 for e in entries if e.group == "source")
    title = (
        f"Carbonate carbon- and oxygen-isotope compilation: {counts['records']} records from "
        f"{counts['sources']} sources{_interval(filters)}, strata13 store version "
        f"{fields['store_version']}"
    )
    out = [title, "=" * min(len(title), 88), ""]
    fake = invented(entries)
    if demo or fake:
        why = "The store was made by `strata13 demo`" if demo else "This is not the demo, but"
        out += [
            _wrap(
                f"WARNING: INVENTED DATA. {why}; {fake} of the {n_sources} cited sources "
                "describe their data as invented. No value from an invented source is a "
                "measurement; do not use it as a record of anything."
            ),
            "",
        ]
    authors = _authors(entries)
    screened = filters.get("screened") or "all"
    screened = (
        "every screen state (pass, warn, fail, untested)"
        if screened == "all"
        else f"screen states {screened.replace(',', ', ')} only"
    )
    out += [
        "Title: " + title,
        "Creator(s): [FILL IN: the compiler's name(s), affiliation(s) and ORCID iD(s)]",
        _wrap(
            "Authors of the compiled data (from the sources): "
            + ("; ".join(authors) if authors else "[FILL IN: none are recorded in the store]")
        ),
        "Publisher / repository: [FILL IN: the repository you deposit in]",
        "Publication date: [FILL IN: the date of deposit]",
        _wrap(
            "Licence: NOT CHOSEN. strata13 does not choose a licence; state the one you "
            "choose here before you deposit (for example CC BY 4.0 or CC0 1.0). The compiled "
            "values stay subject to the terms of their original publications."
        ),
        _wrap(
            f"Version: strata13 store version {fields['store_version']} (its commit time is "
            f"in manifest.json), settings hash {fields['settings_hash']}, schema version "
            f"{fields['schema_version']}, strata13 {fields['tool_version']}"
        ),
        "Keywords: carbon isotopes; oxygen isotopes; carbonate; chemostratigraphy; "
        "data compilation",
        "",
        "Description",
        "-----------",
        _wrap(
            f"{counts['records']} analyses (δ13C and δ18O of carbonate, δ13C of organic "
            f"matter where reported) from {counts['sources']} sources and "
            f"{counts['sections']} sections or cores{_interval(filters)}, with "
            f"{screened}. Every value is given as reported and harmonised beside it; the "
            "steps between them, the age ties and age models, the screening outcomes, the "
            "in-house runs' quality control, the user's corrections and the duplicate "
            "decisions are in their own tables, restricted to these records."
        ),
        "",
        "Files",
        "-----",
    ]
    for name in sorted({*files, "README.txt", "manifest.json"}):
        rows = ""
        stem = name.rpartition(".")[0]
        if "/" not in name and stem in counts and name.endswith(".csv"):
            rows = f" [{counts[stem]} rows]"
        out.append(_wrap(f"{name}: {describe_file(name)}{rows}", "  "))
    chart = settings.get("time_scale", "the store's chart")
    common = sum(
        1
        for c in set(related["screen_results"].column("citation").to_pylist())
        if c and c.strip().lower() == COMMON_PRACTICE
    )
    models = related["age_models"].num_rows
    out += [
        "",
        "How the values were derived",
        "---------------------------",
        _wrap(
            "- Reported values are never changed. Harmonised δ values (‰ VPDB) sit beside "
            "them; chains.csv lists, per record, every step between the two (method, "
            "parameters, source, value before and after)."
        ),
        _wrap(
            "- δ18O reported on VSMOW is converted with the relation "
            f"{settings.get('vsmow_constants', '(none stored)')}; in-house runs are "
            "normalised on their reference materials (runs.csv, run_qc.csv; accepted values "
            "cited in the bibliography)."
        ),
        _wrap(
            f"- Ages are on the time scale {chart}. {models} section(s) are dated by "
            "whole-section Monte Carlo age models between their ties (ties.csv, "
            "age_models.csv); age_sigma_ma is 1σ, age_lo95_ma/age_hi95_ma the 95 % interval."
        ),
        _wrap(
            "- Screening for diagenesis uses rules of thumb (screen_results.csv): flags, "
            "never deletions; 'untested' is not 'pass'."
            + (
                f" {common} rule citation(s) say only 'common practice' and have no "
                "literature reference."
                if common
                else ""
            )
        ),
        _wrap(
            f"- Paleo-positions: rotation model {settings.get('rotation_model_name', '-')}, "
            f"frame {settings.get('rotation_frame', '-')}."
        ),
        _wrap(
            f"- Duplicates: {counts.get('duplicate_decisions', 0)} decision(s) involve these "
            "records; a confirmed duplicate is left out unless --keep-duplicates was given. "
            f"Corrections: {counts.get('corrections', 0)} (corrections.csv; the published "
            "value is kept)."
        ),
        "- Blank cells are unknown or not applicable, never zero.",
        "",
        "How to cite",
        "-----------",
        _wrap(
            "Cite this package as its repository gives it, and the sources and methods in "
            "bibliography.bib (bibliography.txt): the compiled values belong to their "
            "authors."
        ),
        "",
        "Reproduce",
        "---------",
        _wrap(f"{fields['reproduce']}"),
        _wrap(
            "manifest.json holds the SHA-256 of every file; the same command on the same "
            "store version writes the same bytes."
        ),
    ]
    return "\n".join(out) + "\n"
