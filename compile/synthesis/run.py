"""Curves and excursion tables from a store: records -> samples -> groups -> files.

The science is in ``curve`` (LOESS, section-weighted bins, bootstrap, leave-one-out),
``excursion`` (per-section metrics) and ``figures``; this module chooses what goes into
them: the filtered records of one store version, one value per sample (replicates
averaged), the groups (by default component and setting; carbonate and organic δ13C never
in one curve unless asked), the bins (a width in Myr, or the stages of the store's chart),
the age draws stored with the age models, and it writes every output through an
:class:`~strata13.compile.export.artifact.Artifact` with a manifest that records the command,
the filters, each parameter, the store version and the settings hash, so the same request
reproduces the same files.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.export.artifact import Artifact

from strata13.errors import DomainError, OptionError

if TYPE_CHECKING:
    import pandas as pd
    import pyarrow as pa
    from strata13.compile.query.filters import Filters
    from strata13.compile.store.lake import Store

BY = ("region", "paleolat-band", "source", "setting", "component")
BAND = "paleolat-band"  # takes a width: --by paleolat-band:15
DEFAULT_BAND_DEG = 30.0
ISOTOPES = {"carb": "d13c_carb", "org": "d13c_org"}
GRID_POINTS = 241


def band_width(by: str | None) -> float | None:
    """The band width (degrees) of ``--by paleolat-band[:DEG]``, None for another grouping.

    A width divides 180 (5, 10, 15, 30, 45, 7.5 …), so the bands tile the globe from pole to
    pole with the equator on an edge."""
    if by is None or by.split(":", 1)[0] != BAND:
        if by is not None and ":" in by:
            raise OptionError(
                f"--by {by!r}: only {BAND} takes a value after ':'.", "Example: --by region"
            )
        return None
    _, sep, text = by.partition(":")
    if not sep:
        return DEFAULT_BAND_DEG
    try:
        width = float(text)
    except ValueError:
        width = math.nan
    parts = 180.0 / width if width > 0 else math.nan
    if not (0 < width <= 180 and abs(parts - round(parts)) < 1e-9):
        raise OptionError(
            f"--by {by!r}: the band width {text!r} is not a number of degrees that divides 180.",
            f"Example: --by {BAND}:15 (bands of 15°; the default is {DEFAULT_BAND_DEG:g}°).",
        )
    return width


def band_labels(paleolat: pd.Series, width: float) -> pd.Series:
    """Each paleolatitude's band, e.g. '+30° to +60°' (90°N falls in the top band)."""
    import numpy as np
    import pandas as pd

    low = np.minimum(np.floor(paleolat / width) * width, 90.0 - width)
    return low.map(
        lambda b: "no paleolatitude" if pd.isna(b) else f"{b + 0.0:+g}° to {b + width:+g}°"
    )


@dataclass
class CurveRequest:
    """Every parameter of a curve; written to the manifest as given."""

    isotope: str = "carb"  # carb | org
    bin_myr: float | None = None  # None: the stages of the store's chart
    span: float = 0.3
    boots: int = 200
    seed: int = 0
    min_sections: int = 5
    weight: str = "sections"
    age_draws: int = 0
    by: str | None = None  # None: component and setting
    allow_mixed: bool = False
    robustness: bool = False
    width: str = "double"  # the figure's journal column: single | double
    notes: list[str] = field(default_factory=list)

    def check(self) -> None:
        from strata13.compile.plotting.style import check_width

        check_width(self.width)
        if self.isotope not in ISOTOPES:
            raise OptionError(
                f"--isotope {self.isotope!r} is not carb or org.",
                "Curves are of carbonate (carb) or organic (org) δ13C.",
            )
        if self.by is not None and self.by.split(":", 1)[0] not in BY:
            raise OptionError(
                f"--by {self.by!r} is not one of {', '.join(BY)}.", "Example: --by region"
            )
        band_width(self.by)
        if self.bin_myr is not None and not self.bin_myr > 0:
            raise OptionError(
                f"--bin-myr {self.bin_myr:g} must be above 0.", "Example: --bin-myr 0.5"
            )
        if not 0 < self.span <= 1:
            raise OptionError(
                f"--span {self.span:g} is outside (0, 1].",
                "The span is the fraction of samples in each local fit; 0.3 is a common start.",
            )
        if self.boots < 0 or self.boots > 10_000:
            raise OptionError(
                f"--boots {self.boots} is outside 0 … 10000.",
                "200 bootstrap draws give stable 95 % bands (common practice).",
            )
        if self.age_draws < 0 or self.age_draws > 10_000:
            raise OptionError(
                f"--age-draws {self.age_draws} is outside 0 … 10000.",
                "Use up to the number of draws the store keeps (see redate).",
            )
        if self.min_sections < 1:
            raise OptionError("--min-sections must be at least 1.", "The default is 5.")
        if self.weight not in ("sections", "samples"):
            raise OptionError(
                f"--weight {self.weight!r} is not sections or samples.",
                "Sections weigh equally by default.",
            )


@dataclass
class Samples:
    """One value per sample with its group, from one store version."""

    frame: pd.DataFrame  # source_id, section_id, sample_id, group, age_ma, value, …
    version: int
    settings: dict[str, Any]
    value_label: str
    merged: bool
    notes: list[str]
    screen_left_out: dict[str, int] = field(default_factory=dict)  # state -> records


def _region_names(store: Store, lon: Any, lat: Any) -> Any:
    """The name of the store's region each point falls in ('outside' where none)."""
    import numpy as np
    from strata13.compile.query.regions import resolve_region

    con, _ = store.reader()
    try:
        named = dict(con.execute("SELECT name, geojson FROM regions ORDER BY name").fetchall())
    finally:
        con.close()
    if not named:
        raise DomainError(
            "the store has no named regions for --by region.",
            "Create the store with --regions FILE.",
        )
    out = np.full(len(lon), "outside any region", dtype=object)
    for name in sorted(named):
        inside = resolve_region(name, named).contains(
            np.asarray(lon, float), np.asarray(lat, float)
        )
        out[inside & (out == "outside any region")] = name
    return out


def samples_for(
    store: Store, filters: Filters, req: CurveRequest, *, as_of: int | None = None
) -> Samples:
    """The filtered records, one value per sample, each with its group label."""
    import pandas as pd
    from strata13.compile.plotting.style import CARB_LABEL, ORG_LABEL
    from strata13.compile.query.filters import run, screen_left_out
    from strata13.compile.synthesis.curve import average_replicates

    con, version = store.reader(as_of)
    try:
        settings = store.read_settings(con, "settings")
        matched = run(con, replace(filters, screened="all"))
    finally:
        con.close()
    table, left = screen_left_out(matched, filters)
    notes = [_screen_note(matched.num_rows, table.num_rows, left, filters.screened, matched)]
    df = table.to_pandas()
    if df.empty:
        if left:
            raise DomainError(
                f"no record of the {matched.num_rows} matching ones passes --screened "
                f"{filters.screened} ({_counts(left)} left out).",
                "Add --screened all to include them, or see `strata13 screen --summary`.",
            )
        raise DomainError(
            "no records match these filters; there is nothing to draw.",
            "Widen --interval or drop a filter; `strata13 query` shows what matches.",
        )
    frames = []
    kinds = ["carb", "org"] if req.allow_mixed else [req.isotope]
    for kind in kinds:
        col = ISOTOPES[kind]
        part = df[df[col].notna()].copy()
        if part.empty:
            continue
        part["value"] = part[col]
        part["isotope"] = kind
        if req.allow_mixed:  # a sample's carbonate and organic values stay two samples
            part["sample_id"] = part["sample_id"].astype(str) + f" ({kind})"
        frames.append(part)
    if not frames:
        raise DomainError(
            f"none of the {len(df)} matching records has a harmonised "
            f"{ISOTOPES[req.isotope]} value.",
            "Check `strata13 query` (values may be pending) or --isotope.",
        )
    data = pd.concat(frames, ignore_index=True)
    merged = req.allow_mixed and data["isotope"].nunique() > 1
    if req.allow_mixed and not merged:
        notes.append("--allow-mixed: only one kind of δ13C matched, nothing was merged")
    if req.by is None:
        label = (
            data["component"].fillna("component not stated")
            + " · "
            + data["setting"].fillna("setting not stated")
        )
    elif req.by == "region":
        label = pd.Series(_region_names(store, data["lon"], data["lat"]), index=data.index)
    elif (width := band_width(req.by)) is not None:
        if data["paleolat"].isna().all():
            raise DomainError(
                "no matching record has a paleolatitude (the store has no rotation model yet).",
                "Group --by region, source, setting or component instead.",
            )
        label = band_labels(data["paleolat"], width)
    else:
        label = data[{"source": "source_id"}.get(req.by, req.by)].fillna(f"{req.by} not stated")
    if not merged and req.by is not None and req.by != "component":
        # components are never mixed silently: a group holding several says so
        comps = data.groupby(label)["component"].nunique()
        for g, n in comps.items():
            if n > 1:
                notes.append(f"group {g!r} holds {n} components")
    data["group"] = label.astype(str)
    data = data[data["age_ma"].notna()]
    if data.empty:
        raise DomainError(
            "the matching records have no ages yet; a curve needs ages.",
            "Add age ties (see `strata13 agemodel`) or reported ages.",
        )
    keep = (
        "position_m",
        "position_kind",
        "age_ma",
        "age_sigma_ma",
        "age_basis",
        "component",
        "setting",
        "group",
        "isotope",
    )
    samples = average_replicates(data, "value", keep=keep)
    value_label = (
        "δ13C carb and org (‰ VPDB)"
        if merged
        else (CARB_LABEL if req.isotope == "carb" else ORG_LABEL)
    )
    return Samples(samples, version, settings, value_label, merged, notes, left)


def data_note(store: Store) -> str | None:
    """The note every figure of this store carries: that the data are invented, for a store
    the demo made; none otherwise."""
    from strata13.compile.plotting.save import INVENTED_NOTE

    return INVENTED_NOTE if store.made_by == "demo" else None


# a local line through fewer samples than this follows single samples rather than the trend
# (common practice for LOESS; a rule of thumb, not a published threshold)
MIN_STABLE_WINDOW = 10


def _fit_notes(group: str, ages: Any, req: CurveRequest, curve: pd.DataFrame) -> list[str]:
    """State a group's LOESS span in samples and in Myr, say when its window is too small
    for a stable line, and where and why its band is hidden."""
    import numpy as np
    from strata13.compile.synthesis.curve import window_reach, window_size

    ages = np.asarray(ages, dtype=float)
    n = int(np.isfinite(ages).sum())
    k = window_size(n, req.span)
    notes = []
    if "age" in curve.columns and len(curve):
        reach = window_reach(ages, curve["age"].to_numpy(float), req.span)
        if np.isfinite(reach).any():
            notes.append(
                f"group {group!r}: span {req.span:g} = windows of {k} of {n} samples, reaching "
                f"± {np.nanmedian(reach):.3g} Myr (median; {np.nanmin(reach):.3g}–"
                f"{np.nanmax(reach):.3g} Myr along the curve)"
            )
    if k < MIN_STABLE_WINDOW:
        notes.append(
            f"group {group!r}: span {req.span:g} covers {k} of {n} samples; a line through "
            f"fewer than {MIN_STABLE_WINDOW} follows single samples (common practice), so "
            "widen --span or add samples"
        )
    notes += _band_notes(group, req, curve)
    return notes


def _band_notes(group: str, req: CurveRequest, curve: pd.DataFrame) -> list[str]:
    """Where and why a group's band is hidden."""
    hidden = _hidden(curve)
    if hidden and req.boots:
        return [
            f"group {group!r}: band hidden at {hidden} of {len(curve)} grid ages, where "
            f"fewer than --min-sections {req.min_sections} sections contribute"
        ]
    if req.boots == 0:
        return [f"group {group!r}: no band (--boots 0)"]
    return []


def _hidden(curve: pd.DataFrame) -> int:
    return int((~curve["band_shown"].astype(bool)).sum())


def _figure_band_note(req: CurveRequest, curves: list[pd.DataFrame]) -> str:
    """The figure's line on the band: where it is hidden and why, or that there is none."""
    if req.boots == 0:
        return "no bootstrap band (--boots 0)"
    where = [
        f"{c['group'].iloc[0]} "
        + ("throughout" if _hidden(c) == len(c) else f"at {_hidden(c)} of {len(c)} ages")
        for c in curves
        if _hidden(c)
    ]
    if not where:
        return ""
    return f"Band hidden where < {req.min_sections} sections contribute: {'; '.join(where)}"


def _counts(left: dict[str, int]) -> str:
    return ", ".join(f"{n} {state}" for state, n in left.items())


def _screen_note(
    matched: int, used: int, left: dict[str, int], screened: str, table: pa.Table
) -> str:
    """What the screen filter did, with counts: a default that leaves data out says so."""
    if left:
        return (
            f"{used} of {matched} records used; {_counts(left)} left out by --screened "
            f"{screened}; --screened all to include"
        )
    if screened == "all" and matched:
        import pyarrow.compute as pc

        screen = pc.fill_null(table.column("screen"), "untested")
        n = {s: int(pc.sum(pc.equal(screen, s)).as_py() or 0) for s in ("fail", "untested")}
        if any(n.values()):
            return (
                f"--screened all: {n['fail']} fail and {n['untested']} untested records "
                f"included among {matched}"
            )
    return f"{used} of {matched} records used (--screened {screened})"


def bin_edges_for(
    req: CurveRequest,
    older: float,
    younger: float,
    scale: str,
    interval: tuple[float, float] | None = None,
) -> tuple[Any, list[tuple[str, float, float]]]:
    """Bin edges (Ma, old → young) and the stages for the figure: the one rule that curve,
    coverage and the export's curve share, so one request gives one set of bins.

    Edges are round on the store's chart: multiples of ``--bin-myr`` (k × width, exactly),
    or the chart's stage boundaries. With an ``interval`` (younger, older Ma) the bins run
    between its ends (the first and last bin end there); without one they cover the data
    (``older`` … ``younger``) from the enclosing multiple or stage boundary outward.
    """
    import numpy as np
    from strata13.schemas import timescales

    old, young = (interval[1], interval[0]) if interval is not None else (older, younger)
    units = timescales.load(scale).units_of("stage")
    if req.bin_myr is not None:
        w = req.bin_myr
        hi_k, lo_k = math.ceil(old / w - 1e-9), math.floor(young / w + 1e-9)
        inner = [round(k * w, 9) for k in range(hi_k, lo_k - 1, -1)]
        if interval is not None:
            inner = [e for e in inner if young < e < old]
            edges = [old, *inner, young]
        else:
            edges = inner
    else:
        bounds = sorted({u.base_ma for u in units} | {u.top_ma for u in units}, reverse=True)
        if interval is not None:
            edges = [old, *(b for b in bounds if young < b < old), young]
        else:
            above = [b for b in bounds if b >= old]
            below = [b for b in bounds if b <= young]
            edges = (
                [above[-1] if above else old]
                + [b for b in bounds if young < b < old]
                + [below[0] if below else young]
            )
    edges = sorted(set(edges), reverse=True)
    lo, hi = min(edges), max(edges)
    stages = [(u.name, u.base_ma, u.top_ma) for u in units if u.base_ma > lo and u.top_ma < hi]
    return np.array(edges, dtype=float), stages


def _section_draws(store: Store, version: int, keys: set[tuple[str, str]]) -> dict[Any, Any]:
    """Stored age-model draws (positions, draws) per section."""
    import numpy as np

    con, _ = store.reader(version)
    try:
        rows = con.execute(
            "SELECT source_id, section_id, chunk, positions_json, n_draws, draws "
            "FROM age_draws ORDER BY source_id, section_id, chunk"
        ).fetchall()
    finally:
        con.close()
    out: dict[tuple[str, str], list[Any]] = {}
    for src, sec, _chunk, pos, n, blob in rows:
        if (src, sec) not in keys:
            continue
        p = json.loads(pos)
        d = np.frombuffer(blob, dtype="<f4").reshape(n, len(p)).astype(float)
        got = out.setdefault((src, sec), [[], []])
        got[0] += p
        got[1].append(d)
    return {k: (np.array(p), np.concatenate(d, axis=1)) for k, (p, d) in out.items()}


@dataclass
class CurveResult:
    """The curve's folder, files (name -> sha256), groups, tables, notes, store version
    and the manifest written beside them."""

    out: Path
    files: dict[str, str]  # name -> sha256
    groups: list[str]
    bins: pd.DataFrame
    curve: pd.DataFrame
    influence: pd.DataFrame | None
    notes: list[str]
    version: int
    manifest: dict[str, Any] = field(default_factory=dict)


def _settings_hash(settings: dict[str, Any]) -> str:
    from strata13.compile.derive.settings import Settings

    return str(Settings.from_stored(settings).hash())


def _out_artifact(out: Path | Artifact, manifest: str) -> Artifact:
    return out if isinstance(out, Artifact) else Artifact(out, manifest)


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    df.to_csv(path, index=False, float_format="%.6g", lineterminator="\n")


def make_curve(
    store: Store,
    filters: Filters,
    req: CurveRequest,
    out: Path | Artifact,
    *,
    as_of: int | None = None,
    command: str | None = None,
) -> CurveResult:
    """Bins, LOESS curves with bands (and robustness), figure and ``curve_manifest.json``
    in ``out`` (a folder, or a part of an export's folder); ``command`` (the command line)
    goes into the manifest."""
    import numpy as np
    import pandas as pd
    from strata13.compile.derive.settings import DEFAULT_TIME_SCALE
    from strata13.compile.plotting.save import save
    from strata13.compile.synthesis import curve as cv
    from strata13.compile.synthesis.figures import curve_figure

    req.check()
    s = samples_for(store, filters, req, as_of=as_of)
    df = s.frame
    notes = list(s.notes) + list(req.notes)
    scale = s.settings.get("time_scale", DEFAULT_TIME_SCALE)
    # the axis and the grid cover the data (inside --interval): a curve is never drawn
    # where no sample is
    older, younger = float(df["age_ma"].max()), float(df["age_ma"].min())
    if filters.interval is not None:
        if req.bin_myr is not None and req.bin_myr > filters.interval[1] - filters.interval[0]:
            raise OptionError(
                f"--bin-myr {req.bin_myr:g} is wider than the interval "
                f"({filters.interval[1] - filters.interval[0]:g} Myr).",
                "Give a narrower bin or a wider --interval.",
            )
    if older - younger <= 0:
        raise DomainError(
            "all matching samples have one age; a curve needs an age range.",
            "Widen --interval or add sections.",
        )
    if req.bin_myr is not None and req.bin_myr > (older - younger):
        raise OptionError(
            f"--bin-myr {req.bin_myr:g} is wider than the ages of the matching "
            f"samples ({older:g}–{younger:g} Ma, {older - younger:.3g} Myr).",
            "Give a narrower bin; bins cover the samples' ages.",
        )
    edges, stages = bin_edges_for(req, older, younger, scale, filters.interval)
    full_grid = np.linspace(older, younger, GRID_POINTS)
    draws = None
    if req.age_draws:
        keys = set(zip(df["source_id"], df["section_id"], strict=True))
        draws = cv.sample_age_draws(
            df, req.age_draws, req.seed, _section_draws(store, s.version, keys)
        )
    bins, curves, robust, influence = [], [], [], []
    groups = sorted(df["group"].unique())
    for g in groups:
        part = df[df["group"] == g].reset_index(drop=True)
        b = cv.bin_stats(part, edges, req.weight)
        b.insert(0, "group", g)
        bins.append(b)
        if len(part) < 4:
            notes.append(f"group {g!r}: {len(part)} samples, too few for a curve (bins only)")
            continue
        a = part["age_ma"].to_numpy()
        grid = full_grid[(full_grid <= a.max()) & (full_grid >= a.min())]
        try:
            gd = None
            if draws is not None:
                rows = np.flatnonzero(df["group"].to_numpy() == g)
                gd = np.stack([draws(k)[rows] for k in range(req.age_draws)])
            c = cv.curve(
                part, grid, req.span, req.boots, req.seed, req.min_sections, req.weight, gd
            )
        except DomainError as exc:
            notes.append(f"group {g!r}: no curve ({exc.message})")
            continue
        c.insert(0, "group", g)
        curves.append(c)
        notes += _fit_notes(g, part["age_ma"], req, c)
        if req.robustness:
            for leave in ("source", "section"):
                if (
                    part[["source_id"] if leave == "source" else ["source_id", "section_id"]]
                    .drop_duplicates()
                    .shape[0]
                    < 2
                ):
                    continue
                r = cv.robustness(part, grid, req.span, leave, req.weight)
                rc = r.curves.copy()
                rc.insert(0, "group", g)
                rc.insert(1, "leave", leave)
                robust.append(rc)
                ri = r.influence.copy()
                ri.insert(0, "group", g)
                ri.insert(1, "leave", leave)
                influence.append(ri)
    art = _out_artifact(out, "curve_manifest.json")
    folder = art.open()
    bins_df = pd.concat(bins, ignore_index=True)
    curve_df = (
        pd.concat(curves, ignore_index=True)
        if curves
        else pd.DataFrame(columns=["group", "age", "fit", "lo", "hi", "n_sections", "band_shown"])
    )
    _write_csv(bins_df, art.path("bins.csv"))
    art.add("bins.csv")
    _write_csv(curve_df, art.path("curve.csv"))
    art.add("curve.csv")
    infl = pd.concat(influence, ignore_index=True) if influence else None
    rob = pd.concat(robust, ignore_index=True) if robust else None
    if rob is not None and infl is not None:
        _write_csv(rob, art.path("robustness_curves.csv"))
        art.add("robustness_curves.csv")
        _write_csv(infl, art.path("influence.csv"))
        art.add("influence.csv")
    fig = curve_figure(
        df[["group", "age_ma", "value"]],
        curve_df,
        bins=bins_df if len(groups) == 1 else list(edges),
        robustness=rob[rob["leave"] == "source"] if rob is not None else None,
        stages=stages,
        group_label="group (component · setting)" if req.by is None else req.by,
        title=_title(filters, s, req),
        width=req.width,
        value_label=s.value_label,
        merged=s.merged,
        note=_figure_band_note(req, curves),  # a hidden band says why on the figure too
        band_label=f"{cv.BAND[1] - cv.BAND[0]:g} % section bootstrap"
        + (" with age draws" if req.age_draws else ""),
        robust_label="refits, one source left out each",
    )
    for path in save(fig, art.path("curve.png"), data_note(store)):
        art.add(path.name)
    manifest: dict[str, Any] = {
        "tool": "strata13",
        "what": "curve",
        **({"command": command} if command is not None else {}),
        "store_version": s.version,
        "settings_hash": _settings_hash(s.settings),
        "time_scale": scale,
        "parameters": asdict(req),
        "filters": filters.describe(),
        "screening_rules": {
            "name": s.settings.get("screen_rules_name"),
            "sha256": s.settings.get("screen_rules_sha256"),
            "untested_passes": s.settings.get("screen_untested_passes"),
        },
        "samples": int(len(df)),
        "screen_left_out": s.screen_left_out,
        "groups": groups,
        "notes": notes,
    }
    art.finish(manifest)
    files = dict(art.files)
    manifest["files"] = [{"path": k, "sha256": v} for k, v in sorted(files.items())]
    return CurveResult(
        folder,
        files,
        groups,
        bins_df,
        curve_df,
        infl,
        notes,
        s.version,
        json.loads(json.dumps(manifest, default=str)),
    )


def _title(filters: Filters, s: Samples, req: CurveRequest) -> str:
    iv = filters.interval_info or {}
    where = f"{iv.get('given')} · " if iv.get("given") else ""
    n_sec = s.frame[["source_id", "section_id"]].drop_duplicates().shape[0]
    return f"{where}{len(s.frame)} samples · {n_sec} sections"


# ------------------------------------------------------------------------- excursions


@dataclass
class ExcursionResult:
    """Per-section metrics with their uncertainty, the summary across sections and groups,
    the files written (name -> sha256; empty without ``out``), the store version and the
    draws measured (``draws``, ``seed``, ``bootstrap``)."""

    per_section: pd.DataFrame
    summary: pd.DataFrame
    files: dict[str, str]
    version: int
    notes: list[str] = field(default_factory=list)  # what was left out or held, with counts
    draws: int = 0
    seed: int = 0
    bootstrap: bool = True
    manifest: dict[str, Any] = field(default_factory=dict)


def _age_draw_notes(ages: Any, n_draws: int, n_samples: int) -> tuple[list[str], dict[str, Any]]:
    """Where the samples' drawn ages come from, with counts (a fixed age says so: its error
    is unknown, not zero), and whether the stored draws are reused."""
    from_model = sum(int(rows.size) for rows, _, _ in ages.sections)
    normal, uniform = int(ages.normal.size), int(ages.uniform.size)
    fixed = n_samples - from_model - normal - uniform
    counts = {
        "age model draws": from_model,
        "normal with their age σ": normal,
        "uniform over their stage": uniform,
        "held fixed (no age σ)": fixed,
    }
    notes = [
        f"draws: {n_draws}; ages of the {n_samples} samples: "
        + ", ".join(f"{n} {what}" for what, n in counts.items() if n)
    ]
    if fixed:
        notes.append(
            f"{fixed} samples have no age σ: their ages are held fixed in the draws (their age "
            "error is unknown, not zero), so the age ranges leave it out"
        )
    stored = [int(d.shape[0]) for _, _, d in ages.sections]
    if stored and n_draws > min(stored):
        notes.append(
            f"the store keeps {min(stored)} age draws per section; the {n_draws} draws reuse "
            "them in turn (the resampled samples differ)"
        )
    return notes, counts | {"stored_per_section": min(stored) if stored else None}


def _missed_draws(table: pd.DataFrame, n_draws: int) -> str:
    """The sections whose onset or recovery (found on all samples) some draws did not find,
    with the count that did: "S1 (group) onset 480, recovery 470; …"."""
    out = []
    for row in table.itertuples(index=False):
        got = [
            f"{name} {int(getattr(row, f'{name}_found_draws'))}"
            for name in ("onset", "recovery")
            if math.isfinite(getattr(row, f"{name}_age_ma"))
            and int(getattr(row, f"{name}_found_draws")) < n_draws
        ]
        if got:
            out.append(f"{row.section_id} ({row.group}) {', '.join(got)}")
    return "; ".join(out) if n_draws else ""


def _write_parquet(df: pd.DataFrame, path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), path, compression="zstd")


def make_excursion(
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
    out: Path | None = None,
    command: str | None = None,
    width: str = "double",
    shared_axis: bool = True,
) -> ExcursionResult:
    """Per-section excursion metrics in the filtered interval with their uncertainty over
    ``draws`` draws (``excursion_draws``: age draws and, with ``bootstrap``, resampled
    samples; default ``DEFAULT_DRAWS``, 0 for none) and their summary; with ``out``, the
    tables (CSV and Parquet), a column list, the figure and a manifest naming ``command``."""
    from strata13.compile.derive.settings import DEFAULT_TIME_SCALE
    from strata13.compile.plotting.axes import chart_stages
    from strata13.compile.plotting.save import save
    from strata13.compile.plotting.style import check_width
    from strata13.compile.synthesis import curve as cv
    from strata13.compile.synthesis import excursion as ex
    from strata13.compile.synthesis import excursion_draws as ed
    from strata13.compile.synthesis.figures import excursion_figure

    if filters.interval is None:
        raise OptionError(
            "excursion needs --interval (the interval holding the excursion).",
            "Example: --interval Toarcian",
        )
    n_draws = ed.check_draws(ed.DEFAULT_DRAWS if draws is None else draws)
    check_width(width)
    # never mix components within a section's record: by default one row per section and
    # component (the samples of bulk and micrite alternate in some cores)
    req = CurveRequest(by=by or "component")
    req.check()
    s = samples_for(store, filters, req)
    df = s.frame
    group_col = "group"
    per = ex.per_section(df, group_col, baseline, fraction, direction)
    notes = list(s.notes)
    sources: dict[str, Any] = {}
    ages = None
    if n_draws:
        keys = set(zip(df["source_id"], df["section_id"], strict=True))
        ages = cv.sample_age_draws(df, n_draws, seed, _section_draws(store, s.version, keys))
        more, sources = _age_draw_notes(ages, n_draws, len(df))
        notes += more
        if not bootstrap:
            notes.append("--no-bootstrap: the draws vary the ages only, not the samples")
    else:
        notes.append("--draws 0: no uncertainty (the spread columns are blank)")
    md = ed.draw_metrics(
        df,
        per,
        n_draws,
        seed,
        ages,
        bootstrap=bootstrap,
        group_col=group_col,
        baseline_window=baseline,
        fraction=fraction,
        direction=direction,
    )
    table = ed.with_uncertainty(per, md)
    summ = ed.summary(per, group_col, md)
    missed = _missed_draws(table, n_draws)
    if missed:
        notes.append(
            f"not found in every one of the {n_draws} draws (spread over the draws that found "
            f"it; counts in *_found_draws): {missed}"
        )
    files: dict[str, str] = {}
    manifest: dict[str, Any] = {}
    if out is not None:
        art = Artifact(out)
        art.open()
        for name, frame in (("excursion_sections", table), ("excursion_summary", summ)):
            _write_csv(frame, art.path(f"{name}.csv"))
            art.add(f"{name}.csv")
            _write_parquet(frame, art.path(f"{name}.parquet"))
            art.add(f"{name}.parquet")
        _write_csv(ed.column_notes(), art.path("excursion_columns.csv"))
        art.add("excursion_columns.csv")
        what = "ages drawn, samples resampled" if bootstrap else "ages drawn, samples fixed"
        try:
            fig = excursion_figure(
                df,
                table,
                group_col=group_col,
                value_label=s.value_label,
                title="δ13C aligned on the excursion onset",
                summary=summ,
                ranges_note=f"ranges: 2.5–97.5 % of {n_draws} draws\n({what})"
                if n_draws
                else "no ranges (--draws 0)",
                width=width,
                shared_axis=shared_axis,
                stages=chart_stages(s.settings.get("time_scale", DEFAULT_TIME_SCALE)),
            )
            for path in save(fig, art.path("excursion.png"), data_note(store)):
                art.add(path.name)
        except DomainError as exc:
            art.write_text("excursion_figure_skipped.txt", exc.message + "\n")
        manifest = {
            "tool": "strata13",
            "what": "excursion",
            **({"command": command} if command is not None else {}),
            "store_version": s.version,
            "settings_hash": _settings_hash(s.settings),
            "time_scale": s.settings.get("time_scale"),
            "parameters": {
                "by": req.by,
                "baseline": list(baseline) if baseline is not None else None,
                "fraction": fraction,
                "direction": direction,
                "draws": n_draws,
                "seed": seed,
                "bootstrap": bootstrap,
                "width": width,
                "shared_axis": shared_axis,
            },
            "uncertainty": {
                "draws": n_draws,
                "seed": seed,
                "bootstrap": bootstrap,
                "method": "each draw: one age draw of every sample (the index shared by all "
                "sections)"
                + (
                    " and the section's samples resampled with replacement, kept in "
                    "stratigraphic order"
                    if bootstrap
                    else ""
                )
                + "; centre = the metric of all samples at central ages; 1σ (n − 1) and the "
                "2.5/97.5 percentiles of the draws",
                "ages": sources,
            },
            "filters": filters.describe(),
            "samples": int(len(df)),
            "screen_left_out": s.screen_left_out,
            "notes": notes,
        }
        art.finish(manifest)
        files = dict(art.files)
    return ExcursionResult(
        table,
        summ,
        files,
        s.version,
        notes,
        n_draws,
        seed,
        bootstrap,
        json.loads(json.dumps(manifest, default=str)),
    )
