"""Numbers in human text, rounded to their meaningful digits: one rule for every message,
table, chain step and note (csv, json and parquet keep every digit).

- With an uncertainty, the uncertainty keeps two significant digits and the value is
  rounded to the same decimal place (JCGM 100:2008, the GUM, §7.2.6).
- With a unit whose resolution is known, a fixed number of decimals: ‰ to 0.001 (below
  the 0.01 ‰ most sheets report), Ma and Myr to 0.001 (1 kyr), metres to 0.01 (1 cm),
  degrees to 0.01. A value smaller than that resolution keeps two significant digits, so a
  small number never reads as zero.
- Otherwise six significant digits (slopes, r, p, effective n).

Trailing zeros after the decimal point are dropped (kept with an uncertainty, where they
say where it starts), and a value that rounds to zero is
written without a minus sign. A blank (None or NaN) is written as ``blank``, never as 0.
"""

from __future__ import annotations

import math

DECIMALS = {"‰": 3, "Ma": 3, "Myr": 3, "m": 2, "°": 2}
SIGNIFICANT = 6


def unit_of(column: str) -> str | None:
    """The unit a column's name states (``age_ma``, ``position_m``, ``d13c_carb``,
    ``*_sigma_permil``, ``paleolat``), or None."""
    name = column.lower()
    if name.endswith(("_ma", "_myr")):
        return "Ma"
    if name.endswith("_m"):
        return "m"
    if name.startswith(("d13c", "d18o")) or name.endswith(("_permil", "_vpdb")):
        return "‰"
    if name in ("baseline", "peak_value", "magnitude"):  # excursion metrics, in ‰
        return "‰"
    if name in ("lat", "lon", "paleolat", "paleolon") or name.endswith("_deg"):
        return "°"
    return None


def _trim(text: str) -> str:
    if "." in text and "e" not in text:
        text = text.rstrip("0").rstrip(".")
    if text in ("-0", ""):
        return "0"
    return text


def _significant(x: float, digits: int) -> str:
    if x == 0:
        return "0"
    decimals = digits - 1 - math.floor(math.log10(abs(x)))
    if decimals < 0:  # a large number: its leading digits, then zeros
        return f"{round(x, decimals):.0f}"
    if abs(x) < 1e-4:  # a very small one: exponent form, as Python's "g" writes it
        return _trim(f"{x:.{digits}g}")
    return _trim(f"{x:.{decimals}f}")


def readable(
    x: object,
    *,
    unit: str | None = None,
    sigma: float | None = None,
    digits: int = SIGNIFICANT,
    blank: str = "",
    signed: bool = False,
    decimals: int | None = None,
) -> str:
    """``x`` as text a person reads: see the module's rules. Booleans read yes/no;
    ``signed`` writes a plus sign before a positive value (offsets, residuals);
    ``decimals`` fixes the places of a unitless number whose resolution is known (a slope)."""
    if decimals is not None and isinstance(x, float) and math.isfinite(x):
        text = f"{x:.{decimals}f}"
        text = text[1:] if text.startswith("-") and text.strip("-0.") == "" else text
    else:
        text = _readable(x, unit, sigma, digits, blank)
    if signed and isinstance(x, (int, float)) and not isinstance(x, bool):
        if text[:1].isdigit() and text.strip("0.") != "":
            return "+" + text
    return text


def _readable(x: object, unit: str | None, sigma: float | None, digits: int, blank: str) -> str:
    if x is None:
        return blank
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return str(x)
    if not isinstance(x, float):
        return str(x)
    if math.isnan(x):
        return blank
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if sigma is not None and math.isfinite(sigma) and sigma > 0:
        decimals = max(0, 1 - math.floor(math.log10(sigma)))
        text = f"{x:.{decimals}f}"  # zeros kept: they say where the uncertainty starts
        return text[1:] if text.lstrip("-0.") == "" and text.startswith("-") else text
    if unit in DECIMALS:
        d = DECIMALS[unit]
        if x != 0 and abs(x) < 10.0**-d:
            return _significant(x, 2)
        return _trim(f"{x:.{d}f}")
    return _significant(x, digits)


def with_sigma(x: float | None, sigma: float | None, unit: str = "", blank: str = "—") -> str:
    """``183.21 ± 0.15 Ma``: the value to its uncertainty's place; a blank σ says so."""
    end = f" {unit}" if unit else ""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return blank
    if sigma is None or not math.isfinite(sigma):
        return f"{readable(x, unit=unit or None)}{end} (no uncertainty given)"
    if sigma == 0:
        return f"{readable(x, unit=unit or None)} ± 0{end}"
    return f"{readable(x, sigma=sigma)} ± {readable(sigma, sigma=sigma)}{end}"


def readable_sigma(sigma: float) -> str:
    """An uncertainty alone, to two significant digits."""
    return readable(sigma, sigma=sigma)
