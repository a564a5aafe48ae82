"""Age ties: the points that fix a section's age model, read from a mapping file.

Ties come from ``[[ties]]`` blocks of a mapping file or a CSV named in ``[ties_table]``
(same keys as columns). A tie names its section (``section``; ``other-source/section`` for a
section of another source, so a tie source of its own can date sections it does not hold),
the position in the section's own convention (height above / depth below its datum, with
``unit``), and either an age or, for a chart boundary, only the boundary's stage name and
chart: its age and error then come from the chart. Uncertainties are converted to 1σ here,
once: ``confidence`` is "1σ" (default), "2σ" or "95%" (÷1.96).

Malformed ties are ConfigError (exit 2: the mapping is wrong); ties that contradict the
section (inverted, off the chart) are refused at ingest (exit 1).
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

from strata13.compile.read.inputs import read_text
from strata13.schemas.fields import UNITS
from strata13.schemas.vocabularies import vocabulary

from strata13.errors import ConfigError
from strata13.suggest import did_you_mean

TIE_KEYS = {
    "id",
    "section",
    "position",
    "unit",
    "position_uncertainty",
    "age",
    "uncertainty",
    "confidence",
    "basis",
    "boundary",
    "chart",
    "anchor",
    "note",
}
CONFIDENCE = {
    "1σ": 1.0,
    "1s": 1.0,
    "1sigma": 1.0,
    "68%": 1.0,
    "2σ": 2.0,
    "2s": 2.0,
    "2sigma": 2.0,
    "95%": 1.96,
}
MOVES_WITH_CHART = ("chart boundary", "biozone boundary", "correlation")


def _num(value: Any, key: str, where: str, path: Path, *, positive: bool = False) -> float | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    if isinstance(value, bool):
        raise ConfigError(
            f"{path.name}: {where} {key} = {value!r} is not a number.", f"Write {key} as a number."
        )
    try:
        x = (
            float(str(value).strip().replace("−", "-").replace(",", "."))
            if isinstance(value, str)
            else float(value)
        )
    except ValueError:
        raise ConfigError(
            f"{path.name}: {where} {key} = {value!r} is not a number.", f"Write {key} as a number."
        ) from None
    if x != x or x in (float("inf"), float("-inf")) or (positive and x < 0):
        raise ConfigError(
            f"{path.name}: {where} {key} = {value!r} is not a usable number.",
            f"Write {key} as a finite number" + (" ≥ 0." if positive else "."),
        )
    return x


def parse_tie(
    spec: dict[str, Any], where: str, path: Path, source_id: str, default_chart: str | None
) -> dict[str, Any]:
    """One tie block or CSV row -> one stored tie row (metres, Ma, 1σ)."""
    for key in spec:
        if key not in TIE_KEYS:
            raise ConfigError(
                f"{path.name}: unknown key {key!r} in {where}." + did_you_mean(key, TIE_KEYS),
                f"Tie keys: {', '.join(sorted(TIE_KEYS))}.",
            )
    section = str(spec.get("section") or "").strip()
    if not section:
        raise ConfigError(
            f"{path.name}: {where} names no section.",
            'Give section = "…" (or "other-source/section").',
        )
    target, _, sec = section.rpartition("/")
    target = target or source_id
    unit = str(spec.get("unit") or "m")
    if unit not in UNITS["length"]:
        raise ConfigError(
            f"{path.name}: {where} unit = {unit!r} is not a length unit.",
            f"Units: {', '.join(UNITS['length'])}.",
        )
    factor = UNITS["length"][unit]
    pos = _num(spec.get("position"), "position", where, path)
    if pos is None:
        raise ConfigError(
            f"{path.name}: {where} has no position.",
            "Give the tie's height or depth in the section's own convention.",
        )
    raw_basis = str(spec.get("basis") or "")
    basis = vocabulary("tie_basis").resolve(raw_basis) if raw_basis else None
    if basis is None:
        sug = vocabulary("tie_basis").suggest(raw_basis) if raw_basis else None
        raise ConfigError(
            f"{path.name}: {where} basis = {raw_basis!r} is not known."
            + (f" Did you mean {sug!r}?" if sug else ""),
            f"Bases: {', '.join(vocabulary('tie_basis').terms)}.",
        )
    conf_text = str(spec.get("confidence") or "1σ").strip().lower().replace(" ", "")
    divisor = CONFIDENCE.get(conf_text)
    if divisor is None:
        raise ConfigError(
            f"{path.name}: {where} confidence = {spec.get('confidence')!r} is not known.",
            'Use "1σ", "2σ" or "95%".',
        )
    age = _num(spec.get("age"), "age", where, path, positive=True)
    unc = _num(spec.get("uncertainty"), "uncertainty", where, path, positive=True)
    boundary = str(spec.get("boundary") or "").strip() or None
    chart_text = str(spec.get("chart") or default_chart or "").strip()
    chart = vocabulary("time_scale").resolve(chart_text) if chart_text else None
    if chart_text and chart is None:
        from strata13.schemas.timescales import suggest_chart

        sug = suggest_chart(chart_text)
        raise ConfigError(
            f"{path.name}: {where} chart = {chart_text!r} is not a known chart "
            "version." + (f" Did you mean {sug!r}?" if sug else ""),
            f"Charts: {', '.join(vocabulary('time_scale').terms)}.",
        )
    if basis in ("chart boundary", "biozone boundary") and not boundary:
        raise ConfigError(
            f'{path.name}: {where} is a {basis} tie without boundary = "…".',
            "Name the boundary (for a chart boundary: the stage, series or "
            "period whose base it is).",
        )
    if basis in MOVES_WITH_CHART and chart is None:
        raise ConfigError(
            f"{path.name}: {where} is a {basis} tie without a chart version.",
            'Give chart = "ICS2012" (the chart its age was read on), or '
            "age_time_scale in [constants].",
        )
    if age is None and basis != "chart boundary":
        raise ConfigError(
            f"{path.name}: {where} has no age.",
            "Give age = … in Ma (only chart-boundary ties take theirs from the chart).",
        )
    if basis == "astrochronologic" and not spec.get("anchor"):
        raise ConfigError(
            f'{path.name}: {where} is astrochronologic without anchor = "…".',
            "Name the id of the tie its duration is counted from.",
        )
    psig = _num(
        spec.get("position_uncertainty"), "position_uncertainty", where, path, positive=True
    )
    return {
        "tie_source_id": source_id,
        "source_id": target,
        "section_id": sec,
        "tie_id": str(spec.get("id") or "").strip() or None,
        "position_m": pos * factor,
        "position_sigma_m": psig * factor if psig is not None else None,
        "age_ma": age,
        "age_sigma_ma": unc / divisor if unc is not None else None,
        "confidence": conf_text,
        "basis": basis,
        "boundary": boundary,
        "chart": chart,
        "anchor": str(spec.get("anchor") or "").strip() or None,
        "note": str(spec.get("note") or "").strip() or None,
    }


TIE_COLUMN_KEYS = {"key", "unit", "confidence"}


def tie_columns(columns: Any, path: Path) -> dict[str, tuple[str, dict[str, str]]]:
    """``[ties_table] columns``: header → tie key, or { key, unit, confidence } where the
    header carries the position's unit or the uncertainty's level ("Height (ft)", "±2σ")."""
    from strata13.compile.read.readers import norm_header

    if columns is None:
        return {}
    where = f"{path.name}: [ties_table] columns"
    if not isinstance(columns, dict):
        raise ConfigError(
            f"{where} must be a table of header = key.",
            'Example: columns = { "Height (ft)" = { key = "position", unit = "ft" }, '
            '"Age" = "age" }',
        )
    out: dict[str, tuple[str, dict[str, str]]] = {}
    for header, spec in columns.items():
        extra: dict[str, str] = {}
        if isinstance(spec, dict):
            for k in spec:
                if k not in TIE_COLUMN_KEYS:
                    raise ConfigError(
                        f"{where}: {header!r} has unknown key {k!r}."
                        + did_you_mean(str(k), TIE_COLUMN_KEYS),
                        f"Keys: {', '.join(sorted(TIE_COLUMN_KEYS))}.",
                    )
            key = spec.get("key")
            extra = {k: v for k, v in spec.items() if k != "key"}
        else:
            key = spec
        if not isinstance(key, str) or key not in TIE_KEYS:
            raise ConfigError(
                f"{where}: {header!r} = {key!r} is not a tie key."
                + did_you_mean(str(key), TIE_KEYS),
                f"Tie keys: {', '.join(sorted(TIE_KEYS))}.",
            )
        if not all(isinstance(v, str) for v in extra.values()):
            raise ConfigError(f"{where}: {header!r}: unit and confidence are text.", "")
        if "unit" in extra and key != "position":
            raise ConfigError(f"{where}: {header!r}: a unit goes with the position key.", "")
        if "confidence" in extra and key != "uncertainty":
            raise ConfigError(
                f"{where}: {header!r}: a confidence goes with the uncertainty key.", ""
            )
        out[norm_header(header)] = (key, extra)
    return out


def _table_rows(table_file: Path, path: Path, columns: Any) -> list[tuple[int, dict[str, Any]]]:
    """The tie table's rows as tie keys: ``#`` comment lines skipped, the delimiter sniffed,
    headers mapped by ``columns`` (or named as the keys themselves)."""
    from strata13.compile.read.readers import norm_header, sniff_delimiter

    text = read_text(
        table_file,
        f"{path.name}: [ties_table] file",
        "Check the file name, relative to the mapping file.",
    )
    lines = [
        (n, ln) for n, ln in enumerate(text.splitlines(), 1) if not ln.lstrip().startswith("#")
    ]
    body = [ln for _, ln in lines]
    delimiter = sniff_delimiter("\n".join(body[:20])) if body else ","
    mapped = tie_columns(columns, path)
    reader = csv.DictReader(body, delimiter=delimiter)
    headers = [h for h in reader.fieldnames or [] if h]
    keys: dict[str, tuple[str, dict[str, str]]] = {}
    for h in headers:
        hit = mapped.get(norm_header(h))
        if hit is None and h.strip() in TIE_KEYS and not mapped:
            hit = (h.strip(), {})
        if hit is not None:
            keys[h] = hit
    unknown = [h for h in headers if h not in keys]
    if unknown and not mapped:
        raise ConfigError(
            f"{table_file.name}: unknown column {unknown[0]!r}."
            + did_you_mean(unknown[0], TIE_KEYS),
            f"Columns: {', '.join(sorted(TIE_KEYS))}, or map the headers in [ties_table] columns.",
        )
    missing = [h for h in mapped if h not in {norm_header(x) for x in headers}]
    if missing:
        raise ConfigError(
            f"{table_file.name}: [ties_table] columns names {missing[0]!r}, which is not a "
            "header of the file." + did_you_mean(missing[0], headers),
            f"Headers: {', '.join(headers)}.",
        )
    out = []
    for (line, _), row in zip(lines[1:], reader, strict=False):
        clean: dict[str, Any] = {}
        for h, v in row.items():
            if h not in keys or v in (None, ""):
                continue
            key, extra = keys[h]
            clean[key] = v
            clean.update(extra)
        if clean:
            out.append((line, clean))
    return out


def read_ties(
    path: Path,
    blocks: Any,
    table_file: Path | None,
    source_id: str,
    default_chart: str | None,
    columns: Any = None,
) -> list[dict[str, Any]]:
    """Every tie of a mapping file: its ``[[ties]]`` blocks, then its ``[ties_table]`` rows."""
    if not isinstance(blocks, list) or not all(isinstance(b, dict) for b in blocks):
        raise ConfigError(
            f"{path.name}: ties are [[ties]] blocks.", "Write each tie as a [[ties]] block."
        )
    ties = [
        parse_tie(b, f"[[ties]] block {i + 1}", path, source_id, default_chart)
        for i, b in enumerate(blocks)
    ]
    if table_file is not None:
        for line, clean in _table_rows(table_file, path, columns):
            ties.append(parse_tie(clean, f"line {line}", table_file, source_id, default_chart))
    ids = [t["tie_id"] for t in ties if t["tie_id"]]
    dup = {i for i in ids if ids.count(i) > 1}
    if dup:
        raise ConfigError(
            f"{path.name}: two ties have the id {sorted(dup)[0]!r}.", "Give each tie its own id."
        )
    for t in ties:
        if t["anchor"] and t["anchor"] not in ids:
            raise ConfigError(
                f"{path.name}: tie anchor {t['anchor']!r} names no tie of this file.",
                "Anchor an astrochronologic tie on a tie id given here.",
            )
    return ties


def ties_table(ties: list[dict[str, Any]]) -> Any:
    """The ties as an Arrow table of the stored ``age_ties`` schema."""
    import pyarrow as pa
    from strata13.schemas.records import AGE_TIES, arrow_schema

    return pa.Table.from_pylist(ties, schema=arrow_schema(AGE_TIES))
