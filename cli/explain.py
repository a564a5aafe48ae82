"""`strata13 explain RECORD`: where a record came from and every step from its reported
values to the harmonised ones."""

from __future__ import annotations

import json
from typing import Annotated

import typer
from strata13.cli.common import StoreOpt

from strata13.numbers import readable, with_sigma


def _num(v: object, unit: str | None = None) -> str:
    return readable(v, unit=unit, blank="—")


# step parameters without a unit of ‰ (the rest are δ values, shifts and precisions in ‰)
PER_UNIT = {"slope", "a", "drift_per_position", "drift_sigma"}


def _param(v: object, unit: str | None = "‰") -> str:
    """A step parameter: numbers to their meaningful digits, lists item by item."""
    if isinstance(v, list):
        return "[" + ", ".join(_param(x, unit) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}: {_param(x, unit)}" for k, x in v.items()) + "}"
    return _num(v, unit)


def explain(
    record: Annotated[str, typer.Argument(help="A record id (or a unique prefix).")],
    as_json: Annotated[bool, typer.Option("--json", help="Print the explanation as JSON.")] = False,
    store: StoreOpt = None,
) -> None:
    """Show a record's provenance and the chain of steps behind each harmonised value."""
    from strata13.compile import api

    info = api.explain(api.open_store(api.store_path(store)), record)
    if as_json:
        typer.echo(json.dumps(info, default=str, ensure_ascii=False, indent=1))
        return
    r = info["record"]
    lines = [
        f"record {r['record_id']} (store version {info['version']})",
        f"  source   {r['source_id']}: {info['citation']}",
        f"  where    {info['file']}"
        + (f", sheet {r['sheet']}" if r["sheet"] and r["sheet"] != info["file"] else "")
        + f", {'line' if str(info['file']).lower().endswith(('.csv', '.tsv')) else 'row'} "
        + f"{r['sheet_row']}",
        f"  sample   section {r['section_id']}, sample {r['sample_id']}, replicate "
        f"{r['replicate']}, position {_num(r['position_m'], 'm')} m ({r['position_kind'] or '—'})",
        f"  material {r['lithology'] or '—'} / {r['component'] or '—'} / {r['mineralogy'] or '—'}",
        f"  age      {with_sigma(r['age_ma'], r.get('age_sigma_ma'), 'Ma')} "
        f"({r['age_status'] or '—'})",
        f"  paleo    {r['paleo_status'] or '—'};  screen {r['screen']}",
    ]
    for k, step in enumerate(info["age_steps"], 1):
        lines.append(f"     {k}. {step['step']}: {step['method']} (source: {step['source']})")
        for tie in step.get("ties", []):
            sigma = tie.get("sigma_ma")
            lines.append(
                f"        {tie['tie']}: "
                + (
                    f"{with_sigma(tie.get('age_ma'), sigma, 'Ma')} (1σ)"
                    if sigma is not None
                    else f"{_num(tie.get('age_ma'), 'Ma')} Ma"
                )
                + (f"; {tie['sigma_from']}" if tie.get("sigma_from") else "")
            )
    for name, iso in info["isotopes"].items():
        if iso["reported"] is None:
            continue
        lines.append(
            f"  {name}: reported {_num(iso['reported'], '‰')} ‰ {iso['scale'] or '(no scale)'}"
            f" → {_num(iso['harmonised'], '‰')} ‰ VPDB  [{iso['status']}]"
        )
        for k, step in enumerate(iso["steps"], 1):
            params = ", ".join(
                f"{key}={_param(val, None if key in PER_UNIT else '‰')}"
                for key, val in step.get("parameters", {}).items()
            )
            lines.append(
                f"     {k}. {step['step']}: {step['method']}"
                + (f" ({params})" if params else "")
                + f" → {_num(step.get('value_after'), '‰')} ‰;"
                f" change ≤ {_num(step.get('size_permil'), '‰')} ‰"
            )
            lines.append(f"        source: {step['source']}")
            for flag in step.get("flags", []):
                lines.append(f"        flag: {flag}")
    typer.echo("\n".join(lines))
