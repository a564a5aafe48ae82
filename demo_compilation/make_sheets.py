"""Regenerate the invented demo sheets (run once; the outputs are committed).

Everything here is made up: the Orvanne Basin, its sections and cores, the lab, every
number. The scenario: an invented negative δ13C excursion in the Early Jurassic
(Pliensbachian–Toarcian), recorded in six sections in two regions.

    python demo_compilation/make_sheets.py      # needs openpyxl and odfpy
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent / "sheets"
RNG = np.random.default_rng(13)


def curve(age: float) -> float:
    """Invented δ13C history: +1.5 ‰ baseline, a dip to about −2 ‰ near 183.0 Ma."""
    return 1.5 + 1.0 * (184.5 - age) / 3.0 - 3.6 * math.exp(-((age - 183.0) / 0.35) ** 2)


def section(n: int, top_age: float, base_age: float, thickness_m: float, offset: float = 0.0):
    heights = np.sort(RNG.uniform(0, thickness_m, n))
    ages = base_age - (base_age - top_age) * heights / thickness_m
    d13 = np.array([curve(a) for a in ages]) + offset + RNG.normal(0, 0.15, n)
    d18 = -2.8 + 0.6 * np.sin(ages) + RNG.normal(0, 0.3, n)
    return heights, ages, d13, d18


def quillar() -> None:
    """Quillar Ridge: heights in feet, δ18O on VSMOW, ages on the 2012 chart, xlsx."""
    import openpyxl

    h, a, c13, o18 = section(28, 181.6, 184.4, 42.0)
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Table S1"
    ws["B1"] = "Table S1. Carbon and oxygen isotopes, Quillar Ridge (invented)"
    ws.merge_cells("B1:H1")
    heads = ["Sample", "Height (ft)", "δ13C (‰)", "δ18O (‰ VSMOW)", "Lithology", "Texture",
             "Age (Ma, 2012 chart)"]
    for j, t in enumerate(heads):
        ws.cell(row=3, column=2 + j, value=t)
    for i in range(len(h)):
        r = 4 + i
        ws.cell(row=r, column=2, value=f"QR-{i + 1:02d}")
        ws.cell(row=r, column=3, value=round(h[i] / 0.3048, 1))
        v = round(float(c13[i]), 2)
        # a few cells typed as text with a Unicode minus, as some journals deliver them
        ws.cell(row=r, column=4, value=(f"−{abs(v):.2f}" if v < 0 and i % 3 == 0 else v))
        vs = round(float(o18[i]) * 1.03092 + 30.92, 2)
        ws.cell(row=r, column=5, value="n.d." if i in (5, 17) else vs)
        ws.cell(row=r, column=6, value="limestone" if i % 4 else "marl")
        ws.cell(row=r, column=7, value=["mudstone", "wackestone", "packstone"][i % 3])
        ws.cell(row=r, column=8, value=round(float(a[i]) + 0.2, 3))
    ws.cell(row=4 + len(h) + 1, column=2,
            value="* n.d. = not determined. Heights above the base of the section.")
    wb.save(HERE / "quillar_2011.xlsx")


def mossaret_fennoway() -> None:
    """One sheet, two sections (Mossaret Cut, Fennoway Bluff); VPDB; Mn and Sr; ods."""
    from odf.opendocument import OpenDocumentSpreadsheet
    from odf.table import Table, TableCell, TableRow
    from odf.text import P

    doc = OpenDocumentSpreadsheet()
    t = Table(name="isotopes")
    rows = [["Section", "Sample", "Height (m)", "Component", "Lithology", "d13C carb",
             "d18O carb", "Mn (ppm)", "Sr (ppm)", "Age (Ma)"]]
    for sec, n, thick, off, comp in (("Mossaret Cut", 22, 18.0, 0.1, "bulk"),
                                     ("Fennoway Bluff", 20, 25.0, -0.2, "brachiopod")):
        h, a, c13, o18 = section(n, 181.8, 184.2, thick, off)
        for i in range(n):
            mn, sr = round(float(RNG.uniform(40, 700)), 0), round(float(RNG.uniform(150, 900)), 0)
            lith, d18 = "limestone", round(float(o18[i]), 2)
            if sec == "Mossaret Cut" and 8 <= i <= 11:
                # an invented dolomitised interval: high Mn, low Sr, very negative δ18O, so the
                # screening rules have something to flag (set after the random draws, which
                # therefore stay the same for every other cell)
                lith, mn, sr, d18 = "dolostone", 2400.0 + 150 * (i - 8), 160.0 + 10 * (i - 8), \
                    round(-10.8 - 0.4 * (i - 8), 2)
            rows.append([sec, f"{sec[:2].upper()}{i + 1:03d}", round(float(h[i]), 2), comp,
                         lith, round(float(c13[i]), 2), d18, mn, sr, round(float(a[i]), 3)])
    for r in rows:
        tr = TableRow()
        for v in r:
            if isinstance(v, float):
                cell = TableCell(valuetype="float", value=v)
                cell.addElement(P(text=repr(v)))
            else:
                cell = TableCell(valuetype="string")
                cell.addElement(P(text=str(v)))
            tr.addElement(cell)
        t.addElement(tr)
    doc.spreadsheet.addElement(t)
    doc.save(str(HERE / "mossaret_fennoway_2018.ods"))


def ystrel() -> None:
    """Three cores: depths, comma decimals, ';' separator, cp1252, bdl and <x for Mn."""
    out = [["Core", "Sample", "Depth (m)", "Component", "d13C carb (‰)", "d18O carb (‰)",
            "d13C org (‰)", "TOC (%)", "CaCO3 (%)", "Mn (ppm)", "Age (Ma)"]]
    for core, n, off in (("YC-1", 18, 0.0), ("YC-2", 16, 0.3), ("YC-3", 15, -0.1)):
        h, a, c13, o18 = section(n, 181.7, 184.3, 30.0, off)
        depth = 120.0 + (30.0 - h)  # deeper is older
        order = np.argsort(depth)
        if core == "YC-2":
            # invented: δ18O covarying with δ13C in this core, for the covariance screen
            # (deterministic, so the random draws of every other cell stay the same)
            o18 = -2.8 + 0.9 * (c13 - 1.5) + 0.08 * np.sin(3.0 * np.arange(n))
        for k, i in enumerate(order):
            org = -27.5 + 0.8 * (c13[i] - 1.5) + RNG.normal(0, 0.3)
            mn = "bdl" if k % 7 == 3 else ("<5" if k % 11 == 5 else f"{RNG.uniform(20, 400):.0f}")
            out.append([core, f"{core}-{k + 1:02d}", f"{depth[i]:.2f}".replace(".", ","),
                        "micrite" if k % 2 else "bulk",
                        f"{c13[i]:.2f}".replace(".", ","), f"{o18[i]:.2f}".replace(".", ","),
                        f"{org:.2f}".replace(".", ","), f"{RNG.uniform(0.2, 3):.2f}".replace(".", ","),
                        f"{RNG.uniform(55, 95):.1f}".replace(".", ","), mn,
                        f"{a[i]:.3f}".replace(".", ",")])
    with (HERE / "ystrel_cores_2021.csv").open("w", encoding="cp1252", newline="") as fh:
        csv.writer(fh, delimiter=";", lineterminator="\r\n").writerows(out)


def broken() -> None:
    """A deliberately broken sheet: a dozen problems the report must name by cell."""
    import datetime as dt

    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "data"
    heads = ["Sample", "Height (m)", "Lithology", "Component", "d13C", "d18O", "Mn (ppm)",
             "Age (Ma)", "Latitude"]
    for j, t in enumerate(heads):
        ws.cell(row=1, column=1 + j, value=t)
    good = [("HS-01", 0.5, "limestone", "bulk", 1.2, -2.5, 120, 184.0, 44.1),
            ("HS-02", 1.5, "limestne", "bulk", 1.3, -2.4, 130, 183.9, 44.1),      # vocabulary
            ("HS-03", 2.5, "limestone", "bulk", "abc", -2.6, 110, 183.8, 44.1),   # not a number
            ("HS-04", 3.5, "limestone", "bulk", 1.1, -2.2, 90, 183.7, 44.1),
            ("HS-04", 4.5, "limestone", "bulk", 1.0, -2.3, 95, 183.6, 44.1),      # duplicate
            (None, 5.5, "limestone", "bulk", 0.9, -2.1, 100, 183.5, 44.1),        # no sample
            ("HS-07", 6.5, "limestone", "bulk", 44.0, -2.0, 105, 183.4, 44.1),    # range
            ("HS-08", 7.5, "limestone", "shell hash", 0.8, -2.2, 99, 183.3, 44.1),  # component
            ("HS-09", 8.5, "limestone", "bulk", 0.7, dt.date(2021, 3, 4), 97, 183.2, 44.1),
            ("HS-10", 9.5, "limestone", "bulk", 0.6, -2.4, "1,234", 183.1, 44.1),  # ambiguous
            ("HS-11", 10.5, "limestone", "bulk", 0.5, -2.5, 80, 185.9, 44.1),      # superposition
            ("HS-12", 11.5, "limestone", "bulk", 0.4, -2.6, 70, 182.9, 95.0),      # latitude
            ("HS-13", 12.5, "limestone", "bulk", None, -2.7, 75, 182.8, 44.1)]     # formula
    for i, row in enumerate(good):
        for j, v in enumerate(row):
            if v is not None:
                ws.cell(row=2 + i, column=1 + j, value=v)
    ws.cell(row=2 + 12, column=5, value="=E2+E3")  # a formula with no cached value
    wb.save(HERE / "harnholt_2016_broken.xlsx")


def inhouse_run() -> None:
    """An in-house run sheet of the invented Orvanne lab: two runs, each with its reference
    materials (IAEA-603 and NBS-18 as anchors, IAEA-CO-8 as a check) and samples of the
    invented Tarrow Gill section. Raw values are the accepted/true values put through an
    invented per-run line, raw = (true − b) / a, so normalisation must undo it."""
    rng = np.random.default_rng(2024)  # its own stream: the other sheets stay as they are
    accepted = {"IAEA-603": (2.460, -2.370), "NBS-18": (-5.014, 0.97001 * 7.20 - 29.99),
                "IAEA-CO-8": (-5.764, -22.7)}
    lines = {"R1": ((1.010, 0.339), (1.004, 0.20)), "R2": ((0.995, -0.12), (0.998, -0.30))}
    heights = np.round(np.linspace(0.4, 10.6, 12), 2)
    ages = 184.3 - 2.0 * heights / 11.0
    rows = [["Run", "Line", "Identifier", "Height (m)", "d13C raw", "d18O raw", "Comment"]]
    for run, ((a13, b13), (a18, b18)) in lines.items():
        k = 0
        block = [("IAEA-603", None), ("NBS-18", None)]
        block += [(f"TG-{i + 1:02d}", i) for i in (range(0, 6) if run == "R1" else range(6, 12))]
        block += [("IAEA-CO-8", None), ("IAEA-603", None), ("NBS-18", None)]
        for ident, i in block:
            k += 1
            if i is None:
                t13, t18 = accepted[ident]
                h = ""
            else:
                t13 = curve(ages[i]) + rng.normal(0, 0.05)
                t18 = -2.9 + rng.normal(0, 0.1)
                h = f"{heights[i]:.2f}"
            r13 = (t13 - b13) / a13 + rng.normal(0, 0.02)
            r18 = (t18 - b18) / a18 + rng.normal(0, 0.04)
            rows.append([run, k, ident, h, f"{r13:.3f}", f"{r18:.3f}",
                         "standard" if i is None else ""])
    with (HERE / "orvanne_lab_run_2024.csv").open("w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


def compilation() -> None:
    """An invented later compilation that re-publishes twelve Quillar Ridge samples: heights
    converted from feet to metres, δ18O converted from VSMOW to VPDB (IUPAC relation), its own
    sample names — and one δ13C whose minus sign was lost in typesetting."""
    import openpyxl

    ws = openpyxl.load_workbook(HERE / "quillar_2011.xlsx", data_only=True)["Table S1"]
    rows = [["Section", "Sample", "Height (m)", "d13C (permil VPDB)", "d18O (permil VPDB)"]]
    for r in range(8, 20):  # QR-05 … QR-16
        name, ft, d13, d18 = (ws.cell(row=r, column=c).value for c in (2, 3, 4, 5))
        d13 = float(str(d13).replace("−", "-"))
        if name == "QR-11":
            d13 = abs(d13)  # the lost minus sign the demo corrects
        d18 = "" if d18 in (None, "n.d.") else f"{0.97001 * float(d18) - 29.99:.2f}"
        rows.append(["Quillar Ridge", f"Q{int(name[3:])}", f"{float(ft) * 0.3048:.2f}",
                     f"{d13:.2f}", d18])
    with (HERE / "orvanne_compilation_2022.csv").open("w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


if __name__ == "__main__":
    HERE.mkdir(exist_ok=True)
    quillar()
    mossaret_fennoway()
    ystrel()
    broken()
    inhouse_run()
    compilation()
