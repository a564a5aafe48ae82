"""δ13C–δ18O cross-plots, one PNG per section, marking failed and warned records.

Why: a cross-plot is how a geochemist judges covariance and outliers before trusting a
flag; the numbers (r, r², n, n_eff, p) head the plot of the points they come from.
matplotlib is imported here, lazily, through its object API (no global backend switch).
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pyarrow as pa

X_LABEL = "δ¹⁸O carb (‰ VPDB)"  # mass numbers as superscripts, as a journal prints them
Y_LABEL = "δ¹³C carb (‰ VPDB)"
# marker, face colour, edge colour, label — failed and warned stand out from the rest
STYLES = {
    "pass": ("o", "#4a7fb0", "#2b5a85", "passed"),
    "untested": ("o", "none", "#8c8c8c", "untested / not applicable"),
    "warn": ("^", "#f2a33a", "#a36410", "warned (kept)"),
    "fail": ("X", "#d1352b", "#7a1b15", "failed"),
}


def safe_name(*parts: str) -> str:
    """A file name from free text: letters, digits, '-', '_' only, plus a short hash so two
    sections whose names differ only in punctuation do not collide."""
    text = "__".join(parts)
    stem = re.sub(r"[^A-Za-z0-9_-]+", "-", text).strip("-_")[:80] or "section"
    tag = hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]
    return f"{stem}-{tag}.png"


RANKS = ("not applicable", "untested", "pass", "warn", "fail")
SHOWN = ("untested", "untested", "pass", "warn", "fail")


def _marks(rid: pa.Array, results: pa.Table) -> np.ndarray:
    """The worst outcome of each record (fail > warn > pass > untested), vectorised."""
    import pyarrow as pa
    import pyarrow.compute as pc

    rank = pc.index_in(results.column("outcome"), value_set=pa.array(RANKS))
    worst = (
        pa.table({"record_id": results.column("record_id"), "rank": rank})
        .group_by("record_id")
        .aggregate([("rank", "max")])
    )
    at = pc.index_in(rid, value_set=worst.column("record_id"))
    r = pc.fill_null(pc.take(worst.column("rank_max"), at), 1).to_numpy(zero_copy_only=False)
    return np.asarray(SHOWN, dtype=object)[np.asarray(r, dtype=np.int64)]


def cross_plots(
    records: Any,
    results: pa.Table,
    group_stats: pa.Table,
    out_dir: str | Path,
    note: str | None = None,
) -> list[Path]:
    """Write one cross-plot per (source, section) to ``out_dir``; returns the files.
    ``note`` goes in small type in each figure's corner (that demo data are invented)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from strata13.compile.screening.evaluate import _as_table, _Columns
    from strata13.compile.synthesis.figures import mark as note_on

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    cols = _Columns(_as_table(records))
    x, y = cols.num("d18o_carb"), cols.num("d13c_carb")
    mark = _marks(cols.text("record_id"), results)
    stats = _stats_by_section(group_stats)
    src, src_vals = cols.codes("source_id")
    sec, sec_vals = cols.codes("section_id")
    ok = (sec >= 0) & np.isfinite(x) & np.isfinite(y)
    idx = np.flatnonzero(ok)
    pair = (src[idx] + 1) * (int(sec.max(initial=0)) + 1) + sec[idx]
    uniq, first, inverse = np.unique(pair, return_index=True, return_inverse=True)
    order = np.argsort(inverse, kind="stable")
    bounds = np.r_[0, np.cumsum(np.bincount(inverse, minlength=uniq.size))]
    names = [
        (str(src_vals[int(src[i])]) if src[i] >= 0 else "", str(sec_vals[int(sec[i])]))
        for i in idx[first]
    ]

    written: list[Path] = []
    for k in sorted(range(uniq.size), key=lambda k: names[k]):
        s, t = names[k]
        rows = idx[order[bounds[k] : bounds[k + 1]]]
        fig = Figure(figsize=(6.0, 5.0), dpi=120)
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
        for kind in ("untested", "pass", "warn", "fail"):
            m = rows[mark[rows] == kind]
            if m.size:
                marker, face, edge, label = STYLES[kind]
                ax.scatter(
                    x[m],
                    y[m],
                    marker=marker,
                    facecolors=face,
                    edgecolors=edge,
                    s=46,
                    linewidths=0.9,
                    label=f"{label} ({m.size})",
                    zorder=3,
                )
        ax.set_xlabel(X_LABEL)
        ax.set_ylabel(Y_LABEL)
        lines = stats.get((s, t)) or [f"n = {rows.size} (no covariance rule applied)"]
        ax.set_title("\n".join([f"{t} ({s})", *lines]), fontsize=9)
        ax.legend(loc="best", fontsize=8, framealpha=0.85)
        ax.grid(True, alpha=0.3)
        fig.tight_layout()
        note_on(fig, note)
        path = out / safe_name(s, t)
        fig.savefig(path, format="png")
        written.append(path)
    return written


def _stats_by_section(groups: pa.Table | None) -> dict[tuple[str, str], list[str]]:
    """Text-box lines per section from the covariance table: the statistics of a whole
    section; unit groups and moving windows summarised by how many were flagged."""
    out: dict[tuple[str, str], list[str]] = {}
    if groups is None or groups.num_rows == 0:
        return out
    parts: dict[tuple[str, str, str], list[int]] = {}
    for g in groups.to_pylist():
        key = (str(g["source_id"]), str(g["section_id"]))
        if g.get("lithostrat_unit") is None and g.get("centre_m") is None:
            out.setdefault(key, []).append(_line(g))
        else:
            c = parts.setdefault((*key, str(g["rule"])), [0, 0])
            c[0] += 1
            c[1] += g["outcome"] in ("warn", "fail")
    for (s, t, rule), (count, flagged) in parts.items():
        out.setdefault((s, t), []).append(f"{rule}: {count} groups or windows, {flagged} flagged")
    return out


def _line(g: dict[str, Any]) -> str:
    def f(v: Any, spec: str) -> str:
        return (
            "–" if v is None or (isinstance(v, float) and not np.isfinite(v)) else format(v, spec)
        )

    return (
        f"r = {f(g['r'], _near_one(g['r']))}, r² = {f(g['r2'], _near_one(g['r2']))}, "
        f"n = {g['n']}, n_eff = {f(g['n_eff'], '.1f')}, p = {f(g['p'], '.2g')} "
        f"({g['outcome']})"
    )


def _near_one(v: Any) -> str:
    """Decimals that keep a correlation near ±1 from reading as exactly 1 (0.996, not 1.00)."""
    d = 2
    if isinstance(v, float) and np.isfinite(v):
        while d < 6 and abs(v) != 1.0 and round(abs(v), d) == 1.0:
            d += 1
    return f".{d}f"
