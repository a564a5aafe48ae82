"""Synthesis figures: sizes, determinism, layout promises and the palette's colour-blind
safety. Each check names what it is checked against. All data are invented."""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.image import imread
from strata13.compile.plotting import style
from strata13.compile.plotting.save import save
from strata13.compile.plotting.style import DPI
from strata13.compile.synthesis import excursion, figures
from strata13.compile.synthesis.figures import CURVE_HEIGHT_IN, MERGED_NOTE, PALETTE

from strata13.errors import DomainError

STAGES = [("Toarcian", 184.2, 174.7), ("Pliensbachian", 192.9, 184.2)]


def _inputs(
    groups: tuple[str, ...] = ("North", "South"), band: bool = True
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(3)
    ages = np.linspace(180.0, 187.0, 60)
    samples = pd.concat(
        [
            pd.DataFrame(
                {
                    "group": g,
                    "age_ma": ages,
                    "value": 1.0
                    + k
                    - 3.0 * np.exp(-(((ages - 183.5) / 0.5) ** 2))
                    + rng.normal(0, 0.2, ages.size),
                }
            )
            for k, g in enumerate(groups)
        ]
    )
    grid = np.linspace(180.0, 187.0, 40)
    curve = pd.concat(
        [
            pd.DataFrame(
                {
                    "group": g,
                    "age_ma": grid,
                    "fit": (f := 1.0 + k - 3.0 * np.exp(-(((grid - 183.5) / 0.5) ** 2))),
                    "lo": f - 0.3,
                    "hi": f + 0.3,
                    "band_shown": band & (grid > 181.0),
                }
            )
            for k, g in enumerate(groups)
        ]
    )
    robust = pd.concat(
        [
            pd.DataFrame(
                {
                    "group": groups[0],
                    "left_out": s,
                    "age_ma": grid,
                    "fit": 1.0 + 0.1 * j - 3.0 * np.exp(-(((grid - 183.5) / 0.5) ** 2)),
                }
            )
            for j, s in enumerate(("A", "B", "C"))
        ]
    )
    return samples, curve, robust


def test_curve_figure_size_and_png_pixels(tmp_path: Path) -> None:
    # Source: matplotlib's own reading of the file (imread) against size × DPI; the width
    # is the single column's 85 mm (common practice).
    samples, curve, robust = _inputs()
    fig = figures.curve_figure(
        samples,
        curve,
        robustness=robust,
        stages=STAGES,
        bins=[182.0, 184.0, 186.0],
        title="Invented",
        width="single",
    )
    fig.canvas.draw()
    w, h = fig.get_size_inches()
    assert w == pytest.approx(85.0 / 25.4) and h > CURVE_HEIGHT_IN["single"]
    png, svg, pdf = save(fig, tmp_path / "c.png")
    assert svg.stat().st_size > 0 and pdf.read_bytes()[:5] == b"%PDF-"
    rows, cols = imread(png).shape[:2]
    assert abs(rows - h * DPI) < 1 and abs(cols - w * DPI) < 1  # whole pixels
    ax = fig.axes[0]
    assert ax.get_xlim()[0] > ax.get_xlim()[1]  # older on the left (OLDER_ON_LEFT)
    assert ax.get_ylabel() == r"$\delta^{13}\mathrm{C}_{\mathrm{carb}}$ (‰ VPDB)"
    assert fig.axes[1].get_xlabel() == "Age (Ma)"  # on the stage strip under the plot


def test_svg_and_png_bytes_repeat(tmp_path: Path) -> None:
    # Source: the determinism promise; matplotlib salts SVG ids with a random uuid unless
    # svg.hashsalt is set, so two calls differ without it.
    out = []
    for k in range(2):
        samples, curve, robust = _inputs()
        fig = figures.curve_figure(samples, curve, robustness=robust, stages=STAGES)
        out.append(save(fig, tmp_path / f"{k}.png"))
    (p0, s0, d0), (p1, s1, d1) = out
    assert s0.read_bytes() == s1.read_bytes()
    assert p0.read_bytes() == p1.read_bytes()
    assert d0.read_bytes() == d1.read_bytes() and b"CreationDate" not in d0.read_bytes()
    text = s0.read_text(encoding="utf-8")
    assert "<dc:date>" not in text and "<dc:title>strata13</dc:title>" in text
    assert b"tIME" not in p0.read_bytes() and b"Software" not in p0.read_bytes()


def test_one_group_and_band_hidden_everywhere() -> None:
    # Source: the band_shown contract: no band drawn and no band in the legend.
    samples, curve, _ = _inputs(groups=("Only",), band=False)
    fig = figures.curve_figure(samples, curve, value_label=figures.ORG_LABEL)
    fig.canvas.draw()
    legend = fig.legends[0]
    labels = [t.get_text() for t in legend.get_texts()]
    assert labels == ["Only (n = 60)"]
    assert not [c for c in fig.axes[0].collections if "Between" in type(c).__name__]
    assert fig.axes[0].get_ylabel() == style.math(figures.ORG_LABEL)
    assert fig.axes[0].get_ylabel().startswith(r"$\delta^{13}\mathrm{C}_{\mathrm{org}}$")


def test_legend_overlaps_no_axes_and_notes() -> None:
    # Source: the layout promise, checked on the rendered extents.
    samples, curve, robust = _inputs()
    fig = figures.curve_figure(
        samples, curve, robustness=robust, stages=STAGES, merged=True, group_label="region"
    )
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    box = fig.legends[0].get_window_extent(r)
    for ax in fig.axes:
        assert not box.overlaps(ax.get_window_extent(r))
    assert fig.axes[0].get_title(loc="left") == style.math(MERGED_NOTE)
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "refits, one left out each" in labels and "curve band (lo–hi)" in labels
    assert len([c for c in fig.axes[0].collections if "Between" in type(c).__name__]) == 2


def test_stage_names_dropped_where_they_do_not_fit() -> None:
    # Source: the rendered text extent against the stage's width on the strip.
    samples, curve, _ = _inputs()
    stages = [
        ("Toarcian", 184.2, 174.7),
        ("Narrowstage", 184.3, 184.2),
        ("Pliensbachian", 192.9, 184.3),
    ]
    fig = figures.curve_figure(samples, curve, stages=stages)
    strip = fig.axes[1]
    shown = {t.get_text(): t.get_visible() for t in strip.texts}
    assert shown == {"Toarcian": True, "Narrowstage": False, "Pliensbachian": True}


def test_bins_table_and_missing_columns() -> None:
    # Source: the documented input columns.
    samples, curve, _ = _inputs()
    bins = pd.DataFrame(
        {
            "group": ["North", "North"],
            "age_ma": [182.0, 185.0],
            "value": [1.0, 0.9],
            "lo": [0.7, 0.6],
            "hi": [1.3, 1.2],
        }
    )
    fig = figures.curve_figure(samples, curve, bins=bins)
    assert "bin summaries (lo–hi)" in [t.get_text() for t in fig.legends[0].get_texts()]
    with pytest.raises(DomainError, match="fit"):
        figures.curve_figure(samples, curve.drop(columns="fit"))
    with pytest.raises(DomainError, match="nothing to plot"):
        figures.curve_figure(samples.iloc[:0], curve.iloc[:0])


def _sections() -> pd.DataFrame:
    x = np.arange(0.0, 20.0, 0.25)
    parts = []
    for i, (kind, amp) in enumerate((("height", -3.0), ("depth", -2.0), ("height", 2.5))):
        pos = x if kind == "height" else 300.0 - x
        parts.append(
            pd.DataFrame(
                {
                    "source_id": "inv",
                    "section_id": f"S{i}",
                    "position_m": pos,
                    "position_kind": kind,
                    "age_ma": 190.0 - 0.2 * x,
                    "d13c_carb": 1.0 + amp * np.exp(-((x - 10.0 - i) ** 2)),
                }
            )
        )
    # a section that begins inside the event: it has no onset to align on
    late = x[x >= 10.0]
    parts.append(
        pd.DataFrame(
            {
                "source_id": "inv",
                "section_id": "Late",
                "position_m": late,
                "position_kind": "height",
                "age_ma": 190.0 - 0.2 * late,
                "d13c_carb": 1.0 - 3.0 * np.exp(-((late - 10.0) ** 2)),
            }
        )
    )
    return pd.concat(parts, ignore_index=True)


def test_excursion_figure(tmp_path: Path) -> None:
    # Source: the alignment definition (0 = onset, up = younger) and matplotlib's imread.
    df = _sections()
    ps = excursion.per_section(df, baseline_window=(189.0, 190.0, "ma"))
    ps.loc[ps["section_id"] == "Late", "onset_position_m"] = np.nan  # as if flagged
    fig = figures.excursion_figure(df, ps, "double", title="Invented δ13C")
    fig.canvas.draw()
    width, height = fig.get_size_inches()
    assert width == pytest.approx(175.0 / 25.4)  # the double column (common practice)
    *panels, ages = fig.axes
    assert len(panels) == 3 and panels[0].get_shared_y_axes().joined(panels[0], panels[2])
    assert "Late" in fig.get_suptitle()
    # the depth core's peak lies above its onset on the shared axis
    s1 = ps.set_index("section_id").loc["S1"]
    line = panels[1].lines[0]
    y_peak = line.get_ydata()[np.argmin(line.get_xdata())]
    assert y_peak == pytest.approx(s1["onset_position_m"] - s1["peak_position_m"])
    assert y_peak > 0
    # mass numbers as superscripts (mathtext), as a journal prints them, with the scale
    assert fig.subfigs[0].get_supxlabel() == r"$\delta^{13}\mathrm{C}_{\mathrm{carb}}$ (‰ VPDB)"
    assert fig.get_suptitle().startswith(r"Invented $\delta^{13}\mathrm{C}$")
    # one δ axis for all panels by default: magnitudes compare by eye
    assert panels[0].get_shared_x_axes().joined(panels[0], panels[2])
    # the age panel: one row per section with an age (Late has none: its window is empty),
    # older to the left, and no
    # range bars without the uncertainty columns
    assert [t.get_text() for t in ages.get_yticklabels()] == ["S0", "S1", "S2"]
    assert ages.xaxis_inverted()
    assert all(len(ln.get_xdata()) == 1 for ln in ages.lines)  # centres only
    png, _, _ = save(fig, tmp_path / "e.png")
    rows, cols = imread(png).shape[:2]
    assert abs(rows - height * DPI) < 1 and abs(cols - width * DPI) < 1  # whole pixels
    own = figures.excursion_figure(df, ps, "double", shared_axis=False)
    assert not own.axes[0].get_shared_x_axes().joined(own.axes[0], own.axes[2])
    with pytest.raises(DomainError, match="onset"):
        figures.excursion_figure(df, ps.assign(onset_position_m=np.nan))


def test_excursion_figure_draws_the_ranges() -> None:
    # Source: the table drawn: every 95 % range of an age is a bar from its 2.5 to its 97.5
    # percentile, every range of an onset or recovery position a shaded band; group means
    # follow the sections.
    from strata13.compile.synthesis import excursion_draws as ed

    df = _sections()
    ps = excursion.per_section(df, baseline_window=(189.0, 190.0, "ma"))
    rng = np.random.default_rng(0)
    ages = rng.normal(0.0, 0.05, (200, len(df))) + df["age_ma"].to_numpy()[None, :]
    md = ed.draw_metrics(df, ps, 200, 0, ages, baseline_window=(189.0, 190.0, "ma"))
    table = ed.with_uncertainty(ps, md)
    summ = ed.summary(table.assign(group="invented"), "group", md)
    fig = figures.excursion_figure(df, table, summary=summ, ranges_note="ranges of 200 draws")
    fig.canvas.draw()
    *panels, ax = fig.axes
    rows = [t.get_text() for t in ax.get_yticklabels()]
    assert rows == ["S0", "S1", "S2", "mean · invented"]
    bars = sorted(
        (round(min(ln.get_xdata()), 9), round(max(ln.get_xdata()), 9))
        for ln in ax.lines
        if str(ln.get_gid()).endswith("age 95 % range")
    )
    want = []
    for _, r in table.iterrows():
        for m in ("onset", "peak", "recovery"):
            if np.isfinite(r[f"{m}_age_p2_5_ma"]):
                want.append((round(r[f"{m}_age_p2_5_ma"], 9), round(r[f"{m}_age_p97_5_ma"], 9)))
    s = summ[summ["scope"] == "group"].iloc[0]
    for m in ("onset", "peak", "recovery"):
        if np.isfinite(s[f"{m}_age_ma_mean_p2_5"]):
            want.append(
                (round(s[f"{m}_age_ma_mean_p2_5"], 9), round(s[f"{m}_age_ma_mean_p97_5"], 9))
            )
    assert bars == sorted(want)
    shown = table[np.isfinite(table["onset_position_m"])]
    spans = [len(p.patches) for p in panels]
    want_spans = [
        int(np.isfinite(r["onset_position_p2_5_m"]))
        + int(np.isfinite(r["recovery_position_p2_5_m"]))
        for _, r in shown.iterrows()
    ]
    assert spans == want_spans and sum(spans) > 0
    assert fig.legends[0].get_title().get_text() == "ranges of 200 draws"


# Colour-vision simulation matrices, Machado, Oliveira & Fernandes (2009), severity 1.0,
# applied to linear RGB (from memory); CIELAB ΔE*76 under D65 (CIE formulas, from memory).
MACHADO = {
    "deutan": [
        [0.367322, 0.860646, -0.227968],
        [0.280085, 0.672501, 0.047413],
        [-0.011820, 0.042940, 0.968881],
    ],
    "protan": [
        [0.152286, 1.052583, -0.204868],
        [0.114503, 0.786281, 0.099216],
        [-0.003882, -0.048116, 1.051998],
    ],
    "tritan": [
        [1.255528, -0.076749, -0.178779],
        [-0.078411, 0.930809, 0.147602],
        [0.004733, 0.691367, 0.303900],
    ],
}


def _lab(hex_colour: str, matrix: list[list[float]]) -> np.ndarray:
    c = np.array([int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)])
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    lin = np.clip(np.asarray(matrix) @ lin, 0.0, 1.0)
    xyz = (
        np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
        @ lin
        / np.array([0.95047, 1.0, 1.08883])
    )
    f = np.where(xyz > 216 / 24389, np.cbrt(xyz), (24389 / 27 * xyz + 16) / 116)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


@pytest.mark.parametrize("kind", sorted(MACHADO))
def test_palette_stays_apart_under_colour_vision_deficiency(kind: str) -> None:
    # Source: Machado et al. (2009) simulation; ΔE ≥ 15 is clearly distinguishable
    # (common practice: ΔE ≈ 2.3 is a just-noticeable difference).
    labs = [_lab(h, MACHADO[kind]) for h in PALETTE]
    worst = min(np.linalg.norm(a - b) for a, b in itertools.combinations(labs, 2))
    assert worst >= 15.0


def test_curve_module_tables_are_accepted() -> None:
    # Source: the column names of the curve tables (age for age_ma; bin statistics with
    # age_old/age_young/median/q25/q75; refits without a group column).
    samples, curve, robust = _inputs(groups=("Only",))
    stats = pd.DataFrame(
        {
            "age_old": [186.0, 184.0],
            "age_young": [184.0, 182.0],
            "median": [1.0, -0.5],
            "q25": [0.8, -1.0],
            "q75": [1.2, 0.0],
        }
    )
    fig = figures.curve_figure(
        samples,
        curve.rename(columns={"age_ma": "age"}),
        robustness=robust.drop(columns="group").rename(columns={"age_ma": "age"}),
        bins=stats,
    )
    fig.canvas.draw()
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "bin median (bar: interquartile range)" in labels  # the bin-statistics form
    assert "refits, one left out each" in labels
