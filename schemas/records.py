"""Stored tables and the pandera schema that a sheet's rows must pass.

``ANALYSES`` is the record table: one row per analysis, carrying its hierarchy (source,
locality, section, sample), material, isotopes as reported and harmonised, screening
inputs with qualifiers and basis, ages, paleogeography and lineage. Columns that later
derive steps fill are present now and nullable. The other tables hold the hierarchy
(sources, localities, sections, samples) and the store's bookkeeping.

Types are fixed here, never inferred, so an export is byte-stable (no float32 anywhere).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from strata13.schemas.fields import BY_NAME, CONC_FIELDS, DELTA_FIELDS, FIELDS

if TYPE_CHECKING:
    import pandera.pandas as pa_schema
    import pyarrow as pa

TEXT, REAL, INT, BIGINT, BLOB = "VARCHAR", "DOUBLE", "INTEGER", "BIGINT", "BLOB"


def _delta_columns() -> list[tuple[str, str]]:
    out = []
    for d in DELTA_FIELDS:
        out += [
            (f"{d}_reported", REAL),
            (f"{d}_scale", TEXT),
            (f"{d}_sd", REAL),
            (f"{d}_precision", REAL),
            (d, REAL),
            (f"{d}_chain", TEXT),
            (f"{d}_status", TEXT),
        ]
    return out


def _conc_columns() -> list[tuple[str, str]]:
    out = []
    for c in CONC_FIELDS:
        out += [
            (BY_NAME[c].stored, REAL),
            (f"{c}_qualifier", TEXT),
            (f"{c}_dl", REAL),
            (f"{c}_basis", TEXT),
        ]
    return out


ANALYSES: list[tuple[str, str]] = [
    ("record_id", TEXT),
    ("source_id", TEXT),
    ("locality_id", TEXT),
    ("locality_name", TEXT),
    ("section_id", TEXT),
    ("sample_id", TEXT),
    ("replicate", INT),
    ("n_replicates", INT),
    ("lat", REAL),
    ("lon", REAL),
    ("position_m", REAL),
    ("top_m", REAL),
    ("base_m", REAL),
    ("position_kind", TEXT),
    ("lithostrat_unit", TEXT),
    ("lithology", TEXT),
    ("texture", TEXT),
    ("component", TEXT),
    ("mineralogy", TEXT),
    ("setting", TEXT),
    ("preservation", TEXT),
    *_delta_columns(),
    *_conc_columns(),
    ("age_reported_ma", REAL),
    ("age_reported_sigma_ma", REAL),
    ("age_reported_scale", TEXT),
    ("stage_reported", TEXT),
    ("age_ma", REAL),
    ("age_sigma_ma", REAL),
    ("age_basis", TEXT),
    ("time_scale", TEXT),
    ("age_status", TEXT),
    ("plate_id", TEXT),  # the plate's name in the rotation model (INTEGER before names)
    ("paleolat", REAL),
    ("paleolon", REAL),
    ("paleo_model", TEXT),
    ("paleo_frame", TEXT),
    ("paleo_status", TEXT),
    ("reported_paleolat", REAL),
    ("reported_paleolon", REAL),
    ("screen", TEXT),
    ("original_source_id", TEXT),
    ("run_id", TEXT),
    ("note", TEXT),
    ("sheet", TEXT),
    ("sheet_row", INT),
    ("row_hash", BIGINT),
    # added with age models; appended so older stores migrate in place
    ("age_chain", TEXT),
    ("age_lo95_ma", REAL),
    ("age_hi95_ma", REAL),
    # how the authors normalised each δ column (JSON: method and assumed anchor values)
    ("d13c_carb_normalisation", TEXT),
    ("d18o_carb_normalisation", TEXT),
    ("d13c_org_normalisation", TEXT),
    ("run_position", REAL),
    ("big_delta_13c", REAL),  # Δ13C = δ13C carb − δ13C org
    ("corrected_fields", TEXT),  # JSON list of the fields a stored correction changed
    ("plate_override", TEXT),  # the mapping's plate (a name) for the locality (displaced terranes)
    ("paleolat_sigma", REAL),  # 1σ of paleolatitude from the model's pole uncertainties
    ("screen_reason", TEXT),  # why the record has its screen state (rules named)
    # analytical precision (1σ) as the sheet states it; ``{d}_precision`` is derived from it
    # (or, for an in-house run, from the run's replicate standards when the sheet gives none)
    *((f"{d}_precision_reported", REAL) for d in DELTA_FIELDS),
    ("file_name", TEXT),  # the file the record was read from (a source may hold several)
]

# Columns whose stored type changed: (table, column) -> the type they had before. A store
# written before keeps reading (its views cast them to today's type) and the first write
# converts them in place (``Store.migrate``): the old plate numbers become text.
RETYPED: dict[tuple[str, str], str] = {
    ("analyses", "plate_id"): INT,
    ("analyses", "plate_override"): INT,
}

SOURCES = [
    ("source_id", TEXT),
    ("citation", TEXT),
    ("year", INT),
    ("doi", TEXT),
    ("url", TEXT),
    ("kind", TEXT),
    ("lab", TEXT),
    ("republishes", TEXT),
    ("note", TEXT),
    ("file_name", TEXT),
    ("file_sha256", TEXT),
    ("mapping_sha256", TEXT),
    ("n_records", BIGINT),
    ("ingested_version", BIGINT),
    ("schema_version", TEXT),
    # bibliographic fields from the mapping's [source] block (the export's BibTeX); authors
    # are "|"-separated names as written ("Pell, I.|Sarrow, D."); appended so stores migrate
    ("entry_type", TEXT),
    ("authors", TEXT),
    ("title", TEXT),
    ("journal", TEXT),
    ("volume", TEXT),
    ("issue", TEXT),
    ("pages", TEXT),
    ("publisher", TEXT),
]
LOCALITIES = [
    ("source_id", TEXT),
    ("locality_id", TEXT),
    ("name", TEXT),
    ("lat", REAL),
    ("lon", REAL),
    ("precision_km", REAL),
    ("aliases", TEXT),
    ("note", TEXT),
]
SECTIONS = [
    ("source_id", TEXT),
    ("section_id", TEXT),
    ("locality_id", TEXT),
    ("name", TEXT),
    ("datum", TEXT),
    ("position_kind", TEXT),
    ("datum_offset_m", REAL),
    ("offset_from", TEXT),
    ("offset_source", TEXT),
    ("note", TEXT),
    # the section's own accumulation prior for its age model ([[sections]] accumulation);
    # empty: the store's setting
    ("accumulation_shape", REAL),
    ("accumulation_segment_m", REAL),
]
SAMPLES = [
    ("source_id", TEXT),
    ("section_id", TEXT),
    ("sample_id", TEXT),
    ("position_m", REAL),
    ("top_m", REAL),
    ("base_m", REAL),
    ("lithostrat_unit", TEXT),
]
QUARANTINE = [
    ("source_id", TEXT),
    ("sheet", TEXT),
    ("sheet_row", INT),
    ("cells_json", TEXT),
    ("reasons", TEXT),
    ("ingested_version", BIGINT),
    ("file_name", TEXT),
]
SETTINGS = [("key", TEXT), ("value_json", TEXT), ("hash", TEXT)]
COMMITS = [
    ("version", BIGINT),
    ("command", TEXT),
    ("detail", TEXT),
    ("tool_version", TEXT),
    ("schema_version", TEXT),
    ("settings_hash", TEXT),
    ("summary_json", TEXT),
]
REGIONS = [("name", TEXT), ("geojson", TEXT), ("source_file", TEXT)]
CHAINS = [("chain_id", TEXT), ("steps_json", TEXT)]
# Filled by later capabilities; present now so no migration is needed.
# reference-material measurements of in-house runs (raw, on the working gas)
RUNS = [
    ("source_id", TEXT),
    ("run_id", TEXT),
    ("material", TEXT),
    ("d13c_measured", REAL),
    ("d18o_measured", REAL),
    ("note", TEXT),
    ("run_position", REAL),
    ("sheet_row", INT),
]
# per run and isotope: the normalisation line and its quality (derived; replaced on recompute)
RUN_QC = [
    ("source_id", TEXT),
    ("run_id", TEXT),
    ("isotope", TEXT),
    ("slope", REAL),
    ("intercept", REAL),
    ("n_anchors", INT),
    ("anchors", TEXT),
    ("residuals_json", TEXT),
    ("precision_1s", REAL),
    ("drift_per_position", REAL),
    ("warnings", TEXT),
    ("drift_sigma", REAL),  # 1σ of drift_per_position
    ("check_status", TEXT),  # pass | warn | untested (the worst of the run's checks)
    ("check_detail", TEXT),  # each check: offset, tolerance and how it was set
    ("accepted_json", TEXT),  # the accepted values used: material, value set, source
]
# source_id/section_id: the section a tie dates; tie_source_id: the source that gave the tie
# (a tie source of its own survives re-ingests of the data it dates). age_sigma_ma is 1σ.
AGE_TIES = [
    ("source_id", TEXT),
    ("section_id", TEXT),
    ("position_m", REAL),
    ("age_ma", REAL),
    ("age_sigma_ma", REAL),
    ("basis", TEXT),
    ("chart", TEXT),
    ("note", TEXT),
    ("tie_source_id", TEXT),
    ("tie_id", TEXT),
    ("position_sigma_m", REAL),
    ("confidence", TEXT),
    ("boundary", TEXT),
    ("anchor", TEXT),
]
# Age-model draws per section, chunked: ages (float32, draws x positions, row-major) at the
# section's distinct sample positions, on the store's time scale.
AGE_DRAWS = [
    ("source_id", TEXT),
    ("section_id", TEXT),
    ("chunk", INT),
    ("positions_json", TEXT),
    ("n_draws", INT),
    ("draws", BLOB),
]
# the corrections layer: a user's fix of one field of one record, with the reason and what
# was published; applied by the derive engine on every derivation of that record
CORRECTIONS = [
    ("correction_id", TEXT),
    ("record_id", TEXT),
    ("source_id", TEXT),
    ("field", TEXT),
    ("value_text", TEXT),
    ("why", TEXT),
    ("original_text", TEXT),
    ("created_utc", TEXT),
]
# decisions on probable duplicates: a confirmed pair names the record views leave out
DUPLICATES = [
    ("record_a", TEXT),
    ("record_b", TEXT),
    ("decision", TEXT),
    ("note", TEXT),
    ("drop_record_id", TEXT),
    ("decided_utc", TEXT),
]
SCREEN_RESULTS = [
    ("record_id", TEXT),
    ("rule", TEXT),
    ("outcome", TEXT),
    ("detail", TEXT),
    ("source_id", TEXT),
]
# per source and rule, the outcome and detail most of its records share: screen_results
# then stores only the rows that differ (compile/store/screen_rows.py)
SCREEN_COMMON = [
    ("source_id", TEXT),
    ("rule", TEXT),
    ("outcome", TEXT),
    ("detail", TEXT),
]

TABLES: dict[str, list[tuple[str, str]]] = {
    "analyses": ANALYSES,
    "sources": SOURCES,
    "localities": LOCALITIES,
    "sections": SECTIONS,
    "samples": SAMPLES,
    "quarantine": QUARANTINE,
    "settings": SETTINGS,
    "commits": COMMITS,
    "regions": REGIONS,
    "chains": CHAINS,
    "runs": RUNS,
    "age_ties": AGE_TIES,
    "age_draws": AGE_DRAWS,
    "screen_results": SCREEN_RESULTS,
    "screen_common": SCREEN_COMMON,
    "run_qc": RUN_QC,
    "corrections": CORRECTIONS,
    "duplicates": DUPLICATES,
}
# Tables replaced source by source on (re-)ingest.
PER_SOURCE = ("analyses", "sources", "localities", "sections", "samples", "quarantine", "runs")

# Reported vs derived, per analyses column: derive fills exactly these (from the reported
# columns and the store's settings); every other column holds what the source reported (or
# where it sits: sheet, row) and is never changed after ingest.
DERIVED: frozenset[str] = frozenset(
    {
        *DELTA_FIELDS,
        *(f"{d}_chain" for d in DELTA_FIELDS),
        *(f"{d}_status" for d in DELTA_FIELDS),
        *(f"{d}_precision" for d in DELTA_FIELDS),
        "age_ma",
        "age_sigma_ma",
        "age_basis",
        "time_scale",
        "age_status",
        "age_chain",
        "age_lo95_ma",
        "age_hi95_ma",
        "big_delta_13c",
        "paleolat_sigma",
        "plate_id",
        "paleolat",
        "paleolon",
        "paleo_model",
        "paleo_frame",
        "paleo_status",
        "screen",
        "screen_reason",
        "row_hash",
    }
)
REPORTED: tuple[str, ...] = tuple(c for c, _ in ANALYSES if c not in DERIVED)

# The public `records` view: DESIGN.md's names first, then every other analyses column.
RECORDS_PUBLIC = [
    "record_id",
    "source_id",
    "locality_id",
    "section_id",
    "sample_id",
    "replicate",
    "lat",
    "lon",
    "position_m",
    "position_kind",
    "age_ma",
    "age_sigma_ma",
    "age_basis",
    "time_scale",
    "lithology",
    "texture",
    "component",
    "mineralogy",
    "setting",
    "d13c_carb",
    "d13c_carb_reported",
    "d13c_carb_scale",
    "d18o_carb",
    "d18o_carb_reported",
    "d18o_carb_scale",
    "d13c_org",
    "d13c_org_reported",
    "d13c_org_scale",
    "plate_id",
    "paleolat",
    "paleolon",
    "screen",
]
RECORDS_COLUMNS = RECORDS_PUBLIC + [
    c for c, _ in ANALYSES if c not in RECORDS_PUBLIC and c != "row_hash"
]


def arrow_schema(columns: list[tuple[str, str]]) -> pa.Schema:
    import pyarrow as pa

    types = {
        TEXT: pa.string(),
        REAL: pa.float64(),
        INT: pa.int32(),
        BIGINT: pa.int64(),
        BLOB: pa.binary(),
    }
    return pa.schema([(n, types[t]) for n, t in columns])


def record_schema() -> pa_schema.DataFrameSchema:
    """The pandera schema every ingested row passes (ranges named, vocabularies closed)."""
    import pandera.pandas as pa_schema
    from strata13.schemas.vocabularies import vocabulary

    cols: dict[str, pa_schema.Column] = {
        "record_id": pa_schema.Column(str, nullable=False),  # uniqueness: validate.py
        "source_id": pa_schema.Column(str, nullable=False),
        "section_id": pa_schema.Column(str, nullable=False),
        "sample_id": pa_schema.Column(str, nullable=False),
        "replicate": pa_schema.Column("Int32", pa_schema.Check.ge(1), nullable=False),
        "lat": pa_schema.Column(float, pa_schema.Check.in_range(-90, 90), nullable=True),
        "lon": pa_schema.Column(float, pa_schema.Check.in_range(-180, 180), nullable=True),
    }
    for f in FIELDS:
        if f.stored in cols or f.kind in ("text", "coord"):
            continue
        checks = []
        if f.plausible:
            checks.append(pa_schema.Check.in_range(*f.plausible, name=f.plausible_name))
        if f.vocab:
            checks.append(
                pa_schema.Check.isin(vocabulary(f.vocab).terms, name=f"{f.vocab} vocabulary")
            )
        # vocabulary columns arrive dictionary-encoded (categorical): no dtype check, the
        # closed set is what matters
        dtype = "Int32" if f.kind == "int" else (None if f.kind == "vocab" else float)
        cols[f.stored] = pa_schema.Column(dtype, checks, nullable=True, required=False)
    return pa_schema.DataFrameSchema(cols, strict=False, coerce=False, name="analysis record")
