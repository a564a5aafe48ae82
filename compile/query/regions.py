"""Regions: a bounding box, a GeoJSON polygon/multipolygon, or a named region of the store.

Boundary rule: a point on a region's edge is inside (closed sets), in the SQL bounding-box
prefilter and in the exact shapely test alike. Longitudes are degrees east; records are
stored in −180…180. A bbox whose west edge is greater than its east edge
(``bbox:170,-10,-170,10``) crosses the antimeridian; so does a GeoJSON polygon drawn with
longitudes beyond 180 (``[175, …], [185, …]``), split into parts at ±180 (RFC 7946), or a
ring with a jump of more than 180° between two vertices (``170 → −170``), which is read
the short way across the antimeridian. A region cannot be wider than 180° of longitude
in one ring.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.errors import ConfigError, OptionError
from strata13.suggest import closest

if TYPE_CHECKING:
    import numpy as np


@dataclass
class Region:
    name: str
    geojson: dict[str, Any]  # a GeoJSON geometry, longitudes possibly beyond ±180
    boxes: list[tuple[float, float, float, float]]  # (west, south, east, north), west ≤ east

    def describe(self) -> dict[str, Any]:
        return {"name": self.name, "geometry": self.geojson}

    def sql(self, lon: str = "lon", lat: str = "lat") -> tuple[str, list[float]]:
        """Bounding-box predicate with bound parameters (a prefilter; exact test after)."""
        parts, params = [], []
        for w, s, e, n in self.boxes:
            parts.append(
                f"({lat} BETWEEN ? AND ? AND ({lon} BETWEEN ? AND ? "
                f"OR {lon} + 360 BETWEEN ? AND ? OR {lon} - 360 BETWEEN ? AND ?))"
            )
            params += [s, n, w, e, w, e, w, e]
        return "(" + " OR ".join(parts) + ")", params

    def contains(self, lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
        """Exact closed-set test with shapely, trying lon, lon+360 and lon−360."""
        import numpy as np
        import shapely

        geom = shapely.geometry.shape(self.geojson)
        shapely.prepare(geom)
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        hit = np.zeros(len(lon), dtype=bool)
        for shift in (0.0, 360.0, -360.0):
            hit |= shapely.intersects_xy(geom, lon + shift, lat)
        return hit


def _unwrap_ring(ring: list[Any]) -> list[Any]:
    """A ring that jumps more than 180° in longitude between two vertices crosses the
    antimeridian: shift its western longitudes by +360 so it is drawn the short way."""
    try:
        lons = [float(p[0]) for p in ring]
    except (TypeError, ValueError, IndexError):
        return ring
    if not any(abs(b - a) > 180 for a, b in zip(lons, lons[1:], strict=False)):
        return ring
    return [[float(p[0]) + 360 if float(p[0]) < 0 else float(p[0]), *p[1:]] for p in ring]


def _unwrap(geom: dict[str, Any]) -> dict[str, Any]:
    coords = geom.get("coordinates")
    if not isinstance(coords, list):
        return geom
    if geom.get("type") == "Polygon":
        return {**geom, "coordinates": [_unwrap_ring(r) for r in coords]}
    if geom.get("type") == "MultiPolygon":
        return {**geom, "coordinates": [[_unwrap_ring(r) for r in poly] for poly in coords]}
    return geom


def _box_geojson(w: float, s: float, e: float, n: float) -> dict[str, Any]:
    if w > e:
        e += 360.0
    return {"type": "Polygon", "coordinates": [[[w, s], [e, s], [e, n], [w, n], [w, s]]]}


def parse_bbox(text: str) -> Region:
    body = text.split(":", 1)[1]
    try:
        w, s, e, n = (float(x) for x in body.split(","))
    except ValueError:
        raise OptionError(
            f"--region {text!r} is not bbox:W,S,E,N with four numbers.",
            "Example: --region bbox:-10,30,25,50",
        ) from None
    if not (-90 <= s <= n <= 90) or not (-180 <= w <= 180 and -180 <= e <= 180):
        raise OptionError(
            f"--region {text!r} is out of range or has south above north.",
            "Longitudes −180…180, latitudes −90…90, S ≤ N; W > E crosses the antimeridian.",
        )
    geo = _box_geojson(w, s, e, n)
    return Region(text, geo, _boxes(geo))


def _boxes(geo: dict[str, Any]) -> list[tuple[float, float, float, float]]:
    import shapely

    geom = shapely.geometry.shape(geo)
    parts = list(getattr(geom, "geoms", [geom]))
    return [tuple(float(v) for v in p.bounds) for p in parts]  # type: ignore[misc]


def polygon_shape(geo: Any, where: str, unwrap: bool = False) -> Any:
    """A GeoJSON Polygon/MultiPolygon as a valid shapely geometry, or a ConfigError naming
    ``where`` (used for regions and for plate polygons); ``unwrap`` first carries rings
    across the antimeridian."""
    import shapely

    if not isinstance(geo, dict) or geo.get("type") not in ("Polygon", "MultiPolygon"):
        raise ConfigError(
            f"{where}: only Polygon and MultiPolygon geometries are accepted.",
            "Draw it as a polygon.",
        )
    try:
        shp = shapely.geometry.shape(_unwrap(geo) if unwrap else geo)
    except Exception as exc:  # shapely raises several types for bad coordinates
        raise ConfigError(
            f"{where}: the polygon cannot be read ({exc}).",
            "Check the coordinate nesting: [[[lon, lat], …]].",
        ) from None
    lo_x, lo_y, hi_x, hi_y = shp.bounds
    if shp.is_empty or lo_y < -90 or hi_y > 90 or lo_x < -360 or hi_x > 360:
        raise ConfigError(
            f"{where}: the polygon is empty or has coordinates out of range "
            f"(lon {lo_x:g}…{hi_x:g}, lat {lo_y:g}…{hi_y:g}).",
            "GeoJSON is [longitude, latitude]; check for swapped pairs.",
        )
    if not shp.is_valid:
        raise ConfigError(
            f"{where}: the polygon is invalid ({shapely.is_valid_reason(shp)}).",
            "Fix self-intersections; close each ring.",
        )
    return shp


def from_geojson(doc: Any, name: str, where: str) -> Region:
    """A Region from a GeoJSON geometry, Feature or FeatureCollection (all parts united)."""
    import shapely

    geoms = []
    if isinstance(doc, dict) and doc.get("type") == "FeatureCollection":
        geoms = [f.get("geometry") for f in doc.get("features", [])]
    elif isinstance(doc, dict) and doc.get("type") == "Feature":
        geoms = [doc.get("geometry")]
    elif isinstance(doc, dict):
        geoms = [doc]
    polys = [polygon_shape(g, where, unwrap=True) for g in geoms]
    if not polys:
        raise ConfigError(f"{where} holds no polygon.", "A region is a Polygon or MultiPolygon.")
    union = shapely.union_all(polys)
    geo = shapely.geometry.mapping(union)
    geo = json.loads(json.dumps(geo))  # tuples -> lists
    return Region(name, geo, _boxes(geo))


def load_regions_file(path: Path) -> list[tuple[str, str]]:
    """(name, geometry JSON) for each named feature of a regions GeoJSON file."""
    from strata13.compile.read.inputs import read_text

    try:
        doc = json.loads(read_text(path, "regions file", "Check --regions."))
    except json.JSONDecodeError as exc:
        raise ConfigError(
            f"{path.name} is not valid GeoJSON ({exc}).", "Check the file with a GeoJSON validator."
        ) from None
    if not isinstance(doc, dict) or doc.get("type") != "FeatureCollection":
        raise ConfigError(
            f"{path.name} must be a GeoJSON FeatureCollection.",
            "Each feature a polygon with a 'name' property.",
        )
    out = []
    for k, feat in enumerate(doc.get("features", [])):
        name = (feat.get("properties") or {}).get("name")
        if not isinstance(name, str) or not name.strip():
            raise ConfigError(
                f"{path.name}: feature {k + 1} has no 'name' property.",
                'Give each feature properties: {"name": "…"}.',
            )
        region = from_geojson(feat, name, f"{path.name} feature {name!r}")
        out.append((name, json.dumps(region.geojson, sort_keys=True)))
    names = [n for n, _ in out]
    if len(set(names)) != len(names):
        raise ConfigError(f"{path.name}: region names repeat.", "Give each region its own name.")
    return out


def resolve_region(spec: str, named: dict[str, str]) -> Region:
    """``bbox:W,S,E,N``, a GeoJSON file path, or a name from the store's regions (names
    compare without regard to case)."""
    if not spec.strip():
        raise OptionError(
            "--region is empty.", "Give a region name, a GeoJSON file or bbox:W,S,E,N."
        )
    if spec.startswith("bbox:"):
        return parse_bbox(spec)
    by_case = {k.casefold(): k for k in named}
    if spec.casefold() in by_case:
        name = by_case[spec.casefold()]
        return from_geojson(json.loads(named[name]), name, f"region {name!r}")
    path = Path(spec)
    from strata13.compile.read.inputs import exists

    if path.suffix.lower() in (".json", ".geojson") or exists(path):
        from strata13.compile.read.inputs import read_text

        try:
            doc = json.loads(read_text(path, "region file", "Check --region."))
        except json.JSONDecodeError as exc:
            raise ConfigError(
                f"{path.name} is not valid GeoJSON ({exc}).",
                "Check the file with a GeoJSON validator.",
            ) from None
        return from_geojson(doc, path.name, path.name)
    hit = closest(spec, named, n=1)
    raise OptionError(
        f"--region {spec!r} is not a bbox, a GeoJSON file or a region of this store."
        + (f" Did you mean {hit[0]!r}?" if hit else ""),
        "Regions of this store: " + (", ".join(sorted(named)) or "none") + ".",
    )
