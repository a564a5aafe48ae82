"""Time on the command line: chart listings, named time bins and age-model views.

The science lives in ``schemas.timescales`` (charts, conversion) and ``compile.ages.agemodel``
(draws); this module connects them to a store: which chart a name resolves on, which
interval a filter means in the store's ages, and what one section's age model looks like.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, cast

from strata13.errors import DomainError, OptionError
from strata13.suggest import did_you_mean

if TYPE_CHECKING:
    import numpy as np
    from strata13.compile.store.lake import Store

STAGE_COLUMNS = [
    "name",
    "rank",
    "parent",
    "base_ma",
    "top_ma",
    "uncertainty_ma",
    "confidence",
    "sigma_ma",
    "sigma_from",  # "stated", or the chart a blank error is borrowed from
    "approximate",
    "note",
]


def chart(name: str | None, store: Store | None = None) -> Any:
    """The chart a command works on: ``name`` (a version or a CSV table of the same format),
    else the store's, else the current international chart."""
    from strata13.schemas import timescales

    if name is not None and name.lower().endswith(".csv"):
        return timescales.load_file(Path(name))
    if name is None and store is not None:
        name = store.settings().get("time_scale")
    return timescales.load(name or timescales.DEFAULT_VERSION)


def stages(scale: Any, interval: str | None = None) -> tuple[list[dict[str, Any]], list[str]]:
    """The chart's units (old to young within each rank as the table lists them), or those
    overlapping ``interval``; returns (rows, notes)."""
    from strata13.schemas import timescales

    notes: list[str] = []
    units = list(scale.units)
    if interval:
        iv = timescales.resolve_interval(interval, scale)
        notes += list(iv.notes)
        units = [u for u in units if u.base_ma > iv.younger_ma and u.top_ma < iv.older_ma]
        notes.append(f"{iv.description}: {len(units)} units of {scale.version} overlap it")
    rows = []
    for u in units:
        row = {c: getattr(u, c) for c in STAGE_COLUMNS if c != "sigma_from"}
        row["sigma_from"] = "stated" if u.sigma_ma is not None else "not stated"
        if u.sigma_ma is None and scale.version in timescales.versions():
            got = timescales.boundary_sigma(scale.version, u.boundary_key)
            if got.borrowed_from is not None:
                row["sigma_ma"] = got.sigma_ma
                row["sigma_from"] = f"borrowed from {got.borrowed_from}"
        rows.append({c: row[c] for c in STAGE_COLUMNS})
    return rows, notes


@dataclass
class Interval:
    """A time bin as the store's ages see it: (younger, older) Ma on the store's chart."""

    younger_ma: float
    older_ma: float
    text: str
    time_scale: str
    notes: list[str] = field(default_factory=list)

    def describe(self) -> dict[str, Any]:
        return {
            "given": self.text,
            "younger_ma": self.younger_ma,
            "older_ma": self.older_ma,
            "time_scale": self.time_scale,
            "notes": self.notes,
        }


def resolve(text: str, store: Store | None, time_scale: str | None = None) -> Interval:
    """``--interval`` text -> the interval on the store's chart.

    Names resolve on ``time_scale`` if given, else on the store's chart; an interval read on
    another chart than the store's is moved onto the store's chart (ages move with their
    boundaries) and a note says so.
    """
    import numpy as np
    from strata13.schemas import timescales

    store_scale = chart(None, store)
    scale = chart(time_scale, store) if time_scale else store_scale
    iv = timescales.resolve_interval(text, scale)
    notes = list(iv.notes)
    older, younger = iv.older_ma, iv.younger_ma
    if scale.version != store_scale.version:
        moved, _ = timescales.convert(np.array([younger, older]), scale, store_scale)
        if np.isnan(moved).any():
            raise OptionError(
                f"--interval {text!r} on {scale.version} lies outside the "
                f"boundaries it shares with the store's chart "
                f"{store_scale.version}.",
                "Give the interval on the store's chart.",
            )
        notes.append(
            f"{iv.description} on {scale.version} is {moved[1]:g}–{moved[0]:g} Ma on "
            f"the store's chart {store_scale.version}"
        )
        younger, older = float(moved[0]), float(moved[1])
    return Interval(younger, older, text, store_scale.version, notes)


# --------------------------------------------------------------------------- age models


@dataclass
class SectionModel:
    source_id: str
    section_id: str
    position_kind: str
    time_scale: str
    ties: list[dict[str, Any]]  # stored ties with their age on the store's chart
    positions: Any  # distinct sample positions (m)
    draws: Any  # n_draws x positions (float32), empty when the section has no model
    records: int
    basis_counts: dict[str, int]
    reason: str = ""  # why there is no model, when there is none
    prior_text: str = ""  # the accumulation prior the model used, and whose it is


def find_section(con: Any, name: str) -> tuple[str, str]:
    """``source/section`` or a section id unique in the store -> (source_id, section_id)."""
    rows = con.execute("SELECT DISTINCT source_id, section_id FROM records").fetchall()
    if "/" in name:
        src, _, sec = name.rpartition("/")
        if (src, sec) in rows:
            return src, sec
    hits = [r for r in rows if r[1] == name]
    if len(hits) == 1:
        hit: tuple[str, str] = hits[0]
        return hit
    if len(hits) > 1:
        raise OptionError(
            f"section {name!r} is in {len(hits)} sources: {', '.join(h[0] for h in hits)}.",
            f"Write SOURCE/SECTION, e.g. {hits[0][0]}/{name}.",
        )
    known = sorted({r[1] for r in rows} | {f"{r[0]}/{r[1]}" for r in rows})
    raise DomainError(
        f"no section {name!r} in this store." + did_you_mean(name, known, cutoff=0.5),
        'List sections with `strata13 sql "SELECT DISTINCT source_id, section_id FROM records"`.',
    )


def section_model(store: Store, name: str) -> SectionModel:
    """One section's ties (as given and on the store's chart) and its stored draws."""
    import numpy as np
    from strata13.compile.derive.ages import ties_on_scale

    con, _ = store.reader()
    try:
        src, sec = find_section(con, name)
        # a store's settings name its chart (written when the store is made)
        scale = cast(str, store.settings().get("time_scale"))
        ties = (
            con.execute(
                "SELECT * FROM age_ties WHERE source_id = ? AND section_id = ? ORDER BY position_m",
                [src, sec],
            )
            .to_arrow_table()
            .to_pylist()
        )
        chunks = con.execute(
            "SELECT positions_json, n_draws, draws FROM age_draws WHERE "
            "source_id = ? AND section_id = ? ORDER BY chunk",
            [src, sec],
        ).fetchall()
        kind = con.execute(
            "SELECT any_value(position_kind), count(*) FROM records WHERE "
            "source_id = ? AND section_id = ?",
            [src, sec],
        ).fetchone()
        secs = con.execute(
            "SELECT * FROM sections WHERE source_id = ? AND section_id = ?", [src, sec]
        ).to_arrow_table()
        counts = dict(
            con.execute(
                "SELECT coalesce(age_basis, 'undated'), count(*) FROM records "
                "WHERE source_id = ? AND section_id = ? GROUP BY 1",
                [src, sec],
            ).fetchall()
        )
    finally:
        con.close()
    assert kind is not None  # an aggregate without GROUP BY returns one row
    from strata13.compile.derive.ages import default_prior, priors
    from strata13.compile.derive.settings import Settings

    settings = Settings.from_stored(store.settings())
    policy = settings.blank_boundary_sigma
    prior, whose = priors(settings, secs).get((src, sec), (default_prior(settings), "store"))
    unplaced = ""
    try:
        placed = ties_on_scale(ties, scale, policy) if ties else []
    except DomainError as exc:  # the store's chart cannot place a tie: shown as given
        placed = [t | {"age": None, "sigma": None, "shared_key": None} for t in ties]
        unplaced = f"a tie cannot be placed on {scale}: {exc.message}"
    positions, draws = stored_draws(chunks)
    model = SectionModel(
        src,
        sec,
        kind[0] or "height",
        scale,
        placed,
        np.array(positions),
        draws,
        int(kind[1]),
        counts,
        prior_text=f"{prior.describe()} ({'the section' if whose == 'section' else 'the store'}'s)",
    )
    if not draws.size:
        model.reason = unplaced or _no_model_reason(model)
    return model


def _no_model_reason(model: SectionModel) -> str:
    """Why a section has no age model: too few ties, or ties that contradict each other."""
    from strata13.compile.ages import agemodel

    if len(model.ties) < 2:
        return f"{len(model.ties)} tie(s); two or more are needed"
    try:
        agemodel.validate_ties([_model_tie(t) for t in model.ties], model.position_kind)
    except DomainError as exc:
        return f"its ties contradict each other on {model.time_scale}: {exc.message}"
    return "no sample of the section has a position"


def _model_tie(t: dict[str, Any]) -> Any:
    from strata13.compile.ages import agemodel

    return agemodel.Tie(
        position_m=t["position_m"],
        age_ma=t["age"],
        age_sigma_ma=t["sigma"],
        basis=t["basis"],
        boundary_key=t["shared_key"],
        note=t.get("boundary") or t.get("note") or "",
        source=t.get("tie_source_id") or "",
    )


def plot_model(
    model: SectionModel, path: Path, note: str | None = None, width: str = "double"
) -> list[Path]:
    """The section's age–position figure (samples, ties, median, 95 % band) as PNG, SVG
    and PDF beside ``path``, one journal column ``width`` wide; ``note`` is its caption
    line (that demo data are invented)."""
    import numpy as np
    from strata13.compile.ages import agemodel
    from strata13.compile.ages.plot import plot_section
    from strata13.compile.plotting.axes import chart_stages

    if model.draws.size == 0:
        raise DomainError(
            f"section {model.source_id}/{model.section_id} has no age model ({model.reason}).",
            "Add or correct its age ties in a mapping file or a source of ties.",
        )
    ties = [_model_tie(t) for t in model.ties]
    summary = agemodel.summarise(model.draws.astype(np.float64))
    title = (
        f"{model.section_id} ({model.source_id})\nage model on {model.time_scale}, "
        f"{model.draws.shape[0]} draws"
    )
    return plot_section(
        ties,
        model.positions,
        summary,
        model.position_kind,
        title,
        path,
        width,
        note=note,
        stages=chart_stages(model.time_scale),
    )


def stored_draws(chunks: list[tuple[Any, ...]]) -> tuple[list[float], np.ndarray]:
    """A section's age draws as stored (``age_draws`` rows of positions_json, n_draws and
    float32 draws, in chunk order): (positions, draws × positions array)."""
    import numpy as np

    positions: list[float] = []
    blocks = []
    for pos_json, n_draws, blob in chunks:
        p = json.loads(pos_json)
        positions += p
        blocks.append(np.frombuffer(blob, dtype="<f4").reshape(n_draws, len(p)))
    draws = np.concatenate(blocks, axis=1) if blocks else np.empty((0, 0), dtype="<f4")
    return positions, draws
