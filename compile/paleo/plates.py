"""Plate polygons (present-day GeoJSON) and the assignment of points to plates.

The file is a GeoJSON FeatureCollection; each feature a Polygon or MultiPolygon with the
integer property ``"plate_id"`` (≥ 1; the id the rotation model uses). Several features may
share a plate id; polygons of *different* plates must not overlap (sharing an edge is fine).
A polygon crossing the antimeridian is drawn with longitudes beyond 180 (``170 … 190``);
points are tested at lon, lon + 360 and lon − 360.

Assignment uses closed sets: a point on a polygon's edge belongs to it, and a point on an
edge shared by two plates goes to the smaller plate id (a deterministic rule, not a
geological one). A point in no polygon gets ``UNASSIGNED`` (−1): it is counted and kept,
never dropped, and reconstruction reports it as "no plate".

Displaced terranes: a locality whose rocks sit on a plate other than the one under its
present-day coordinates is given by the caller as ``overrides`` — a mapping of locality id
to plate id — together with ``locality_ids``, one per point, aligned with lat/lon. An
override wins over the polygons.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import shapely
from strata13.compile.query.regions import polygon_shape

from strata13.errors import ConfigError

PLATE_KEY = "plate_id"
UNASSIGNED = -1
OVERLAP_TOL_DEG2 = 1e-10  # intersection area (square degrees) below which edges just touch


@dataclass(frozen=True)
class PlatePolygons:
    plate_ids: np.ndarray  # int64, one per polygon
    geometries: np.ndarray  # shapely Polygon/MultiPolygon objects
    tree: shapely.STRtree
    digest: str  # sha256 of the file's bytes: the settings key in the store


class Assignment(NamedTuple):
    plate_id: np.ndarray  # int64 per point, UNASSIGNED where no polygon holds it
    n_unassigned: int
    n_overridden: int


def load_polygons(path: Path | str) -> PlatePolygons:
    """Read and validate a plate-polygon GeoJSON; ConfigError names the feature and fix."""
    from strata13.compile.read.inputs import read_text

    path = Path(path)
    text = read_text(path, "plate polygons file", "Check the POLYGONS argument (GeoJSON).")
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ConfigError(
            f"{path.name} is not readable GeoJSON ({exc}).",
            "Check the file with a GeoJSON validator.",
        ) from None
    return parse_polygons(doc, path.name, hashlib.sha256(text.encode("utf-8")).hexdigest())


def _plate_id(props: Any, where: str) -> int:
    value = props.get(PLATE_KEY) if isinstance(props, dict) else None
    if value is None:
        raise ConfigError(
            f"{where} has no '{PLATE_KEY}' property.",
            f'Give each feature properties: {{"{PLATE_KEY}": 101}}.',
        )
    if isinstance(value, bool) or not (
        isinstance(value, int) or (isinstance(value, str) and value.strip().isdigit())
    ):
        raise ConfigError(
            f"{where}: {PLATE_KEY} {value!r} is not a whole number.",
            "Use the integer plate id of the rotation model.",
        )
    plate = int(value)
    if plate < 1:
        raise ConfigError(
            f"{where}: {PLATE_KEY} {plate} is not a plate.",
            "Plate ids are ≥ 1 (0 is the model's frame, −1 means unassigned).",
        )
    return plate


def parse_polygons(doc: Any, name: str = "plate polygons", digest: str = "") -> PlatePolygons:
    """Validate a parsed GeoJSON document (see the module docstring)."""
    if not isinstance(doc, dict) or doc.get("type") != "FeatureCollection":
        raise ConfigError(
            f"{name} must be a GeoJSON FeatureCollection.",
            f"Each feature a polygon with a '{PLATE_KEY}' property.",
        )
    features = doc.get("features")
    if not isinstance(features, list) or not features:
        raise ConfigError(f"{name} holds no features.", "Add one polygon per plate.")
    plates, geoms = [], []
    for k, feat in enumerate(features):
        where = f"{name} feature {k + 1}"
        if not isinstance(feat, dict):
            raise ConfigError(f"{where} is not a GeoJSON Feature.", "Check the file's nesting.")
        plate = _plate_id(feat.get("properties"), where)
        where = f"{where} (plate {plate})"
        shp = polygon_shape(feat.get("geometry"), where)
        plates.append(plate)
        geoms.append(shp)
    plate_ids = np.array(plates, dtype=np.int64)
    geometries = np.array(geoms, dtype=object)
    tree = shapely.STRtree(geometries)
    _refuse_overlaps(plate_ids, geometries, tree, name)
    return PlatePolygons(plate_ids, geometries, tree, digest)


def _refuse_overlaps(
    plate_ids: np.ndarray, geoms: np.ndarray, tree: shapely.STRtree, name: str
) -> None:
    left, right = tree.query(geoms, predicate="intersects")
    pairs = (left < right) & (plate_ids[left] != plate_ids[right])
    left, right = left[pairs], right[pairs]
    if not len(left):
        return
    area = shapely.area(shapely.intersection(geoms[left], geoms[right]))
    bad = np.flatnonzero(area > OVERLAP_TOL_DEG2)
    if len(bad):
        i, j = int(left[bad[0]]), int(right[bad[0]])
        raise ConfigError(
            f"{name}: feature {i + 1} (plate {plate_ids[i]}) and feature {j + 1} "
            f"(plate {plate_ids[j]}) overlap by {area[bad[0]]:.3g} square degrees.",
            "A point must lie on one plate: trim one polygon to the shared edge.",
        )


def assign(
    lat: np.ndarray,
    lon: np.ndarray,
    polygons: PlatePolygons,
    overrides: Mapping[str, int] | None = None,
    locality_ids: Sequence[str] | np.ndarray | None = None,
) -> Assignment:
    """Plate id per point (UNASSIGNED = −1 where no polygon holds it), overrides applied."""
    lat = np.atleast_1d(np.asarray(lat, dtype=float))
    lon = np.atleast_1d(np.asarray(lon, dtype=float))
    if lat.shape != lon.shape:
        raise ValueError("lat and lon must have one length")
    n = len(lat)
    best = np.full(n, np.iinfo(np.int64).max, dtype=np.int64)
    ok = np.flatnonzero(np.isfinite(lat) & np.isfinite(lon))
    for shift in (0.0, 360.0, -360.0):
        points = shapely.points(lon[ok] + shift, lat[ok])
        pt, poly = polygons.tree.query(points, predicate="intersects")
        np.minimum.at(best, ok[pt], polygons.plate_ids[poly])
    plate = np.where(best == np.iinfo(np.int64).max, UNASSIGNED, best)
    n_over = 0
    if overrides:
        if locality_ids is None or len(locality_ids) != n:
            raise ValueError("overrides need locality_ids, one per point")
        for loc, pid in overrides.items():
            if isinstance(pid, bool) or not isinstance(pid, int | np.integer) or pid < 1:
                raise ConfigError(
                    f"the plate override for locality {loc!r} is {pid!r}, not a plate id.",
                    "Give a whole number ≥ 1.",
                )
        ids = np.asarray(locality_ids, dtype=object)
        hit = np.isin(ids, np.array(list(overrides), dtype=object))
        plate[hit] = [overrides[k] for k in ids[hit]]
        n_over = int(hit.sum())
    return Assignment(plate, int((plate == UNASSIGNED).sum()), n_over)
