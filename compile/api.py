"""The public face of strata13, for the CLI and for notebooks.

>>> from strata13.compile import api
>>> store = api.init_store("compilation")                        # or api.open_store(...)
>>> result = api.ingest(store, "sheets/a.xlsx", "sheets/a.toml")
>>> df = api.query(store, api.Filters(interval=(185, 180)))     # a pandas DataFrame
>>> api.export(store, "export")                                   # Parquet, CSV, manifest

Every function returns data or raises a :mod:`strata13.errors` exception; none
prints.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.derive.engine import DEFAULT_TIME_SCALE, Settings
from strata13.compile.export.outputs import output_dir, output_file
from strata13.compile.export.package import ExportResult, neutralise
from strata13.compile.ingest import IngestResult, accepted_lines, reconcile
from strata13.compile.integrity.corrections import Correction
from strata13.compile.interrupts import pressed as _pressed
from strata13.compile.query.filters import (
    SCREENED,
    SYNTHESIS_SCREENED,
    Filters,
    check_vocab,
    parse_interval,
    parse_paleolat,
    screen_states,
)
from strata13.compile.store.lake import Store, Version
from strata13.compile.store.lake import is_store as _is_store
from strata13.compile.synthesis.run import CurveRequest, CurveResult, ExcursionResult

from strata13.errors import ConfigError, NotAStoreError, OptionError, StoreError

if TYPE_CHECKING:
    from typing import Unpack

    import pandas as pd
    import pyarrow as pa
    from strata13.compile.ages.chronology import Interval, SectionModel
    from strata13.compile.derive.recompute import RecomputeResult
    from strata13.compile.export.artifact import Artifact
    from strata13.compile.integrity.corrections import CorrectResult
    from strata13.compile.integrity.overlaps import Tolerances
    from strata13.compile.query.regions import Region
    from strata13.compile.query.sqlguard import SqlResult
    from strata13.compile.read.propose import Proposal
    from strata13.compile.screening.evaluate import Screening
    from strata13.compile.store.lake import Compacted
    from strata13.compile.store.move import Moved
    from strata13.schemas.timescales import TimeScale

__all__ = [
    "DEFAULT_TIME_SCALE",
    "SCREENED",
    "SYNTHESIS_SCREENED",
    "Correction",
    "CurveRequest",
    "CurveResult",
    "ExcursionResult",
    "ExportResult",
    "Filters",
    "IngestResult",
    "Settings",
    "Store",
    "Version",
    "accepted_lines",
    "agemodel",
    "check_sources",
    "check_width",
    "check_vocab",
    "compact",
    "interrupt_verdict",
    "change_unit",
    "confirm_overlaps",
    "correct",
    "corrections",
    "coverage",
    "curve",
    "excursion",
    "explain",
    "export",
    "figure_files",
    "figure_note",
    "history",
    "ingest",
    "init_store",
    "interrupt",
    "interrupted",
    "interval",
    "is_store",
    "materials_settings",
    "move_catalog",
    "neutralise",
    "open_store",
    "per_sample",
    "output_dir",
    "output_file",
    "overlaps",
    "parse_interval",
    "parse_paleolat",
    "plot_agemodel",
    "propose_map",
    "query",
    "query_arrow",
    "read_corrections",
    "reconcile",
    "redate",
    "region",
    "reharmonise",
    "replace_rotations",
    "rotations_settings",
    "rules_settings",
    "run_demo",
    "scale_disagreements",
    "scales",
    "screen",
    "screen_plots",
    "screen_report",
    "screen_states",
    "sources",
    "sql",
    "stages",
    "store_path",
    "time_scale_settings",
]


def _document(cls: type, text: str) -> None:
    """Give a re-exported dataclass its description here unless its module gives one."""
    doc = (cls.__doc__ or "").strip()
    if not doc or doc.startswith(f"{cls.__name__}("):
        cls.__doc__ = text


_document(
    Filters,
    "Which records a query, export, curve or summary reads: interval (younger, older Ma),"
    " region and the frame it applies in, paleolatitude band, lithologies, components,"
    " sources, screen outcome and whether confirmed duplicates are kept.",
)
_document(
    IngestResult,
    "What an ingest did: the sheet's report, the store version written (None for a dry run"
    " or a refused sheet) and the counts of records and quarantined rows.",
)
_document(Version, "One version of the store: its id, time, command and what it changed.")
_document(
    Correction,
    "A correction of a published value: the record (id or unique prefix), the field, the"
    " corrected value and why.",
)


def is_store(path: str | Path) -> bool:
    """Whether ``path`` is a strata13 store folder."""
    return bool(_is_store(Path(path)))


def store_path(given: str | Path | None) -> Path:
    """--store, else STRATA13_STORE, else ./compilation (a name the system can take)."""
    from strata13.compile.read.inputs import usable_name

    from strata13.errors import InputFileError

    path = Path(given or os.environ.get("STRATA13_STORE") or "compilation")
    try:
        return usable_name(path, "store folder", "")
    except InputFileError as exc:
        raise OptionError(exc.message, "Name the store with a shorter, plain --store.") from None


def open_store(path: str | Path) -> Store:
    """Open an existing store (NotAStoreError if the folder is not one)."""
    return Store.open(Path(path))


def rules_settings(rules: str | Path | None, untested_passes: bool | None = None) -> dict[str, Any]:
    """Store settings for a screening rule file (None: the shipped default rules)."""
    from strata13.compile.screening.rules import load_rules

    rs = load_rules(rules)
    out: dict[str, Any] = {
        "screen_rules": rs.canonical_text(),
        "screen_rules_sha256": rs.sha256,
        "screen_rules_name": f"{rs.name} {rs.version}".strip(),
    }
    if untested_passes is not None:
        out["screen_untested_passes"] = bool(untested_passes)
    return out


def materials_settings(materials: str | Path | None) -> dict[str, Any]:
    """Store settings for a user's reference-material file (None: the shipped table only):
    its text is kept in the store, and the accepted value set per material is written out."""
    from strata13.compile.read.inputs import read_text
    from strata13.schemas.materials import (
        default_choice,
        materials_from_text,
        shipped_materials,
    )

    text = ""
    if materials is not None:
        p = Path(materials)
        text = read_text(p, "materials file", "Check --materials.")
        materials_from_text(text, p.name)  # checked now, not at the first ingest
    user = materials_from_text(text) if text else []
    table = [*user, *shipped_materials()]
    return {"materials_csv": text, "material_values": default_choice(table, len(user))}


def rotations_settings(model: str | Path, polygons: str | Path) -> dict[str, Any]:
    """Store settings for a rotation model and its plate polygons (both checked now, and
    every plate the polygons name must be in the model; their text is kept in the store,
    so the store reproduces its paleo-positions alone). A retired CSV model goes."""
    from strata13.compile.derive.paleo import RETIRED_MODEL_KEY
    from strata13.compile.paleo import plates, rotations
    from strata13.compile.read.inputs import read_text

    texts = [
        read_text(p, f"{what} file", "Check the MODEL and POLYGONS files.")
        for p, what in ((model, "rotation model"), (polygons, "plate polygons"))
    ]
    m = rotations.parse_model(texts[0], Path(model).name)
    try:
        doc = json.loads(texts[1])
    except json.JSONDecodeError as exc:
        raise ConfigError(
            f"{Path(polygons).name} is not valid JSON ({exc}).", "Check the GeoJSON file."
        ) from None
    polys = plates.parse_polygons(doc, Path(polygons).name)
    plates.check_against_model(polys, m.names, Path(polygons).name)
    return {
        "rotation_model_toml": texts[0],
        "plate_polygons_geojson": texts[1],
        "rotation_model_name": m.name,
        "rotation_frame": m.frame,
        RETIRED_MODEL_KEY: None,
    }


def replace_rotations(store: Store, model: str | Path, polygons: str | Path) -> RecomputeResult:
    """Set the store's rotation model and plate polygons and recompute every paleo-position
    (and the screens) in one commit; returns a RecomputeResult."""
    from strata13.compile.derive.recompute import recompute

    return recompute(store, rotations_settings(model, polygons), "replace-rotations")


def time_scale_settings(time_scale: str | Path) -> dict[str, Any]:
    """The settings for a store's chart: a shipped chart by name, or a user's chart table
    (a CSV file in the shipped format, kept whole in the settings and named by its hash)."""
    from strata13.compile.read.inputs import read_text
    from strata13.schemas.timescales import suggest_chart, use_table, versions
    from strata13.schemas.vocabularies import vocabulary

    text = str(time_scale)
    if text.lower().endswith(".csv") or Path(text).is_file():
        table = read_text(Path(text), "time-scale table", "Give a CSV in the shipped format.")
        return {"time_scale": use_table(table, Path(text).name).version, "time_scale_table": table}
    ts = vocabulary("time_scale").resolve(text)
    if ts is None or ts not in versions():
        sug = suggest_chart(text)
        raise OptionError(
            f"--time-scale {text!r} is not a shipped time scale."
            + (f" Did you mean {sug!r}?" if sug else ""),
            f"Shipped chart tables: {', '.join(versions())}; or give a chart table of your "
            "own (a CSV in the shipped format, see README 'Time scales').",
        )
    return {"time_scale": ts, "time_scale_table": None}


def propose_map(
    sheet: str | Path, sheet_name: str | None = None, out: str | Path | None = None
) -> Proposal:
    """A drafted mapping for ``sheet`` (``read.propose.Proposal``: text, matches, what to
    fill in); with ``out`` it is written there, never over an existing file or the sheet."""
    from strata13.compile.read.propose import propose

    proposal = propose(Path(sheet), sheet_name)
    if out is not None:
        target = Path(out)
        if target.exists():
            raise OptionError(
                f"--out {target} exists; a drafted mapping never replaces a file.",
                "Give a new file name, or delete the old one first.",
            )
        if target.suffix.lower() != ".toml":
            raise OptionError(f"--out {target} is not a .toml file.", "Name it MAP.toml.")
        target.write_text(proposal.text, encoding="utf-8")
    return proposal


def init_store(
    path: str | Path,
    time_scale: str = DEFAULT_TIME_SCALE,
    regions: str | Path | None = None,
    made_by: str = "init",
    rules: str | Path | None = None,
    age_extrapolation: bool = False,
    materials: str | Path | None = None,
    rotations: tuple[str | Path, str | Path] | None = None,
    catalog: str | None = None,
) -> Store:
    """Create a store with its settings (time scale, screening rules, whether age models
    extrapolate beyond their ties) and optional named regions; ``catalog`` is
    ``postgres:CONNINFO`` for a group's shared catalog (default: the embedded file)."""
    from strata13.compile.query.regions import load_regions_file

    named = load_regions_file(Path(regions)) if regions else []
    settings = Settings.from_stored(
        {
            **time_scale_settings(time_scale),
            "age_extrapolation": bool(age_extrapolation),
            **rules_settings(rules, untested_passes=False),
            **materials_settings(materials),
            **(rotations_settings(*rotations) if rotations else {}),
        }
    )
    return Store.create(
        Path(path),
        settings.stored(),
        settings.hash(),
        [(n, g, Path(regions).name) for n, g in named] if regions else [],
        made_by=made_by,
        catalog=catalog,
    )


def ingest(
    store: Store | str | Path,
    sheet: str | Path | None,
    mapping: str | Path,
    *,
    dry_run: bool = False,
    keep_valid: bool = False,
    progress: Callable[[str], object] | None = None,
) -> IngestResult:
    """Ingest a sheet through its mapping file; creates the store if the folder is new."""
    from strata13.compile import ingest as _ingest

    create = None
    if not isinstance(store, Store):
        path = Path(store)
        if _is_store(path):
            store = Store.open(path)
        else:  # created only once the sheet has passed validation
            if path.exists() and (not path.is_dir() or any(path.iterdir())):
                raise NotAStoreError(
                    f"{path} exists and is not a strata13 store.",
                    "Name a store, a new folder or an empty one with --store.",
                )

            def create() -> Store:
                try:
                    return init_store(path)
                except StoreError:
                    if _is_store(path):  # another ingest created it meanwhile: use it
                        return Store.open(path)
                    raise

            store = _DryStore()
    result: IngestResult = _ingest.ingest(
        store,
        Path(sheet) if sheet else None,
        Path(mapping),
        dry_run=dry_run,
        keep_valid=keep_valid,
        progress=progress,
        create=create,
    )
    return result


class _DryStore(Store):
    """Stand-in for a store that does not exist yet, for --dry-run (default settings)."""

    def __init__(self) -> None:
        super().__init__(Path("."))

    def settings(self, version: int | None = None) -> dict[str, Any]:
        stored: dict[str, Any] = Settings().stored()
        return stored


def _named_regions(con: Any) -> dict[str, str]:
    return dict(con.execute("SELECT name, geojson FROM regions").fetchall())


def region(store: Store, spec: str) -> Region:
    """Resolve a --region value against the store's named regions."""
    from strata13.compile.query.regions import resolve_region

    con, _ = store.reader()
    try:
        return resolve_region(spec, _named_regions(con))
    finally:
        con.close()


def _store_read_error(exc: Exception, store: Store) -> StoreError:
    return StoreError(
        f"the store {store.path} could not be read ({str(exc).splitlines()[0]}).",
        "A data file may be missing or damaged; restore the store from a copy.",
    )


def check_sources(store: Store, ids: list[str]) -> list[str]:
    """Refuse --source values that name no source of the store, with a hint."""
    if not ids:
        return ids
    from strata13.suggest import did_you_mean

    known: list[str] = [s["source_id"] for s in sources(store)]
    for sid in ids:
        if sid not in known:
            raise OptionError(
                f"--source {sid!r} is not a source of this store." + did_you_mean(sid, known),
                "See `strata13 sources`.",
            )
    return ids


def query_arrow(store: Store, filters: Filters | None = None, as_of: int | None = None) -> pa.Table:
    """Records matching ``filters`` (of version ``as_of``, else the newest) as an Arrow table."""
    import duckdb
    from strata13.compile.query.filters import run

    con, _ = store.reader(as_of)
    try:
        return run(con, filters or Filters())
    except (duckdb.IOException, duckdb.InvalidInputException) as exc:
        raise _store_read_error(exc, store) from None
    finally:
        con.close()


def per_sample(records: pa.Table) -> pa.Table:
    """Records averaged to one row per sample: the mean of each δ value and age with the
    number of analyses and their SD (``query.samples.per_sample``)."""
    from strata13.compile.query.samples import per_sample as _per_sample

    return _per_sample(records)


def query(store: Store, filters: Filters | None = None, as_of: int | None = None) -> pd.DataFrame:
    """Records matching ``filters`` as a pandas DataFrame (columns of the records view)."""
    return query_arrow(store, filters, as_of).to_pandas()


def export(
    store: Store,
    out: str | Path,
    filters: Filters | None = None,
    as_of: int | None = None,
    curve: CurveRequest | None = None,
    command: str | None = None,
    curve_screened: str = SYNTHESIS_SCREENED,
) -> ExportResult:
    """The filtered records of one version as a data package (the tables they depend on,
    data dictionary, bibliography, README.txt, manifest: ``export.package``); with ``curve``
    (a ``synthesis.run.CurveRequest``) the curve files go to ``out/curve`` and the
    manifest records every curve parameter and file, so the same command reproduces them.
    The curve reads ``filters`` with ``curve_screened`` for its screen states (default
    ``SYNTHESIS_SCREENED``: failed and untested records stay out of the curve).
    ``command`` (the command line as given, pinned to the version) goes into the manifest's
    ``reproduce``."""
    from strata13.compile.export.artifact import Artifact

    output_dir(Path(out), option="--out", stores=[store.path])
    art = Artifact(Path(out))
    extra: dict[str, Any] = {}
    if curve is not None:  # the curve first: a refused curve leaves no half export
        from strata13.compile.synthesis.run import make_curve

        version = as_of if as_of is not None else store.latest_version()
        from dataclasses import replace

        screen_states(curve_screened, "--curve-screened")  # refuses an unknown state
        curve_filters = replace(filters or Filters(), screened=curve_screened)
        cres = make_curve(
            store,
            curve_filters,
            curve,
            art.sub("curve", "curve_manifest.json"),
            as_of=version,
        )
        extra["curve"] = cres.manifest
        as_of = version
    return _export_records(store, art, filters, as_of, command, extra)


def _export_records(
    store: Store,
    art: Artifact,
    filters: Filters | None,
    as_of: int | None,
    command: str | None,
    extra: dict[str, Any],
) -> ExportResult:
    import duckdb
    from strata13.compile.export import package as _export

    con, version = store.reader(as_of)
    try:
        stored = store.settings(version)
        long = (
            "screen_rules",
            "rotation_model_toml",
            "rotation_model_csv",  # a store's retired model, until replaced
            "plate_polygons_geojson",
            "materials_csv",
        )
        result: ExportResult = _export.export(
            con,
            version,
            art,
            filters or Filters(),
            Settings.from_stored(stored).hash(),
            store.path,
            {k: v for k, v in stored.items() if k not in long},
            reproduce=command,
            extra=extra,
            demo=store.made_by == "demo",
        )
        return result
    except (duckdb.IOException, duckdb.InvalidInputException) as exc:
        raise _store_read_error(exc, store) from None
    finally:
        con.close()


def sql(
    store: Store,
    statement: str,
    timeout_s: float = 30.0,
    row_cap: int = 100_000,
    max_mb: float = 64.0,
) -> SqlResult:
    """One read-only SQL statement over the store's views, stopped after ``timeout_s``
    seconds and cut at ``row_cap`` rows or ``max_mb`` MiB of answer, whichever comes first.
    The connection may read exactly the Parquet files of the version it shows."""
    from strata13.compile.query.sqlguard import check_limits, run_sql
    from strata13.compile.store.files import version_files
    from strata13.compile.store.lake import DATA

    check_limits(timeout_s, row_cap, max_mb)
    con, version = store.reader(fresh=True)  # the sandbox locks this connection alone
    try:
        files = version_files(con, store.path / DATA, version)
        result: SqlResult = run_sql(con, statement, timeout_s, row_cap, files, max_mb)
        return result
    finally:
        con.close()


def change_unit(column: str) -> str:
    """The unit a recompute reports a column's changes in (" ‰", " Myr", "°"; "" if none)."""
    from strata13.compile.derive.recompute import UNITS

    return UNITS.get(column, "")


def interrupt_verdict() -> str:
    """What an interrupted command says: the version this process committed, or that it
    wrote nothing."""
    from strata13.compile import interrupts

    return interrupts.verdict()


def compact(store: Store, dry_run: bool = False, merge: bool = True) -> Compacted:
    """Remove (or with ``dry_run`` only list) the data files no version of the store
    references and merge the small data files ingests leave (``merge``); every version
    stays readable with the same rows."""
    found: Compacted = store.compact(dry_run, merge)
    return found


def move_catalog(store: Store, to: str) -> Moved:
    """Copy the store's catalog with every version to ``to`` (``postgres:CONNINFO`` of an
    empty database, or ``embedded``) and use it from now on; the data files stay."""
    from strata13.compile.store.move import move_catalog as move

    moved: Moved = move(store, to)
    return moved


def sources(store: Store) -> list[dict[str, Any]]:
    """The store's sources, one dict each (id, kind, year, records, quarantined rows,
    version ingested, file name, citation), ordered by id."""
    con, _ = store.reader()
    try:
        cur = con.execute(
            "SELECT s.source_id, s.kind, s.year, s.n_records, "
            "(SELECT count(*) FROM quarantine q WHERE q.source_id = s.source_id) "
            "AS quarantined, s.ingested_version, s.file_name, s.citation "
            "FROM sources s ORDER BY s.source_id"
        )
        cols = [d[0] for d in cur.description]
        return [dict(zip(cols, r, strict=True)) for r in cur.fetchall()]
    finally:
        con.close()


def history(store: Store) -> list[Version]:
    """Every version of the store, oldest first, with its command and counts."""
    versions: list[Version] = store.history()
    return versions


def reharmonise(
    store: Store,
    vsmow_constants: str | None = None,
    materials: str | Path | None = None,
    check_tolerance: str | None = None,
) -> RecomputeResult:
    """Re-derive every record with new harmonisation settings (one commit, or none when
    nothing changes); returns a RecomputeResult with counts and sizes of the changes.
    ``check_tolerance``: how far an in-house run's check material may lie from its accepted
    value ("from-uncertainty", the default rule, or a tolerance in ‰)."""
    from strata13.compile.derive.recompute import recompute
    from strata13.compile.derive.settings import check_tolerance_policy
    from strata13.compile.harmonise.oxygen import relation

    change: dict[str, Any] = {}
    if vsmow_constants is not None:
        change["vsmow_constants"] = relation(vsmow_constants).name
    if materials is not None:
        change |= materials_settings(materials)
    if check_tolerance is not None:
        change["check_tolerance"] = check_tolerance_policy(check_tolerance)
    return recompute(store, change, "reharmonise")


def interval(store: Store | None, text: str, time_scale: str | None = None) -> Interval:
    """``--interval`` text (stage/series/period name, NAME..NAME or A-B Ma) as an interval
    on the store's chart; names resolve on ``time_scale`` if given, else the store's."""
    from strata13.compile.ages.chronology import resolve

    iv: Interval = resolve(text, store, time_scale)
    return iv


def stages(
    store: Store | None = None, time_scale: str | None = None, interval: str | None = None
) -> tuple[TimeScale, list[dict[str, Any]], list[str]]:
    """(chart, its units, notes): ``time_scale`` (a version or a CSV table), else the
    store's chart, else the current one; only units overlapping ``interval`` if given."""
    from strata13.compile.ages import chronology

    scale: TimeScale = chronology.chart(time_scale, store)
    rows, notes = chronology.stages(scale, interval)
    return scale, rows, notes


def redate(
    store: Store,
    time_scale: str | None = None,
    extrapolation: bool | None = None,
    draws: int | None = None,
    blank_boundary_sigma: str | None = None,
    accumulation_shape: float | None = None,
    accumulation_segment_m: float | None = None,
) -> RecomputeResult:
    """Change the store's chart or age-model settings and re-derive every age (one commit,
    or none when nothing changes); returns a RecomputeResult. ``blank_boundary_sigma``:
    what a chart boundary with a blank error gets as 1σ ("borrow" from the nearest chart
    that states one, "refuse", or a σ in Myr). ``accumulation_shape`` and
    ``accumulation_segment_m``: the store's accumulation prior between ties (the time one
    segment of that many metres took is Gamma(shape)); a section's own prior in its mapping
    block still wins."""
    from strata13.compile.derive.recompute import recompute

    change: dict[str, Any] = {}
    if time_scale is not None:
        change.update(time_scale_settings(time_scale))
    if extrapolation is not None:
        change["age_extrapolation"] = bool(extrapolation)
    if draws is not None:
        if not 100 <= draws <= 100_000:
            raise OptionError(
                f"--draws {draws} is outside 100 … 100000.",
                "1000 draws give stable 95 % ranges (common practice).",
            )
        change["age_draws"] = int(draws)
    if blank_boundary_sigma is not None:
        from strata13.compile.derive.settings import blank_sigma_policy

        change["blank_boundary_sigma"] = blank_sigma_policy(blank_boundary_sigma)
    for key, value, option, setting in (
        ("shape", accumulation_shape, "--accumulation-shape", "age_accumulation_shape"),
        (
            "segment_m",
            accumulation_segment_m,
            "--accumulation-segment",
            "age_accumulation_segment_m",
        ),
    ):
        if value is not None:
            from strata13.compile.ages.agemodel import prior_value

            change[setting] = prior_value(key, value, option, OptionError)
    return recompute(store, change, "redate")


def agemodel(store: Store, section: str) -> SectionModel:
    """One section's ties (as given and on the store's chart) and its age-model draws."""
    from strata13.compile.ages.chronology import section_model

    model: SectionModel = section_model(store, section)
    return model


def screen(
    store: Store, rules: str | Path | None = None, untested_passes: bool | None = None
) -> RecomputeResult:
    """Set the store's screening rules (a rule file; None keeps the store's) and whether
    untested counts as pass, and re-screen every record in one commit (none when nothing
    changes); returns a RecomputeResult."""
    from strata13.compile.derive.recompute import recompute

    change: dict[str, Any] = {}
    if rules is not None:
        change |= rules_settings(rules)
    if untested_passes is not None:
        change["screen_untested_passes"] = bool(untested_passes)
    return recompute(store, change, "screen")


def screen_report(
    store: Store, filters: Filters | None = None
) -> tuple[pa.Table, Screening, pa.Table]:
    """The stored records re-screened with the store's rules, for the summary and the
    cross-plots: (records, Screening(results, overall, groups), counts per source, section,
    rule and outcome)."""
    from strata13.compile.derive.screens import rule_set
    from strata13.compile.screening.evaluate import evaluate, summarise

    records = query_arrow(store, filters)
    settings = Settings.from_stored(store.settings())
    res: Screening = evaluate(records, rule_set(settings), bool(settings.screen_untested_passes))
    return records, res, summarise(records, res.results)


def screen_plots(
    store: Store, records: pa.Table, screening: Screening, out: str | Path, width: str = "double"
) -> list[Path]:
    """One δ13C–δ18O cross-plot per section (PNG, SVG and PDF) into folder ``out``, one
    journal column ``width`` wide (single | double); returns the files."""
    from strata13.compile.export.outputs import output_dir
    from strata13.compile.plotting.style import check_width
    from strata13.compile.screening.plots import cross_plots

    check_width(width)
    folder = Path(out)
    output_dir(folder, option="--plot", stores=[store.path])
    folder.mkdir(parents=True, exist_ok=True)
    files: list[Path] = cross_plots(
        records, screening.results, screening.groups, folder, figure_note(store), width
    )
    return files


def curve(
    store: Store,
    filters: Filters,
    request: CurveRequest,
    out: str | Path,
    as_of: int | None = None,
    command: str | None = None,
) -> CurveResult:
    """Composite curves (bins, LOESS and band, robustness) with figure and manifest in
    ``out``; ``command`` (the command line) goes into the manifest."""
    from strata13.compile.synthesis.run import make_curve

    return make_curve(store, filters, request, Path(out), as_of=as_of, command=command)


def excursion(
    store: Store,
    filters: Filters,
    *,
    by: str | None = None,
    baseline: tuple[float, float, str] | None = None,
    fraction: float = 0.10,
    direction: str = "auto",
    draws: int | None = None,
    seed: int = 0,
    bootstrap: bool = True,
    out: str | Path | None = None,
    command: str | None = None,
    width: str = "double",
    shared_axis: bool = True,
) -> ExcursionResult:
    """Per-section excursion metrics in the filtered interval with 1σ and 95 % ranges over
    ``draws`` draws (age draws and, with ``bootstrap``, resampled samples; None: the default
    500, 0: none), seeded by ``seed``; tables, a figure and a manifest naming ``command`` in
    ``out`` when given. The figure is one journal column ``width`` wide (single | double);
    ``shared_axis`` gives its section panels one δ axis, so magnitudes compare by eye. A
    fraction outside (0, 1) or an unknown direction is a wrong instruction (OptionError, exit 2)."""
    import math

    from strata13.compile.synthesis.excursion import DIRECTIONS
    from strata13.compile.synthesis.run import make_excursion

    if direction not in DIRECTIONS:
        raise OptionError(
            f"--direction {direction!r} is not one of {', '.join(DIRECTIONS)}.",
            "Use auto (the sign of the larger departure), negative or positive.",
        )
    if not (math.isfinite(fraction) and 0.0 < fraction < 1.0):
        raise OptionError(
            f"--fraction {fraction:g} is not between 0 and 1 (exclusive).",
            "Give a fraction of the magnitude such as 0.1 (10 %).",
        )
    return make_excursion(
        store,
        filters,
        by=by,
        baseline=baseline,
        fraction=fraction,
        direction=direction,
        draws=draws,
        seed=seed,
        bootstrap=bootstrap,
        out=Path(out) if out is not None else None,
        command=command,
        width=width,
        shared_axis=shared_axis,
    )


def correct(store: Store, items: list[Correction]) -> CorrectResult:
    """Store corrections (``corrections.Correction``: record, field, value, why) and
    re-derive the sources they touch, in one commit."""
    from strata13.compile.integrity.corrections import correct as _correct

    result: CorrectResult = _correct(store, items)
    return result


def corrections(store: Store, source: list[str] | None = None) -> list[dict[str, Any]]:
    """Every stored correction: the record's place, what was published, the corrected
    value, the reason, and whether the record still exists ('applied' or 'orphaned')."""
    from strata13.compile.integrity.corrections import listing

    rows: list[dict[str, Any]] = listing(store, check_sources(store, source) if source else None)
    return rows


def overlaps(
    store: Store, source: str | None = None, **tolerances: Unpack[Tolerances]
) -> pd.DataFrame:
    """Probable duplicates between sources (pairs with score and reasons, and the decision
    already stored on each)."""
    from strata13.compile.integrity.store_ops import overlaps as _overlaps

    if source is not None:
        check_sources(store, [source])
    pairs: pd.DataFrame = _overlaps(store, source, **tolerances)
    return pairs


def confirm_overlaps(store: Store, path: str | Path) -> tuple[int | None, int, int]:
    """Store a decisions file (record_a, record_b, decision, note) in one commit."""
    from strata13.compile.integrity.store_ops import confirm

    counts: tuple[int | None, int, int] = confirm(store, Path(path))
    return counts


def coverage(
    store: Store,
    filters: Filters,
    by: str = "region",
    bin_myr: float | None = None,
    out: str | Path | None = None,
    command: str | None = None,
    width: str = "double",
) -> tuple[pd.DataFrame, dict[str, str], list[str]]:
    """Samples and sections per time bin × group × component (zeros kept), the files
    written (name -> sha256) and the notes (what the filters left out, with counts); with
    ``out`` a CSV, a heatmap (PNG, SVG, PDF; one journal column ``width`` wide) and a
    manifest naming ``command``."""
    from strata13.compile.integrity.coverage import coverage as _coverage

    result: tuple[pd.DataFrame, dict[str, str], list[str]] = _coverage(
        store, filters, by, bin_myr, Path(out) if out is not None else None, command, width
    )
    return result


def plot_agemodel(
    model: SectionModel, path: str | Path, note: str | None = None, width: str = "double"
) -> list[Path]:
    """Write a section model's age–position figure as PNG, SVG and PDF beside ``path``
    (x.png → x.png, x.svg, x.pdf), one journal column ``width`` wide (single | double);
    ``note`` (see ``figure_note``) is its caption line. Returns the three files."""
    from strata13.compile.ages.chronology import plot_model
    from strata13.compile.plotting.style import check_width

    written: list[Path] = plot_model(model, Path(path), note, check_width(width))
    return written


def check_width(width: str) -> str:
    """A figure width name (single | double, journal columns), or OptionError."""
    from strata13.compile.plotting.style import check_width as _check

    return _check(width)


def figure_files(path: str | Path) -> list[Path]:
    """The three files a figure written to ``path`` occupies (x.png → x.png, x.svg, x.pdf)."""
    from strata13.compile.plotting.save import paths_for

    return list(paths_for(path).values())


def figure_note(store: Store) -> str | None:
    """The note the store's figures carry: that the data are invented, for a demo store."""
    from strata13.compile.synthesis.run import data_note

    return data_note(store)


def scales(store: Store | None = None) -> dict[str, list[dict[str, Any]]]:
    """The shipped reference-material values and VSMOW–VPDB relations, each with its source;
    with a store, the relation the store uses is marked ``in_store``."""
    from dataclasses import asdict

    from strata13.schemas.materials import oxygen_relations, shipped_materials, store_table

    used = None
    table: list[Any] = list(shipped_materials())
    choice: dict[str, dict[str, str]] = {}
    if store is not None:
        settings = store.settings()
        used = settings.get("vsmow_constants")
        table, choice = store_table(settings)
    relations = [
        {**asdict(r), "in_store": (r.name == used) if store is not None else None}
        for r in oxygen_relations().values()
    ]

    def mark(m: Any) -> str | None:
        if store is None:
            return None
        isos = [i for i, vs in choice.get(m.material, {}).items() if vs == m.value_set]
        return "+".join(sorted(isos)) or ""

    return {
        "materials": [{**asdict(m), "in_store": mark(m)} for m in table],
        "relations": relations,
    }


def scale_disagreements(store: Store | None = None) -> list[dict[str, Any]]:
    """Reference materials whose published value sets disagree, per isotope: every value
    on VPDB (δ18O on VSMOW converted with the store's relation, IUPAC without a store), its
    1σ, and its difference from the value the store accepts (without a store: the default
    choice, ``schemas.materials.default_choice``)."""
    from strata13.compile.derive.settings import DEFAULT_VSMOW_CONSTANTS
    from strata13.schemas.materials import (
        default_choice,
        disagreements,
        shipped_materials,
        store_table,
    )

    if store is None:
        table = list(shipped_materials())
        return disagreements(table, default_choice(table), DEFAULT_VSMOW_CONSTANTS)
    settings = store.settings()
    table, choice = store_table(settings)
    relation = settings.get("vsmow_constants") or DEFAULT_VSMOW_CONSTANTS
    return disagreements(table, choice, relation)


def explain(store: Store, record: str) -> dict[str, Any]:
    """One record with its provenance and, for each δ value, the chain of steps from the
    reported value to the harmonised one. ``record`` may be a unique prefix (≥ 6 chars)."""
    from strata13.compile.derive.steps import value_after
    from strata13.schemas.fields import DELTA_FIELDS

    from strata13.errors import DomainError

    if len(record) < 6:
        raise OptionError(
            f"record id {record!r} is too short.", "Give at least 6 characters of the record id."
        )
    con, version = store.reader()
    try:
        cur = con.execute("SELECT * FROM records WHERE starts_with(record_id, ?) LIMIT 3", [record])
        cols = [d[0] for d in cur.description]
        hits = [dict(zip(cols, r, strict=True)) for r in cur.fetchall()]
        if not hits:
            raise DomainError(
                f"no record {record!r} in this store (version {version}).",
                "Find record ids with `strata13 query`.",
            )
        if len(hits) > 1:
            raise OptionError(
                f"record id {record!r} matches more than one record.",
                "Give more characters of the id.",
            )
        row = hits[0]
        chains = {}
        for d in DELTA_FIELDS:
            cid = row.get(f"{d}_chain")
            steps: list[dict[str, Any]] = []
            if cid:
                text = con.execute(
                    "SELECT steps_json FROM chains WHERE chain_id = ?", [cid]
                ).fetchone()
                steps = json.loads(text[0]) if text else []
            value = row[f"{d}_reported"]
            for k, step in enumerate(steps):  # the value after each step, from its own map
                value = value_after(step, value)
                step["value_after"] = row[d] if k == len(steps) - 1 else value
            chains[d] = {
                "reported": row[f"{d}_reported"],
                "scale": row[f"{d}_scale"],
                "harmonised": row[d],
                "status": row[f"{d}_status"],
                "chain_id": cid,
                "steps": steps,
            }
        age_text = (
            con.execute(
                "SELECT steps_json FROM chains WHERE chain_id = ?", [row["age_chain"]]
            ).fetchone()
            if row.get("age_chain")
            else None
        )
        source = con.execute(
            "SELECT citation, file_name FROM sources WHERE source_id = ?", [row["source_id"]]
        ).fetchone()
    finally:
        con.close()
    return {
        "version": version,
        "record": row,
        "isotopes": chains,
        "age_steps": json.loads(age_text[0]) if age_text else [],
        "citation": source[0] if source else None,
        "file": source[1] if source else None,
    }


def read_corrections(path: str | Path) -> list[Correction]:
    """The corrections of a CSV file (record_id, field, value, why), checked."""
    from strata13.compile.integrity.corrections import read_file

    items: list[Correction] = read_file(Path(path))
    return items


def run_demo(out: str | Path) -> Iterator[tuple[str, Any]]:
    """Build the invented demo compilation in ``out``, step by step: yields what to show
    as (kind, payload) with kind one of say, note, report, table."""
    from strata13.compile.demo import run_demo as _run_demo

    steps: Iterator[tuple[str, Any]] = _run_demo(Path(out))
    return steps


def interrupt() -> None:
    """Mark that the user pressed Ctrl-C: long loops of the library stop at their next step
    and running DuckDB statements are interrupted."""
    from strata13.compile.interrupts import stop

    stop()


def interrupted() -> bool:
    """Whether the user pressed Ctrl-C during this run."""
    return bool(_pressed.is_set())
