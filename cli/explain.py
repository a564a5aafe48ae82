"""`strata13 explain RECORD`: where a record came from and every step from its reported
values to the harmonised ones."""

from __future__ import annotations

import json
from typing import Annotated

import typer
from strata13.cli.common import StoreOpt


def _num(v: object) -> str:
    return (
        "—"
        if v is None or (isinstance(v, float) and v != v)
        else f"{v:g}"
        if isinstance(v, float)
        else str(v)
    )


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
        f"{r['replicate']}, position {_num(r['position_m'])} m ({r['position_kind'] or '—'})",
        f"  material {r['lithology'] or '—'} / {r['component'] or '—'} / {r['mineralogy'] or '—'}",
        f"  age      {_num(r['age_ma'])} Ma ({r['age_status'] or '—'})",
        f"  paleo    {r['paleo_status'] or '—'};  screen {r['screen']}",
    ]
    for k, step in enumerate(info["age_steps"], 1):
        lines.append(f"     {k}. {step['step']}: {step['method']} (source: {step['source']})")
        for tie in step.get("ties", []):
            sigma = tie.get("sigma_ma")
            lines.append(
                f"        {tie['tie']}: {_num(tie.get('age_ma'))} Ma"
                + (f" ± {_num(sigma)} (1σ)" if sigma is not None else "")
                + (f"; {tie['sigma_from']}" if tie.get("sigma_from") else "")
            )
    for name, iso in info["isotopes"].items():
        if iso["reported"] is None:
            continue
        lines.append(
            f"  {name}: reported {_num(iso['reported'])} ‰ {iso['scale'] or '(no scale)'}"
            f" → {_num(iso['harmonised'])} ‰ VPDB  [{iso['status']}]"
        )
        for k, step in enumerate(iso["steps"], 1):
            params = ", ".join(f"{key}={val}" for key, val in step.get("parameters", {}).items())
            lines.append(
                f"     {k}. {step['step']}: {step['method']}"
                + (f" ({params})" if params else "")
                + f" → {_num(step.get('value_after'))} ‰;"
                f" change ≤ {_num(step.get('size_permil'))} ‰"
            )
            lines.append(f"        source: {step['source']}")
            for flag in step.get("flags", []):
                lines.append(f"        flag: {flag}")
    typer.echo("\n".join(lines))
