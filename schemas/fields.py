"""The field registry: every value a mapping file may feed, and how it is stored.

One table drives the mapping-file check ("unknown field"), unit conversion, the pandera
schema, the store's column types and the `records` view. Adding a column means adding a
``Field`` here (and, for a vocabulary, a CSV in ``vocab/``); see DEVELOPERS.md.

Plausible ranges are named so a report can say which one a value broke. They are wide
sanity bounds (common practice), not screening thresholds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

SCHEMA_VERSION = "1"

# Unit kinds and the factor that turns each accepted unit into the stored unit.
# Feet are exactly 0.3048 m (international foot, 1959 agreement).
UNITS: dict[str, dict[str, float]] = {
    "length": {"m": 1.0, "cm": 0.01, "mm": 0.001, "ft": 0.3048, "km": 1000.0},
    "concentration": {
        "ppm": 1.0,
        "mg/kg": 1.0,
        "ug/g": 1.0,
        "µg/g": 1.0,
        "%": 1.0e4,
        "wt%": 1.0e4,
        "ppb": 1.0e-3,
    },
    "percent": {"%": 1.0, "wt%": 1.0, "fraction": 100.0},
    "permil": {"‰": 1.0, "permil": 1.0, "per mil": 1.0, "mUr": 1.0},
    "ratio_mmol": {"mmol/mol": 1.0, "mol/mol": 1000.0},
    "age": {"Ma": 1.0, "ka": 0.001, "Myr": 1.0},
    "degrees": {"deg": 1.0, "°": 1.0},
}


@dataclass(frozen=True)
class Field:
    """One input field of a mapping file and the stored column it fills."""

    name: str
    kind: str  # text | int | float | delta | conc | coord | vocab
    doc: str
    unit_kind: str | None = None
    stored_unit: str | None = None
    plausible: tuple[float, float] | None = None
    plausible_name: str | None = None
    vocab: str | None = None
    column: str | None = None  # stored column name if it differs from ``name``
    aliases: tuple[str, ...] = field(default=())

    @property
    def stored(self) -> str:
        return self.column or self.name


DELTA_FIELDS = ("d13c_carb", "d18o_carb", "d13c_org")
CONC_FIELDS = ("mn", "sr", "fe", "mg_ca", "caco3", "toc")

FIELDS: tuple[Field, ...] = (
    # hierarchy
    Field("locality_id", "text", "locality identifier (slug or free text)"),
    Field("locality_name", "text", "locality name as published"),
    Field(
        "lat",
        "coord",
        "present-day latitude, WGS84 (decimal, DMS or hemisphere letter)",
        plausible=(-90.0, 90.0),
        plausible_name="latitude range",
    ),
    Field(
        "lon",
        "coord",
        "present-day longitude, WGS84 (decimal, DMS or hemisphere letter)",
        plausible=(-180.0, 360.0),
        plausible_name="longitude range",
    ),
    Field("section_id", "text", "section or core identifier; a mapped column splits a sheet"),
    Field("sample_id", "text", "sample identifier as published"),
    Field(
        "replicate",
        "int",
        "replicate number of this analysis of the sample (1, 2, …)",
        plausible=(1, 1000),
        plausible_name="replicate number",
    ),
    Field(
        "n_replicates",
        "int",
        "for a published mean: number of analyses averaged",
        plausible=(1, 10000),
        plausible_name="replicate count",
    ),
    # position
    Field(
        "position",
        "float",
        "stratigraphic position (height or depth) of a point sample",
        "length",
        "m",
        (-20000.0, 20000.0),
        "stratigraphic position",
        column="position_m",
    ),
    Field(
        "position_top",
        "float",
        "top of a sampled interval",
        "length",
        "m",
        (-20000.0, 20000.0),
        "stratigraphic position",
        column="top_m",
    ),
    Field(
        "position_base",
        "float",
        "base of a sampled interval",
        "length",
        "m",
        (-20000.0, 20000.0),
        "stratigraphic position",
        column="base_m",
    ),
    Field(
        "position_kind",
        "vocab",
        "height (above datum) or depth (below datum)",
        vocab="position_kind",
    ),
    Field("lithostrat_unit", "text", "lithostratigraphic unit (formation, member, bed)"),
    # material
    Field("lithology", "vocab", "lithology", vocab="lithology"),
    Field("texture", "vocab", "Dunham texture", vocab="texture"),
    Field("component", "vocab", "component analysed", vocab="component"),
    Field("mineralogy", "vocab", "mineralogy of the analysed carbonate", vocab="mineralogy"),
    Field("setting", "vocab", "depositional setting", vocab="setting"),
    Field("preservation", "text", "preservation class as published"),
    # isotopes (reported; the harmonised value lives in the column of the same base name)
    Field(
        "d13c_carb",
        "delta",
        "δ13C of carbonate as reported",
        "permil",
        "‰",
        (-30.0, 20.0),
        "carbonate δ13C range",
        column="d13c_carb_reported",
    ),
    Field(
        "d18o_carb",
        "delta",
        "δ18O of carbonate as reported (VPDB or VSMOW)",
        "permil",
        "‰",
        (-30.0, 45.0),
        "carbonate δ18O range",
        column="d18o_carb_reported",
    ),
    Field(
        "d13c_org",
        "delta",
        "δ13C of organic matter as reported",
        "permil",
        "‰",
        (-60.0, 0.0),
        "organic δ13C range",
        column="d13c_org_reported",
    ),
    Field(
        "d13c_carb_sd",
        "float",
        "SD of a published δ13C carb mean",
        "permil",
        "‰",
        (0.0, 10.0),
        "standard deviation",
    ),
    Field(
        "d18o_carb_sd",
        "float",
        "SD of a published δ18O carb mean",
        "permil",
        "‰",
        (0.0, 10.0),
        "standard deviation",
    ),
    Field(
        "d13c_org_sd",
        "float",
        "SD of a published δ13C org mean",
        "permil",
        "‰",
        (0.0, 10.0),
        "standard deviation",
    ),
    Field(
        "d13c_carb_precision",
        "float",
        "analytical precision of δ13C carb, 1σ",
        "permil",
        "‰",
        (0.0, 5.0),
        "analytical precision",
        column="d13c_carb_precision_reported",
    ),
    Field(
        "d18o_carb_precision",
        "float",
        "analytical precision of δ18O carb, 1σ",
        "permil",
        "‰",
        (0.0, 5.0),
        "analytical precision",
        column="d18o_carb_precision_reported",
    ),
    Field(
        "d13c_org_precision",
        "float",
        "analytical precision of δ13C org, 1σ",
        "permil",
        "‰",
        (0.0, 5.0),
        "analytical precision",
        column="d13c_org_precision_reported",
    ),
    # screening inputs
    Field(
        "mn",
        "conc",
        "Mn concentration",
        "concentration",
        "ppm",
        (0.0, 200000.0),
        "Mn concentration",
        column="mn_ppm",
    ),
    Field(
        "sr",
        "conc",
        "Sr concentration",
        "concentration",
        "ppm",
        (0.0, 100000.0),
        "Sr concentration",
        column="sr_ppm",
    ),
    Field(
        "fe",
        "conc",
        "Fe concentration",
        "concentration",
        "ppm",
        (0.0, 500000.0),
        "Fe concentration",
        column="fe_ppm",
    ),
    Field(
        "mg_ca",
        "conc",
        "Mg/Ca molar ratio",
        "ratio_mmol",
        "mmol/mol",
        (0.0, 2000.0),
        "Mg/Ca ratio",
        column="mg_ca_mmol_mol",
    ),
    Field(
        "caco3",
        "conc",
        "carbonate content",
        "percent",
        "%",
        (0.0, 100.0),
        "percentage",
        column="caco3_pct",
    ),
    Field(
        "toc",
        "conc",
        "total organic carbon",
        "percent",
        "%",
        (0.0, 100.0),
        "percentage",
        column="toc_pct",
    ),
    # ages as reported
    Field(
        "age",
        "float",
        "age as reported by the source",
        "age",
        "Ma",
        (0.0, 4600.0),
        "age range",
        column="age_reported_ma",
    ),
    Field(
        "age_sigma",
        "float",
        "1σ of the reported age",
        "age",
        "Ma",
        (0.0, 100.0),
        "age uncertainty",
        column="age_reported_sigma_ma",
    ),
    Field(
        "age_time_scale",
        "text",
        "time-scale version of the reported age",
        column="age_reported_scale",
    ),
    Field("stage", "text", "stage name as reported", column="stage_reported"),
    # paleogeography as reported by the source
    Field(
        "reported_paleolat",
        "float",
        "paleolatitude as reported by the source",
        "degrees",
        "deg",
        (-90.0, 90.0),
        "latitude range",
    ),
    Field(
        "reported_paleolon",
        "float",
        "paleolongitude as reported by the source",
        "degrees",
        "deg",
        (-180.0, 360.0),
        "longitude range",
    ),
    # lineage and notes
    Field(
        "original_source",
        "text",
        "source that first published this value (lineage)",
        column="original_source_id",
    ),
    Field("run_id", "text", "in-house analytical run identifier"),
    Field(
        "run_position",
        "float",
        "position of the measurement in its run (for drift)",
        plausible=(0.0, 1e6),
        plausible_name="run position",
    ),
    Field("note", "text", "free note"),
)

BY_NAME: dict[str, Field] = {f.name: f for f in FIELDS}

# The rows of an in-house run that measure a reference material are exempt from the sample
# ranges above (LSVEC, IAEA-CO-9 and USGS44 lie near −42 … −47 ‰ δ13C); they keep this
# wide sanity bound on their raw δ values instead, which still catches unit slips
# (common practice).
REFERENCE_RANGE = (-100.0, 100.0)
REFERENCE_RANGE_NAME = "reference-material δ range"

# Per-sheet keys that are not columns of their own: the scale of each δ column and the
# basis of each concentration column, settable as constants or per column.
SCALE_KEYS = {f"{d}_scale": d for d in DELTA_FIELDS}
BASIS_KEYS = {f"{c}_basis": c for c in CONC_FIELDS}

# "raw": measured in an in-house run against the lab's working gas, not yet normalised
# (the mapping's [run] block names the reference materials measured with it)
DELTA_SCALES = {
    "d13c_carb": ("VPDB", "VPDB-LSVEC", "PDB", "raw"),
    "d13c_org": ("VPDB", "VPDB-LSVEC", "PDB", "raw"),
    "d18o_carb": ("VPDB", "VSMOW", "PDB", "raw"),
}
CONC_BASES = ("leach", "whole-rock", "carbonate-normalised")


def field_names() -> list[str]:
    """Every name a mapping file may use for a column or constant."""
    return sorted([*BY_NAME, *SCALE_KEYS, *BASIS_KEYS])
