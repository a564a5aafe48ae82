"""The tables of an export package beside the records, and what every column means.

One source of truth for the package's data dictionary (``columns.csv``): each exported
table's columns and types are declared here or in ``records``, and every column has a
unit, a meaning and (where the values are a closed set) its allowed values. The records'
reported columns take their meaning from the field registry (``fields.FIELDS``); the
derived ones, and the other tables', are described below. :func:`dictionary` refuses a
column that has no description, so a column added to a table without one fails the
export's test rather than shipping undocumented.
"""

from __future__ import annotations

from dataclasses import dataclass

from strata13.schemas.fields import BY_NAME, CONC_FIELDS, DELTA_FIELDS, FIELDS, Field
from strata13.schemas.records import (
    AGE_TIES,
    BIGINT,
    CORRECTIONS,
    DUPLICATES,
    INT,
    REAL,
    RUN_QC,
    RUNS,
    SCREEN_RESULTS,
    TEXT,
)

# the quantities a chain of steps leads to (a δ column, or the age)
CHAIN_QUANTITIES = (*DELTA_FIELDS, "age")

# one row per record, quantity and step (the steps of the record's chain, in order)
CHAINS_LONG = [
    ("record_id", TEXT),
    ("quantity", TEXT),
    ("chain_id", TEXT),
    ("step_order", INT),
    ("step", TEXT),
    ("method", TEXT),
    ("parameters", TEXT),
    ("source", TEXT),
    ("flags", TEXT),
    ("size_permil", REAL),
    ("size_myr", REAL),
    ("value_before", REAL),
    ("value_after", REAL),
    ("value_unit", TEXT),
]
# one row per chain, step and parameter (the parameters of ``chains`` one by one)
CHAIN_PARAMETERS = [
    ("chain_id", TEXT),
    ("step_order", INT),
    ("step", TEXT),
    ("parameter", TEXT),
    ("value", TEXT),
]
# one row per section whose exported records are dated by an age model
AGE_MODELS = [
    ("source_id", TEXT),
    ("section_id", TEXT),
    ("chain_id", TEXT),
    ("method", TEXT),
    ("settings", TEXT),
    ("time_scale", TEXT),
    ("n_ties", INT),
    ("ties_used", TEXT),
    ("n_records", INT),
    ("n_draws", INT),
    ("n_positions", INT),
    ("position_min_m", REAL),
    ("position_max_m", REAL),
    ("age_at_min_position_ma", REAL),
    ("age_at_max_position_ma", REAL),
    ("width95_median_myr", REAL),
    ("width95_max_myr", REAL),
]
SCREEN_RESULTS_EXPORT = [*SCREEN_RESULTS, ("citation", TEXT)]

# file stem -> columns, in the order the package writes them (records: records.py)
PACKAGE_TABLES: dict[str, list[tuple[str, str]]] = {
    "chains": CHAINS_LONG,
    "chain_parameters": CHAIN_PARAMETERS,
    "ties": AGE_TIES,
    "age_models": AGE_MODELS,
    "screen_results": SCREEN_RESULTS_EXPORT,
    "runs": RUNS,
    "run_qc": RUN_QC,
    "corrections": CORRECTIONS,
    "duplicate_decisions": DUPLICATES,
}

# what each table holds, for the dictionary's readers and the package README
TABLE_MEANINGS: dict[str, str] = {
    "records": "one row per analysis: hierarchy, material, δ values as reported and "
    "harmonised (‰ VPDB), screening inputs, ages, paleogeography, screen state",
    "chains": "every step from each reported value to its harmonised value (and from the "
    "reported age or position to the age): method, parameters, source, values before and after",
    "chain_parameters": "the parameters of each chain step, one per row",
    "ties": "the age ties of the sections the records come from, as given by their sources",
    "age_models": "per section: the ties used on the store's chart, the model's settings and "
    "a summary of its Monte Carlo age draws",
    "screen_results": "per record and screening rule: the outcome and its detail",
    "runs": "reference-material measurements of the in-house runs the records come from",
    "run_qc": "per run and isotope: the normalisation line, its checks and the accepted "
    "reference values",
    "corrections": "the user's corrections of published values in the exported records",
    "duplicate_decisions": "decisions on probable duplicates that involve exported records",
}

PERMIL, MA, MYR, M = "‰", "Ma", "Myr", "m"
SCREEN_STATES = "pass|warn|fail|untested"
OUTCOMES = "pass|warn|fail|untested|not applicable"

_DELTA_NAMES = {"d13c_carb": "δ13C carbonate", "d18o_carb": "δ18O carbonate"}
_DELTA_NAMES["d13c_org"] = "δ13C organic matter"


def _delta_meanings() -> dict[str, tuple[str, str, str]]:
    out = {}
    for d in DELTA_FIELDS:
        name = _DELTA_NAMES[d]
        out[d] = (PERMIL, f"{name}, harmonised onto VPDB (blank: not reported or pending)", "")
        out[f"{d}_scale"] = (
            "",
            f"scale the source reported {name} on (raw: an in-house run before normalisation)",
            "|".join(_scales(d)),
        )
        out[f"{d}_sd"] = (PERMIL, f"SD of a published mean of {name}", "")
        out[f"{d}_precision"] = (
            PERMIL,
            f"analytical precision (1σ) of {name} used downstream: the sheet's, or the "
            "run's replicate standards",
            "",
        )
        out[f"{d}_chain"] = ("", f"id of the chain of steps to harmonised {name} (chains)", "")
        out[f"{d}_status"] = (
            "",
            f"harmonised, or pending with the reason the {name} value is not harmonised yet",
            "",
        )
        out[f"{d}_normalisation"] = (
            "",
            f"how the authors normalised {name} (JSON: method and the anchors they assumed)",
            "",
        )
    return out


def _scales(d: str) -> tuple[str, ...]:
    from strata13.schemas.fields import DELTA_SCALES

    return DELTA_SCALES[d]


def _conc_meanings() -> dict[str, tuple[str, str, str]]:
    from strata13.schemas.fields import CONC_BASES

    out = {}
    for c in CONC_FIELDS:
        f = BY_NAME[c]
        out[f"{c}_qualifier"] = (
            "",
            f"qualifier of {f.doc} (< or >: censored, the value is the limit; bdl: below "
            "the detection limit, value empty)",
            "<|>|bdl",
        )
        out[f"{c}_dl"] = (f.stored_unit or "", f"detection limit of {f.doc}", "")
        out[f"{c}_basis"] = ("", f"what {f.doc} was measured on", "|".join(CONC_BASES))
    return out


RECORD_MEANINGS: dict[str, tuple[str, str, str]] = {
    "record_id": ("", "stable id of the analysis: hash of source, section, sample, replicate", ""),
    "lat": ("°", "present-day latitude of the locality, WGS84, decimal degrees", ""),
    "lon": ("°", "present-day longitude of the locality, WGS84, decimal degrees", ""),
    "position_m": (
        M,
        "stratigraphic position of a point sample, from the section's datum (position_kind)",
        "",
    ),
    "source_id": ("", "the source the record was read from (bibliography key)", ""),
    "age_ma": (MA, "age on the store's time scale", ""),
    "age_sigma_ma": (MA, "1σ of age_ma", ""),
    "age_lo95_ma": (MA, "younger end of the 95 % age-model interval", ""),
    "age_hi95_ma": (MA, "older end of the 95 % age-model interval", ""),
    "age_basis": ("", "how age_ma was obtained", "age model|reported|stage only"),
    "time_scale": ("", "time-scale version of age_ma", ""),
    "age_status": ("", "dated (and how), or pending with the reason", ""),
    "age_chain": ("", "id of the chain of steps that gave age_ma (chains, age_models)", ""),
    "plate_id": ("", "plate (a name in the rotation model) the locality sits on", ""),
    "plate_override": ("", "plate named in the mapping for the locality, if any", ""),
    "paleolat": ("°", "paleolatitude at age_ma from the rotation model", ""),
    "paleolon": ("°", "paleolongitude at age_ma from the rotation model", ""),
    "paleolat_sigma": ("°", "1σ of paleolat from the model's pole uncertainties", ""),
    "paleo_model": ("", "rotation model used for paleolat and paleolon", ""),
    "paleo_frame": ("", "reference frame of the rotation model", ""),
    "paleo_status": ("", "placed, or pending with the reason", ""),
    "screen": ("", "overall diagenetic screen state (untested is not pass)", SCREEN_STATES),
    "screen_reason": ("", "which rules gave the screen state", ""),
    "sheet": ("", "sheet of the file the record was read from", ""),
    "sheet_row": ("", "row of the sheet (1-based, as a spreadsheet shows it)", ""),
    "file_name": ("", "file the record was read from", ""),
    "big_delta_13c": (PERMIL, "Δ13C = δ13C carbonate − δ13C organic (harmonised values)", ""),
    "corrected_fields": ("", "fields a stored correction changed (JSON list; corrections)", ""),
    **_delta_meanings(),
    **_conc_meanings(),
}


def _field_meaning(f: Field) -> tuple[str, str, str]:
    from strata13.schemas.vocabularies import vocabulary

    allowed = "|".join(vocabulary(f.vocab).terms) if f.vocab else ""
    degrees = f.kind == "coord" or f.unit_kind == "degrees"
    unit = "°" if degrees else f.stored_unit or ""
    doc = f.doc
    if f.kind == "conc":
        doc = f"{doc} as reported, converted to {unit}"
    elif f.unit_kind and f.kind != "delta" and f.stored.endswith("_reported"):
        doc = f"{doc}, as the sheet states it"
    return unit, doc, allowed


OTHER_MEANINGS: dict[str, dict[str, tuple[str, str, str]]] = {
    "chains": {
        "record_id": ("", "the record whose value the step acts on", ""),
        "quantity": ("", "the value the chain leads to", "|".join(CHAIN_QUANTITIES)),
        "chain_id": ("", "id of the chain (stored once, shared by records)", ""),
        "step_order": ("", "position of the step in its chain (1 = first)", ""),
        "step": ("", "what the step does", ""),
        "method": ("", "how it does it", ""),
        "parameters": ("", "the step's parameters, name = value; … (also chain_parameters)", ""),
        "source": ("", "on whose authority (authors' statement, reference table, setting)", ""),
        "flags": ("", "warnings the step raised, separated by ; ", ""),
        "size_permil": (PERMIL, "largest change the δ step made over the records it acted on", ""),
        "size_myr": (MYR, "largest change the age step made over the records it acted on", ""),
        "value_before": ("", "the record's value before the step (blank: not a map of it)", ""),
        "value_after": ("", "the record's value after the step (blank: not a map of it)", ""),
        "value_unit": ("", "unit of value_before and value_after", f"{PERMIL}|{MA}"),
    },
    "chain_parameters": {
        "chain_id": ("", "id of the chain (chains.chain_id)", ""),
        "step_order": ("", "position of the step in its chain", ""),
        "step": ("", "what the step does", ""),
        "parameter": ("", "parameter name", ""),
        "value": ("", "parameter value as text (lists and tables as JSON)", ""),
    },
    "ties": {
        "source_id": ("", "source of the section the tie dates", ""),
        "section_id": ("", "section the tie dates", ""),
        "position_m": (M, "stratigraphic position of the tie", ""),
        "age_ma": (
            MA,
            "age of the tie as given (blank: a chart boundary taken from its chart)",
            "",
        ),
        "age_sigma_ma": (MA, "1σ of the tie's age as given", ""),
        "basis": (
            "",
            "what dates the tie",
            "chart boundary|biozone boundary|radiometric|astrochronologic|correlation",
        ),
        "chart": ("", "time-scale version the tie's age is on", ""),
        "note": ("", "the source's note", ""),
        "tie_source_id": ("", "source that gave the tie (bibliography key)", ""),
        "tie_id": ("", "the tie's name within its section", ""),
        "position_sigma_m": (M, "1σ of the tie's position", ""),
        "confidence": ("", "how the source stated the age error (converted to 1σ)", "1σ|2σ|95%"),
        "boundary": ("", "chart or biozone boundary the tie sits at", ""),
        "anchor": ("", "for an astrochronologic tie: the tie its duration counts from", ""),
    },
    "age_models": {
        "source_id": ("", "source of the section", ""),
        "section_id": ("", "section", ""),
        "chain_id": ("", "id of the age chain of the section's records", ""),
        "method": ("", "the age-model method", ""),
        "settings": ("", "the model's settings, name = value; …", ""),
        "time_scale": ("", "time scale of the model's ages", ""),
        "n_ties": ("", "number of ties used", ""),
        "ties_used": (
            "",
            "each tie: name, position, age ± 1σ on the store's chart, conversion",
            "",
        ),
        "n_records": ("", "exported records of the section", ""),
        "n_draws": ("", "number of Monte Carlo age draws per position", ""),
        "n_positions": ("", "number of distinct sample positions drawn", ""),
        "position_min_m": (M, "lowest drawn position", ""),
        "position_max_m": (M, "highest drawn position", ""),
        "age_at_min_position_ma": (MA, "median draw at position_min_m", ""),
        "age_at_max_position_ma": (MA, "median draw at position_max_m", ""),
        "width95_median_myr": (MYR, "median over positions of the 95 % interval's width", ""),
        "width95_max_myr": (MYR, "largest 95 % interval width over positions", ""),
    },
    "screen_results": {
        "record_id": ("", "the record", ""),
        "rule": ("", "screening rule (a rule of thumb) by name", ""),
        "outcome": ("", "the rule's outcome for the record", OUTCOMES),
        "detail": ("", "the values and limit behind the outcome", ""),
        "source_id": ("", "source of the record", ""),
        "citation": ("", "the rule's citation as the rule set gives it", ""),
    },
    "runs": {
        "source_id": ("", "the in-house source", ""),
        "run_id": ("", "analytical run", ""),
        "material": ("", "reference material measured", ""),
        "d13c_measured": (PERMIL, "δ13C measured against the working gas (raw)", ""),
        "d18o_measured": (PERMIL, "δ18O measured against the working gas (raw)", ""),
        "note": ("", "the sheet's note", ""),
        "run_position": ("", "position of the measurement in the run", ""),
        "sheet_row": ("", "row of the sheet", ""),
    },
    "run_qc": {
        "source_id": ("", "the in-house source", ""),
        "run_id": ("", "analytical run", ""),
        "isotope": ("", "isotope of the normalisation", "d13c|d18o"),
        "slope": ("", "slope of the normalisation line (VPDB = slope × raw + intercept)", ""),
        "intercept": (PERMIL, "intercept of the normalisation line", ""),
        "n_anchors": ("", "number of anchor materials", ""),
        "anchors": ("", "anchor materials", ""),
        "residuals_json": (PERMIL, "check materials' offsets from accepted values (JSON)", ""),
        "precision_1s": (PERMIL, "run precision (1σ) from replicate standards", ""),
        "drift_per_position": (PERMIL, "drift per run position (blank: not corrected)", ""),
        "warnings": ("", "warnings of the run", ""),
        "drift_sigma": (PERMIL, "1σ of drift_per_position", ""),
        "check_status": ("", "worst of the run's checks", "pass|warn|untested"),
        "check_detail": ("", "each check: offset, tolerance and how it was set", ""),
        "accepted_json": ("", "accepted values used: material, value set, source (JSON)", ""),
    },
    "corrections": {
        "correction_id": ("", "id of the correction", ""),
        "record_id": ("", "the corrected record", ""),
        "source_id": ("", "source of the record", ""),
        "field": ("", "field corrected", ""),
        "value_text": ("", "value the field takes", ""),
        "why": ("", "the user's reason", ""),
        "original_text": ("", "value as published", ""),
        "created_utc": ("", "when the correction was stored (UTC)", ""),
    },
    "duplicate_decisions": {
        "record_a": ("", "first record of the pair", ""),
        "record_b": ("", "second record of the pair", ""),
        "decision": ("", "the user's decision", "confirm|reject"),
        "note": ("", "the user's note", ""),
        "drop_record_id": ("", "record left out of views and exports (confirmed pairs)", ""),
        "decided_utc": ("", "when the decision was stored (UTC)", ""),
    },
}

_TYPE_WORDS = {TEXT: "text", REAL: "float64", INT: "int32", BIGINT: "int64"}


@dataclass(frozen=True)
class ColumnEntry:
    """One row of the data dictionary."""

    table: str
    column: str
    type: str
    unit: str
    meaning: str
    allowed: str


def describe(table: str, column: str) -> tuple[str, str, str] | None:
    """(unit, meaning, allowed values) of an exported column, or None if undescribed."""
    if table == "records":
        if column in RECORD_MEANINGS:
            return RECORD_MEANINGS[column]
        by_stored = {f.stored: f for f in FIELDS}
        return _field_meaning(by_stored[column]) if column in by_stored else None
    return OTHER_MEANINGS.get(table, {}).get(column)


def dictionary(tables: dict[str, list[tuple[str, str]]]) -> list[ColumnEntry]:
    """The dictionary of ``tables`` (name -> columns with stored types), in order; raises
    ValueError naming every column without a description."""
    rows, missing = [], []
    for table, columns in tables.items():
        for column, sqltype in columns:
            got = describe(table, column)
            if got is None or not got[1].strip():
                missing.append(f"{table}.{column}")
                continue
            unit, meaning, allowed = got
            rows.append(ColumnEntry(table, column, _TYPE_WORDS[sqltype], unit, meaning, allowed))
    if missing:
        raise ValueError(
            f"no dictionary entry for {', '.join(missing)} (schemas/package_tables.py)"
        )
    return rows
