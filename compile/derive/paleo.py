"""Paleo: the derive stage that places every dated record with the store's rotation model."""

from __future__ import annotations

import functools
import json
from typing import TYPE_CHECKING, Any

from strata13.compile.derive.engine import Given, Recorded
from strata13.compile.derive.settings import Settings
from strata13.compile.derive.steps import set_column

if TYPE_CHECKING:
    import pyarrow as pa


RETIRED_MODEL_KEY = "rotation_model_csv"  # the setting of stores made before the TOML format


@functools.lru_cache(maxsize=4)
def _paleo_model(model_text: str, polygons_text: str) -> tuple[Any, Any]:
    """The store's rotation model and plate polygons, parsed once per content."""
    from strata13.compile.paleo import plates, rotations

    return (
        rotations.parse_model(model_text, "the store's rotation model"),
        plates.parse_polygons(json.loads(polygons_text), "the store's plate polygons"),
    )


def refuse_retired_model(settings: Settings) -> None:
    """A store whose model is in the retired CSV layout is re-derived only after its model is
    replaced: placing its records without a model would drop their positions unsaid."""
    from strata13.errors import StoreError

    if not settings.rotation_model_toml and settings.extra.get(RETIRED_MODEL_KEY):
        raise StoreError(
            "the store's rotation model is in the retired CSV layout, which this strata13 no "
            "longer reads, so its records cannot be re-derived.",
            "Write the model as a TOML document (README 'Paleogeography') and run "
            "`strata13 replace-rotations MODEL.toml POLYGONS.geojson` first.",
        )


def stage(table: pa.Table, settings: Settings, given: Given) -> tuple[pa.Table, Recorded]:
    """Paleo-positions of every dated record (this stage records no chains)."""
    return place(table, settings), Recorded()


def place(table: pa.Table, settings: Settings) -> pa.Table:
    """Paleo-positions of every dated record with the store's rotation model: plate by
    point-in-polygon (the mapping's per-locality plate wins), then the finite rotation of
    that plate at the record's own age; a record without either says why."""
    import numpy as np
    import pyarrow as pa
    from strata13.compile.paleo import plates, rotations

    refuse_retired_model(settings)
    n = table.num_rows
    model_text = settings.rotation_model_toml
    if not model_text or n == 0:
        return set_column(
            table,
            "paleo_status",
            pa.array(["pending: no rotation model in the store"] * n, pa.string()),
        )
    model, polygons = _paleo_model(model_text, settings.plate_polygons_geojson or "")
    lat = table.column("lat").to_numpy(zero_copy_only=False).astype(float)
    lon = table.column("lon").to_numpy(zero_copy_only=False).astype(float)
    age = table.column("age_ma").to_numpy(zero_copy_only=False).astype(float)
    has_xy = ~(np.isnan(lat) | np.isnan(lon))
    plate = np.full(n, plates.UNASSIGNED, dtype=object)
    if has_xy.any():
        plate[has_xy] = plates.assign(lat[has_xy], lon[has_xy], polygons).plate
    override = np.asarray(table.column("plate_override").to_pylist(), dtype=object)
    forced = np.array([isinstance(v, str) and v != "" for v in override], dtype=bool)
    plate[forced] = override[forced]
    rec = rotations.reconstruct(lat, lon, plate, age, model)
    sigma = rotations.paleolat_sigma(lat, lon, plate, age, model)
    # numpy's stubs reject None as a value of where(); on object output it is the null
    placed = np.asarray(rec.status, dtype=object) == ""
    status = np.where(placed, "placed", None).astype(object)  # type: ignore[call-overload]
    for i in np.flatnonzero(status == None):  # noqa: E711 (object array)
        status[i] = f"pending: {rec.status[i]}"
    status[~has_xy & ~forced] = "pending: no present-day coordinates"
    status[(plate == plates.UNASSIGNED) & has_xy & ~forced] = (
        "pending: outside every plate polygon (unassigned)"
    )
    ok = status == "placed"
    out = table
    named = plate != plates.UNASSIGNED
    out = set_column(out, "plate_id", pa.array(plate, pa.string(), mask=~named))
    for name, values in (
        ("paleolat", rec.paleolat),
        ("paleolon", rec.paleolon),
        ("paleolat_sigma", sigma),
    ):
        out = set_column(
            out, name, pa.array(np.where(ok, values, np.nan), type=pa.float64(), from_pandas=True)
        )
    out = set_column(out, "paleo_model", pa.array(np.where(ok, model.name, None), pa.string()))
    out = set_column(out, "paleo_frame", pa.array(np.where(ok, model.frame, None), pa.string()))
    return set_column(out, "paleo_status", pa.array(status, pa.string()))
