"""Plate polygons (present-day GeoJSON) and the assignment of points to plates.

The file is a GeoJSON FeatureCollection; each feature a Polygon or MultiPolygon with the
text property ``"plate"``: the name of a plate of the rotation model (a slug, e.g.
``"brevandel-block"``). Several features may share a plate; polygons of *different* plates
must not overlap (sharing an edge is fine). A polygon crossing the antimeridian is drawn with
longitudes beyond 180 (``170 … 190``); points are tested at lon, lon + 360 and lon − 360.

Assignment uses closed sets: a point on a polygon's edge belongs to it, and a point on an
edge shared by two plates goes to the plate whose name sorts first (a deterministic rule,
not a geological one). A point in no polygon gets ``UNASSIGNED`` (""): it is counted and
kept, never dropped, and reconstruction reports it as "no plate".

Displaced terranes: a locality whose rocks sit on a plate other than the one under its
present-day coordinates is given by the caller as ``overrides`` — a mapping of locality id
to plate name — together with ``locality_ids``, one per point, aligned with lat/lon. An
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
from strata13.compile.paleo.names import plate_name_problem
from strata13.compile.query.regions import polygon_shape

from strata13.errors import ConfigError
from strata13.suggest import did_you_mean

PLATE_KEY = "plate"
RETIRED_KEY = "plate_id"  # the numbered property of polygons made before plates had names
UNASSIGNED = ""
OVERLAP_TOL_DEG2 = 1e-10  # intersection area (square degrees) below which edges just touch


@dataclass(frozen=True)
class PlatePolygons:
    plates: np.ndarray  # plate name (object) per polygon
    geometries: np.ndarray  # shapely Polygon/MultiPolygon objects
    tree: shapely.STRtree
    digest: str  # sha256 of the file's bytes: the settings key in the store

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(sorted(set(self.plates.tolist())))


class Assignment(NamedTuple):
    plate: np.ndarray  # plate name (object) per point, UNASSIGNED where no polygon holds it
    n_unassigned: int
    n_overridden: int


def load_polygons(path: Path | str) -> PlatePolygons:
    """Read and validate a plate-polygon GeoJSON; ConfigError names the features and fix."""
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


def _plate_name(props: Any, where: str, problems: list[str]) -> str:
    if not isinstance(props, dict) or props.get(PLATE_KEY) is None:
        if isinstance(props, dict) and props.get(RETIRED_KEY) is not None:
            problems.append(
                f"{where} has the numbered property '{RETIRED_KEY}'; polygons name their "
                f'plate now: "{PLATE_KEY}": "<a plate of the rotation model>"'
            )
        else:
            problems.append(f"{where} has no '{PLATE_KEY}' property")
        return ""
    value = props[PLATE_KEY]
    why = plate_name_problem(value)
    if why:
        problems.append(f"{where}: {PLATE_KEY} {why}")
        return ""
    return str(value)


def parse_polygons(doc: Any, name: str = "plate polygons", digest: str = "") -> PlatePolygons:
    """Validate a parsed GeoJSON document (see the module docstring); the features' problems
    are reported together."""
    if not isinstance(doc, dict) or doc.get("type") != "FeatureCollection":
        raise ConfigError(
            f"{name} must be a GeoJSON FeatureCollection.",
            f"Each feature a polygon with a '{PLATE_KEY}' property naming its plate.",
        )
    features = doc.get("features")
    if not isinstance(features, list) or not features:
        raise ConfigError(f"{name} holds no features.", "Add one polygon per plate.")
    plates, geoms, problems = [], [], []
    for k, feat in enumerate(features):
        where = f"feature {k + 1}"
        if not isinstance(feat, dict):
            problems.append(f"{where} is not a GeoJSON Feature")
            continue
        plate = _plate_name(feat.get("properties"), where, problems)
        try:
            shp = polygon_shape(
                feat.get("geometry"), where + (f" (plate {plate!r})" if plate else "")
            )
        except ConfigError as exc:
            problems.append(exc.message.rstrip("."))
            continue
        plates.append(plate)
        geoms.append(shp)
    if problems:
        raise ConfigError(
            f"{name} has {len(problems)} problem{'s' if len(problems) > 1 else ''}: "
            + "; ".join(problems)
            + ".",
            f'Give each feature a valid polygon and properties {{"{PLATE_KEY}": "<plate name>"}}.',
        )
    plate_names = np.array(plates, dtype=object)
    geometries = np.array(geoms, dtype=object)
    tree = shapely.STRtree(geometries)
    _refuse_overlaps(plate_names, geometries, tree, name)
    return PlatePolygons(plate_names, geometries, tree, digest)


def check_against_model(polygons: PlatePolygons, model_names: Sequence[str], name: str) -> None:
    """Every plate the polygons name is a plate of the rotation model (all named at once)."""
    missing = [p for p in polygons.names if p not in model_names]
    if missing:
        raise ConfigError(
            f"{name} names {len(missing)} plate{'s' if len(missing) > 1 else ''} the rotation "
            "model lacks: "
            + "; ".join(f"{p!r}{did_you_mean(p, model_names)}" for p in missing)
            + ".",
            f"The model's plates: {', '.join(model_names)}. Correct the names or add the plates.",
        )


def _refuse_overlaps(
    plates: np.ndarray, geoms: np.ndarray, tree: shapely.STRtree, name: str
) -> None:
    left, right = tree.query(geoms, predicate="intersects")
    pairs = (left < right) & (plates[left] != plates[right])
    left, right = left[pairs], right[pairs]
    if not len(left):
        return
    area = shapely.area(shapely.intersection(geoms[left], geoms[right]))
    bad = np.flatnonzero(area > OVERLAP_TOL_DEG2)
    if len(bad):
        found = [
            f"feature {int(left[b]) + 1} (plate {plates[left[b]]!r}) and feature "
            f"{int(right[b]) + 1} (plate {plates[right[b]]!r}) overlap by {area[b]:.3g} "
            "square degrees"
            for b in bad
        ]
        raise ConfigError(
            f"{name}: " + "; ".join(found) + ".",
            "A point must lie on one plate: trim one polygon to the shared edge.",
        )


def assign(
    lat: np.ndarray,
    lon: np.ndarray,
    polygons: PlatePolygons,
    overrides: Mapping[str, str] | None = None,
    locality_ids: Sequence[str] | np.ndarray | None = None,
) -> Assignment:
    """Plate name per point (UNASSIGNED = "" where no polygon holds it), overrides applied."""
    lat = np.atleast_1d(np.asarray(lat, dtype=float))
    lon = np.atleast_1d(np.asarray(lon, dtype=float))
    if lat.shape != lon.shape:
        raise ValueError("lat and lon must have one length")
    n = len(lat)
    names = np.array(polygons.names, dtype=object)
    rank = np.searchsorted(names, polygons.plates)  # the name's place in sorted order
    none = np.iinfo(np.int64).max
    best = np.full(n, none, dtype=np.int64)
    ok = np.flatnonzero(np.isfinite(lat) & np.isfinite(lon))
    for shift in (0.0, 360.0, -360.0):
        points = shapely.points(lon[ok] + shift, lat[ok])
        pt, poly = polygons.tree.query(points, predicate="intersects")
        np.minimum.at(best, ok[pt], rank[poly])
    plate = np.full(n, UNASSIGNED, dtype=object)
    hit = best != none
    plate[hit] = names[best[hit]]
    n_over = 0
    if overrides:
        if locality_ids is None or len(locality_ids) != n:
            raise ValueError("overrides need locality_ids, one per point")
        for loc, name in overrides.items():
            why = plate_name_problem(name)
            if why:
                raise ConfigError(
                    f"the plate override for locality {loc!r}: {why}.",
                    "Give the name of a plate of the rotation model.",
                )
        ids = np.asarray(locality_ids, dtype=object)
        forced = np.isin(ids, np.array(list(overrides), dtype=object))
        plate[forced] = [overrides[k] for k in ids[forced]]
        n_over = int(forced.sum())
    return Assignment(plate, int((plate == UNASSIGNED).sum()), n_over)
