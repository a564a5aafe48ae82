"""Figures a journal takes unedited: every figure the tool writes (the demo's and each figure
command's) is a PNG of at least 300 dpi plus an SVG and a PDF; --width single and double
give the print widths' ratio; every age axis runs older to the left; a figure of the demo
store says in its caption line that the data are invented.

The files are read with general-purpose libraries, not with the code that wrote them: PIL
for the PNG's resolution and pixel size, the standard library's XML parser for the SVG, the
PDF's own header (the "%PDF-" signature of ISO 32000-1, section 7.5.2) for the PDF.
Everything here is invented demo data.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image
from strata13.compile.plotting import axes as age_axes
from strata13.compile.plotting import style
from strata13.compile.plotting.save import INVENTED_NOTE

from tests.conftest import Ran
from tests.conftest import run_cli as run

# the print widths the tool promises (common practice, compile/plotting/style.py)
SINGLE_MM, DOUBLE_MM = 85.0, 175.0


def ok(*args: object) -> Ran:
    r = run(*args)
    assert r.code == 0, r.err
    assert "Traceback" not in r.err
    return r


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("journal") / "demo"
    ok("demo", "--out", out)
    return out


def figure_stems(folder: Path) -> list[Path]:
    """Every figure under ``folder``, as the path without its suffix."""
    return sorted(p.with_suffix("") for p in folder.rglob("*.png"))


def svg_text(path: Path) -> str:
    """The text an SVG carries: with text drawn as paths, matplotlib keeps each string in a
    comment beside its glyphs; <text> elements are taken too."""
    import re

    raw = path.read_text(encoding="utf-8")
    return "\n".join(
        re.findall(r"<!-- (.*?) -->", raw) + re.findall(r"<text[^>]*>(.*?)</text>", raw)
    )


def assert_journal_files(stem: Path, caption: bool = True) -> tuple[int, int]:
    """PNG ≥ 300 dpi, SVG that parses as XML, PDF with its signature; the demo caption in
    the SVG. Returns the PNG's pixel size."""
    png, svg, pdf = (stem.with_name(f"{stem.name}.{ext}") for ext in ("png", "svg", "pdf"))
    for p in (png, svg, pdf):
        assert p.is_file(), f"{p} is missing"
    with Image.open(png) as im:
        dpi = im.info["dpi"]
        size = im.size
        assert im.mode in ("RGB", "RGBA")
        corner = im.convert("RGB").getpixel((0, 0))
    assert min(dpi) >= 299.5, f"{png}: {dpi} dpi"
    assert corner == (255, 255, 255), f"{png}: background {corner} is not white"
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    assert pdf.read_bytes()[:5] == b"%PDF-"
    if caption:
        assert "invented demo data" in svg_text(svg), f"{svg} has no caption"
    return size


def test_every_demo_figure_has_png_svg_and_pdf_with_the_caption(demo: Path) -> None:
    stems = figure_stems(demo)
    names = {s.name for s in stems}
    # curve, excursion, age model, coverage and one cross-plot per section
    assert {"curve", "excursion", "agemodel_quillar-ridge", "coverage"} <= names
    assert len([s for s in stems if s.parent.name == "screening"]) >= 6
    for stem in stems:
        assert_journal_files(stem)
    assert "invented demo data" in INVENTED_NOTE


@pytest.mark.parametrize(
    ("command", "target", "stem"),
    [
        (("curve", "--interval", "Toarcian", "--by", "region", "--boots", "30"), "out", "curve"),
        (("excursion", "--interval", "Toarcian", "--draws", "20"), "out", "excursion"),
        (("coverage", "--bin-myr", "0.5"), "out", "coverage"),
        (("agemodel", "quillar-ridge"), "plot-file", "model"),
        (("screen",), "plot-dir", None),
    ],
)
def test_each_figure_command_writes_journal_files_at_both_widths(
    demo: Path, tmp_path: Path, command: tuple[str, ...], target: str, stem: str | None
) -> None:
    widths: dict[str, tuple[int, int]] = {}
    for width in ("single", "double"):
        folder = tmp_path / width
        folder.mkdir()
        if target == "out":
            args: tuple[object, ...] = (*command, "--out", folder / "fig")
        elif target == "plot-file":
            args = (*command, "--plot", folder / f"{stem}.png")
        else:
            args = (*command, "--plot", folder / "plots")
        ok(*args, "--width", width, "--store", demo / "compilation")
        stems = figure_stems(folder)
        assert stems, f"{command[0]} wrote no figure"
        sizes = {assert_journal_files(s) for s in stems}
        widths[width] = sizes.pop()
        if stem is not None:
            assert {s.name for s in stems} == {stem}
    # the PNG is drawn at the print width: 85 / 175 of the pixels across (±2 px rounding)
    single, double = widths["single"][0], widths["double"][0]
    assert abs(single - round(SINGLE_MM / 25.4 * 300)) <= 2
    assert abs(double - round(DOUBLE_MM / 25.4 * 300)) <= 2
    assert single / double == pytest.approx(SINGLE_MM / DOUBLE_MM, abs=0.002)


def test_a_bad_width_is_refused_and_writes_nothing(demo: Path, tmp_path: Path) -> None:
    r = run(
        "coverage", "--out", tmp_path / "c", "--width", "triple", "--store", demo / "compilation"
    )
    assert r.code == 2 and "single" in r.err and "double" in r.err
    assert not (tmp_path / "c").exists()


def test_excursion_panels_share_their_delta_axis_unless_asked_not_to(
    demo: Path, tmp_path: Path
) -> None:
    import json

    for flag, shared in (("--shared-axis", True), ("--own-axis", False)):
        out = tmp_path / flag.strip("-")
        ok(
            "excursion",
            "--interval",
            "Toarcian",
            "--draws",
            "0",
            flag,
            "--out",
            out,
            "--store",
            demo / "compilation",
        )
        manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
        assert manifest["parameters"]["shared_axis"] is shared


# --- the figures as objects: one age direction, stage strip, labels ------------------------


def _curve_inputs() -> tuple[pd.DataFrame, pd.DataFrame]:
    ages = np.linspace(183.9, 182.1, 40)
    samples = pd.DataFrame({"group": "a", "age_ma": ages, "value": np.sin(ages)})
    curve = pd.DataFrame(
        {
            "group": "a",
            "age_ma": ages,
            "fit": np.sin(ages),
            "lo": np.sin(ages) - 0.2,
            "hi": np.sin(ages) + 0.2,
            "band_shown": True,
        }
    )
    return samples, curve


def _age_model_figure(width: str) -> object:
    from strata13.compile.ages import plot
    from strata13.compile.ages.agemodel import Tie, draw_section, summarise

    ties = [Tie(0.0, 184.4, 0.2, "radiometric"), Tie(40.0, 181.6, 0.2, "radiometric")]
    pos = np.linspace(0.0, 40.0, 25)
    s = summarise(draw_section(pos, ties, "height", 200, 3).draws)
    stages = age_axes.chart_stages("ICS2024/12")
    return plot.figure(ties, pos, s, "height", "section A (invented)", width, stages=stages)


def _coverage_figure(width: str) -> object:
    from strata13.compile.integrity.coverage import counts, heatmap_figure

    samples = pd.DataFrame(
        {
            "age_ma": [183.9, 183.4, 182.6, 182.2, 182.7, 182.8, 182.9],
            "group": ["north", "north", "south", "south", "south", "south", "north"],
            "component": "bulk",
            "source_id": "s",
            "section_id": ["A", "A", "B", "C", "D", "E", "F"],
        }
    )
    table = counts(samples, [184.0, 183.5, 183.0, 182.5, 182.0])
    return heatmap_figure(table, "coverage", width, age_axes.chart_stages("ICS2024/12"))


def _excursion_figure(width: str) -> object:
    from strata13.compile.synthesis import excursion as ex
    from strata13.compile.synthesis.figures import excursion_figure

    rows = []
    for section in ("A", "B"):
        for i, h in enumerate(np.linspace(0, 30, 31)):
            dip = -3.0 if 10 <= h <= 20 else 0.0
            rows.append(
                {
                    "source_id": "s",
                    "section_id": section,
                    "position_m": h,
                    "position_kind": "height",
                    "age_ma": 184.0 - 0.05 * i,
                    "value": 1.5 + dip,
                }
            )
    df = pd.DataFrame(rows)
    per = ex.per_section(df)
    return excursion_figure(df, per, width, stages=age_axes.chart_stages("ICS2024/12"))


def _figures(width: str) -> dict[str, object]:
    from strata13.compile.synthesis.figures import curve_figure

    samples, curve = _curve_inputs()
    stages = age_axes.chart_stages("ICS2024/12")
    return {
        "curve": curve_figure(samples, curve, stages=stages, width=width),
        "excursion": _excursion_figure(width),
        "age model": _age_model_figure(width),
        "coverage": _coverage_figure(width),
    }


@pytest.mark.parametrize("width", ["single", "double"])
def test_every_age_axis_runs_older_to_the_left_with_the_stage_strip(width: str) -> None:
    for name, fig in _figures(width).items():
        axes = fig.axes  # type: ignore[attr-defined]
        labelled = [ax for ax in axes if ax.get_xlabel() == age_axes.AGE_LABEL]
        assert labelled, f"{name}: no age axis"
        for ax in labelled:
            for sibling in ax.get_shared_x_axes().get_siblings(ax):
                left, right = sibling.get_xlim()
                assert age_axes.older_on_left(sibling) and left > right, name
        # the stage strip: the labelled axes hold the stage names under the plot
        names = [t.get_text() for ax in labelled for t in ax.texts]
        assert "Toarcian" in names, f"{name}: no stage strip under the age axis"


def test_isotope_labels_are_mathtext_with_super_and_subscripts() -> None:
    # the mathtext a journal's typesetting expects: δ^{13}C with the component subscripted
    assert style.math("δ13C carb (‰ VPDB)") == r"$\delta^{13}\mathrm{C}_{\mathrm{carb}}$ (‰ VPDB)"
    assert style.math("δ18O carb (‰ VPDB)") == r"$\delta^{18}\mathrm{O}_{\mathrm{carb}}$ (‰ VPDB)"
    assert (
        style.math("δ13C carb and org (‰ VPDB)") == r"$\delta^{13}\mathrm{C}$ carb and org (‰ VPDB)"
    )
    assert style.math("cost $5") == r"cost \$5"  # free text is never read as mathtext
    from matplotlib.mathtext import MathTextParser

    # matplotlib's own parser accepts every label the figures use
    parser = MathTextParser("agg")
    for label in (style.CARB_LABEL, style.ORG_LABEL, style.D18O_LABEL):
        parser.parse(style.math(label), dpi=72)


def test_type_sizes_fit_the_column() -> None:
    # common practice: lettering of 6–8 pt at print size
    for width in ("single", "double"):
        rc = style.rc(width)
        for key in ("font.size", "axes.labelsize", "xtick.labelsize", "legend.fontsize"):
            assert 6.0 <= rc[key] <= 8.0, (width, key)
        assert rc["savefig.facecolor"] == "white" and rc["savefig.dpi"] >= 300
    assert style.width_in("single") == pytest.approx(SINGLE_MM / 25.4)
    assert style.width_in("double") == pytest.approx(DOUBLE_MM / 25.4)


def test_smoothed_band_edges_pass_through_every_percentile() -> None:
    # the monotone cubic (scipy's PchipInterpolator) goes through each value and adds no
    # extremum: the edges at the samples are the computed percentiles, unchanged
    from strata13.compile.ages.plot import smooth

    pos = np.array([0.0, 3.0, 4.0, 10.0, 12.0, 20.0])
    lo = np.array([184.5, 184.1, 184.0, 183.2, 183.0, 182.1])
    hi, med = lo + 0.6, lo + 0.3
    pieces = smooth(pos, lo, hi, med, breaks=[10.5])
    assert len(pieces) == 2  # broken at the hiatus
    for y, a, b, m in pieces:
        at = np.isin(y, pos)
        assert np.allclose(a[at], lo[np.isin(pos, y)]) and np.allclose(m[at], med[np.isin(pos, y)])
        assert np.all(np.diff(a) <= 1e-12) and np.all(np.diff(b) <= 1e-12)  # monotone kept
        assert y.size > at.sum() or y.size <= 2


def test_cross_plot_names_the_rule_and_outcome_with_r_to_its_digits() -> None:
    from strata13.compile.screening.plots import _line

    g = {"rule": "d13c-d18o-covariance", "r": 0.99612, "r2": 0.99226, "n": 16}
    line = _line(g | {"n_eff": 3.9, "p": 0.0055, "outcome": "warn"})
    assert line.startswith("rule d13c-d18o-covariance: warned (kept)")
    assert "r = 0.996," in line and "r² = 0.99," in line  # r not 1.00; r² is 0.99 to 2 places
    line = _line(g | {"r": -0.0631, "r2": 0.00398, "n_eff": 12.0, "p": 0.86, "outcome": "pass"})
    assert "passed" in line and "r = −0.06," in line and "r² = 0.004," in line


def test_cross_plot_regression_colours_and_markers() -> None:
    # Source: scipy.stats.linregress for the least-squares line of δ13C on δ18O
    from scipy.stats import linregress
    from strata13.compile.screening.plots import _component_styles, _one, regression

    rng = np.random.default_rng(7)
    x = rng.normal(-2.5, 0.4, 30)
    y = 1.1 * x + 4.0 + rng.normal(0, 0.1, 30)
    ref = linregress(x, y)
    slope, intercept = regression(x, y)  # type: ignore[misc]
    assert slope == pytest.approx(ref.slope) and intercept == pytest.approx(ref.intercept)
    assert regression(x[:2], y[:2]) is None and regression(np.ones(5), y[:5]) is None

    comps = np.array(["bulk"] * 15 + ["micrite"] * 15, dtype=object)
    mark = np.array(["pass"] * 20 + ["warn"] * 6 + ["fail"] * 4, dtype=object)
    styles = _component_styles(["bulk", "micrite"])
    with style.journal("single"):
        fig = _one(x, y, mark, comps, styles, "src", "sec", ["rule r: passed"], "single")
    ax = fig.axes[0]
    faces = {tuple(np.round(c.get_facecolors()[0][:3], 3)) for c in ax.collections}
    assert len(faces) == 2  # one colour per component
    line = ax.lines[0]
    xs, ys = line.get_xdata(), line.get_ydata()
    assert ys[0] == pytest.approx(ref.slope * xs[0] + ref.intercept)
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert {"bulk", "micrite", "passed (20)", "warned (kept) (6)", "failed (4)"} <= set(labels)
    assert any(f"slope {ref.slope:.2f}" in t for t in labels)


def test_coverage_colours_are_one_per_whole_count() -> None:
    # Source: matplotlib's BoundaryNorm contract: boundaries at k ± 0.5 map each integer k to
    # its own colour of the resampled map, and the colour bar ticks sit on the integers
    from matplotlib.colors import BoundaryNorm

    fig = _coverage_figure("double")
    meshes = [c for ax in fig.axes for c in ax.collections if hasattr(c, "norm")]  # type: ignore[attr-defined]
    assert meshes
    norm, cmap = meshes[0].norm, meshes[0].get_cmap()
    assert isinstance(norm, BoundaryNorm)
    top = int(norm.boundaries[-1] - 0.5)
    assert top == 3  # three sections in the south's 183.0–182.5 Ma cell
    assert list(norm.boundaries) == [k + 0.5 for k in range(top + 1)] and cmap.N == top
    colours = {tuple(cmap(norm(k))) for k in range(1, top + 1)}
    assert len(colours) == top  # every count its own colour
    bar = [ax for ax in fig.axes if ax.get_ylabel() == "sections per cell"]  # type: ignore[attr-defined]
    assert bar and [float(t) for t in bar[0].get_yticks()] == [float(k) for k in range(1, top + 1)]
