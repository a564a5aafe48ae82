"""Finite-rotation models in strata13's own CSV format, and reconstruction through them.

Why a plain CSV: a model is a settings file the user edits, diffs and cites; it is stored in
the store under its content hash (``RotationModel.digest``).

The file (UTF-8)::

    # model: demo-2026
    # frame: paleomagnetic
    # source: invented for the demo (any further "# key: value" lines are kept as notes)
    plate_id,age_ma,pole_lat,pole_lon,angle_deg,relative_to,pole_sigma_deg,comment
    101,0,90,0,0,0,,present day
    101,100,45,-30,25,0,1.5,invented
    202,0,90,0,0,101,,
    202,100,10,60,-12,101,,

* Header block: ``# model: NAME`` and ``# frame: paleomagnetic|mantle|other`` are required.
  Later lines starting with ``#`` and blank lines are skipped.
* Columns, in any order: ``plate_id`` (integer ≥ 1), ``age_ma`` (≥ 0), ``pole_lat``
  (−90…90), ``pole_lon`` (−180…360, degrees east), ``angle_deg`` (−360…360, right-hand
  rule: positive is counter-clockwise seen from above the pole), ``relative_to`` (the fixed
  plate; 0 is the model's frame). Optional: ``pole_sigma_deg`` (1σ angle of a cone about
  the pole, 0…90; blank = not given) and ``comment``.
* Each row is the finite rotation that takes the plate from its present position to its
  position at ``age_ma``, relative to ``relative_to``. Every plate has a row at age 0 with
  angle 0 (the polygons are present-day), one relative plate for all its rows (a plate
  that changes its fixed plate through time is not supported yet: split it into two ids),
  no two rows at one age, and a circuit that reaches the frame without a loop.

Interpolation: between two tabulated ages of a plate, spherical linear interpolation of the
two finite rotations (unit quaternions, ``scipy.spatial.transform.Slerp``), which keeps the
path the short way round (tabulate consecutive rotations less than 180° apart). No
extrapolation: an age beyond a plate's oldest row — or beyond the oldest row of any plate on
its circuit — gives NaN and the status ``BEYOND``.

Composition (order matters; rotations act on column vectors, applied right to left):
``R(P→0, t) = R(F→0, t) · R(P→F, t)`` — first the plate is moved on its fixed plate F, then
F (carrying it) is moved to the frame, and so on down the circuit. In scipy terms
``r_frame = r_fixed_to_frame * r_plate_to_fixed``.

Paleolatitude uncertainty is a Monte Carlo on the pole cones with a fixed seed: in each draw
every tabulated pole with a ``pole_sigma_deg`` is displaced in its tangent plane by two
independent normal offsets of standard deviation σ (so the angular displacement is Rayleigh
with scale σ, the offset direction uniform); angles are taken as exact and rows as
independent (no covariances). The result is the standard deviation of the drawn
paleolatitudes — a first estimate, not a full error budget.
"""

from __future__ import annotations

import csv
import hashlib
import io
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import NamedTuple

import numpy as np
from scipy.spatial.transform import Rotation, Slerp

from strata13.errors import ConfigError

FRAMES = ("paleomagnetic", "mantle", "other")
REQUIRED = ("plate_id", "age_ma", "pole_lat", "pole_lon", "angle_deg", "relative_to")
OPTIONAL = ("pole_sigma_deg", "comment")
FRAME_PLATE = 0

N_DRAWS = 200  # Monte Carlo draws for paleolatitude uncertainty (a choice)
SEED = 0  # fixed, so a recompute with the same settings gives the same σ

# Per-record status ("" = reconstructed).
OK = ""
NO_PLATE = "no plate"
UNKNOWN_PLATE = "plate not in the model"
NO_AGE = "no age"
BEYOND = "older than the model"


@dataclass(frozen=True)
class PlateTrack:
    """The tabulated finite rotations of one plate relative to its fixed plate, by age."""

    plate: int
    relative_to: int
    ages: np.ndarray  # Ma, ascending, starts at 0
    poles: np.ndarray  # n × 3 unit vectors
    angles_rad: np.ndarray
    sigma_rad: np.ndarray  # NaN where not given
    lines: tuple[int, ...]  # file line of each row, for messages

    def rotations(self, poles: np.ndarray | None = None) -> Rotation:
        """The tabulated rotations (optionally with displaced poles)."""
        p = self.poles if poles is None else poles
        return Rotation.from_rotvec(p * self.angles_rad[:, None])


@dataclass(frozen=True)
class RotationModel:
    name: str
    frame: str
    tracks: Mapping[int, PlateTrack]
    digest: str  # sha256 of the file's bytes: the settings key in the store
    notes: Mapping[str, str] = field(default_factory=dict)

    def limit_ma(self, plate: int) -> float:
        """Oldest age reachable for ``plate``: the youngest 'oldest row' on its circuit."""
        limit = np.inf
        while plate != FRAME_PLATE:
            track = self.tracks[plate]
            limit = min(limit, float(track.ages[-1]))
            plate = track.relative_to
        return limit

    def circuit(self, plate: int) -> list[int]:
        """The plates from ``plate`` down to the frame (frame excluded)."""
        out = []
        while plate != FRAME_PLATE:
            out.append(plate)
            plate = self.tracks[plate].relative_to
        return out


class Reconstruction(NamedTuple):
    """Paleo-coordinates (degrees; NaN where not reconstructed) and a status per record."""

    paleolat: np.ndarray
    paleolon: np.ndarray
    status: np.ndarray  # OK, NO_PLATE, UNKNOWN_PLATE, NO_AGE or BEYOND


def unit_vectors(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """n × 3 unit vectors (x to 0°N 0°E, z to the north pole) from degrees."""
    la, lo = np.radians(lat), np.radians(lon)
    return np.column_stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])


def lat_lon(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Degrees from n × 3 vectors; longitude in −180…180."""
    lat = np.degrees(np.arcsin(np.clip(v[:, 2], -1.0, 1.0)))
    lon = np.degrees(np.arctan2(v[:, 1], v[:, 0]))
    return lat, lon


def euler_rotation(pole_lat: float, pole_lon: float, angle_deg: float) -> Rotation:
    """One finite rotation about an Euler pole (right-hand rule)."""
    axis = unit_vectors(np.array([pole_lat]), np.array([pole_lon]))[0]
    return Rotation.from_rotvec(axis * np.radians(angle_deg))


# ---------------------------------------------------------------------------------------------
# Reading and validation


def load_model(path: Path | str) -> RotationModel:
    """Read and validate a rotation-model CSV; ConfigError names the line and the fix."""
    from strata13.compile.read.inputs import read_text

    path = Path(path)
    text = read_text(path, "rotation model", "Check the MODEL argument (a CSV file).")
    return parse_model(text, path.name, hashlib.sha256(text.encode("utf-8")).hexdigest())


def _number(cell: str, col: str, where: str) -> float:
    try:
        value = float(cell)
    except ValueError:
        raise ConfigError(
            f"{where}: {col} {cell!r} is not a number.",
            "Use a plain decimal number with a point, e.g. 12.5.",
        ) from None
    if not np.isfinite(value):
        raise ConfigError(
            f"{where}: {col} {cell!r} is not a finite number.", "Give a finite number."
        )
    return value


def _integer(cell: str, col: str, where: str) -> int:
    try:
        return int(cell)
    except ValueError:
        raise ConfigError(
            f"{where}: {col} {cell!r} is not a whole number.",
            "Plate ids are integers, e.g. 101 (0 is the model's frame).",
        ) from None


def _check_range(value: float, lo: float, hi: float, col: str, where: str, hint: str) -> None:
    if not lo <= value <= hi:
        raise ConfigError(f"{where}: {col} {value:g} is outside {lo:g}…{hi:g}.", hint)


def _header(lines: list[str], name: str) -> tuple[dict[str, str], int]:
    """``# key: value`` lines before the column line; returns (meta, index of column line)."""
    meta: dict[str, str] = {}
    for i, raw in enumerate(lines):
        line = raw.strip()
        if not line:
            continue
        if not line.startswith("#"):
            return meta, i
        key, sep, value = line[1:].partition(":")
        key = key.strip().lower()
        if sep and key and " " not in key:
            if key in meta:
                raise ConfigError(
                    f"{name} line {i + 1}: '# {key}:' is given twice.",
                    "Keep one line per header key.",
                )
            meta[key] = value.strip()
    raise ConfigError(
        f"{name} has no column line.", "After the '#' header, add: " + ",".join(REQUIRED + OPTIONAL)
    )


def parse_model(
    text: str, name: str = "rotation model", digest: str | None = None
) -> RotationModel:
    """Validate the CSV text of a rotation model (see the module docstring)."""
    lines = text.splitlines()
    meta, start = _header(lines, name)
    for key in ("model", "frame"):
        if not meta.get(key):
            raise ConfigError(
                f"{name}: the header has no '# {key}:' line.",
                "Start the file with '# model: NAME' and '# frame: paleomagnetic|mantle|other'.",
            )
    frame = meta["frame"].lower()
    if frame not in FRAMES:
        raise ConfigError(
            f"{name}: frame {meta['frame']!r} is not one of {', '.join(FRAMES)}.",
            "State the reference frame the rotations to plate 0 are in.",
        )
    columns = [c.strip() for c in next(csv.reader([lines[start]]))]
    unknown = [c for c in columns if c not in REQUIRED + OPTIONAL]
    missing = [c for c in REQUIRED if c not in columns]
    if unknown or missing or len(set(columns)) != len(columns):
        raise ConfigError(
            f"{name} line {start + 1}: the columns are not "
            f"{','.join(REQUIRED)}[,{','.join(OPTIONAL)}]"
            + (f" (unknown: {', '.join(unknown)})" if unknown else "")
            + (f" (missing: {', '.join(missing)})" if missing else "")
            + ".",
            "Use exactly these column names, each once, in any order.",
        )

    rows: dict[int, list[tuple[int, float, float, float, float, int, float]]] = {}
    seen: dict[tuple[int, float], int] = {}
    body = io.StringIO("\n".join(lines[start + 1 :]))
    for offset, cells in enumerate(csv.reader(body)):
        lineno = start + 2 + offset
        if not cells or not "".join(cells).strip() or cells[0].lstrip().startswith("#"):
            continue
        where = f"{name} line {lineno}"
        if len(cells) > len(columns):
            raise ConfigError(
                f"{where} has {len(cells)} cells for {len(columns)} columns.",
                "Quote a comment that contains commas.",
            )
        row = {c: (cells[k].strip() if k < len(cells) else "") for k, c in enumerate(columns)}
        for c in REQUIRED:
            if not row[c]:
                raise ConfigError(f"{where}: {c} is empty.", f"Every row needs {c}.")
        plate = _integer(row["plate_id"], "plate_id", where)
        rel = _integer(row["relative_to"], "relative_to", where)
        if plate < 1:
            raise ConfigError(
                f"{where}: plate_id {plate} is not a plate.",
                "Plate ids are ≥ 1; 0 is the model's frame and has no rows.",
            )
        if rel < 0:
            raise ConfigError(
                f"{where}: relative_to {rel} is negative.",
                "Name the fixed plate's id, or 0 for the model's frame.",
            )
        age = _number(row["age_ma"], "age_ma", where)
        _check_range(age, 0, np.inf, "age_ma", where, "Ages are Ma before present, ≥ 0.")
        plat = _number(row["pole_lat"], "pole_lat", where)
        _check_range(
            plat,
            -90,
            90,
            "pole_lat",
            where,
            "Pole latitude is −90…90; check for swapped latitude and longitude.",
        )
        plon = _number(row["pole_lon"], "pole_lon", where)
        _check_range(plon, -180, 360, "pole_lon", where, "Pole longitude is −180…360 (east).")
        angle = _number(row["angle_deg"], "angle_deg", where)
        _check_range(angle, -360, 360, "angle_deg", where, "Angles are degrees, −360…360.")
        sigma = np.nan
        if row.get("pole_sigma_deg"):
            sigma = _number(row["pole_sigma_deg"], "pole_sigma_deg", where)
            _check_range(
                sigma,
                0,
                90,
                "pole_sigma_deg",
                where,
                "The pole's 1σ cone angle is degrees, 0…90; leave blank if unknown.",
            )
        if (plate, age) in seen:
            raise ConfigError(
                f"{where}: plate {plate} at {age:g} Ma repeats line {seen[(plate, age)]}.",
                "Keep one row per plate and age.",
            )
        seen[(plate, age)] = lineno
        if age == 0 and angle % 360 != 0:
            raise ConfigError(
                f"{where}: plate {plate} at 0 Ma has angle {angle:g}, not 0.",
                "At 0 Ma every plate is where it is today: angle 0.",
            )
        first = rows.get(plate)
        if first and first[0][5] != rel:
            raise ConfigError(
                f"{where}: plate {plate} is relative to {rel} here but to "
                f"{first[0][5]} on line {first[0][0]}.",
                "One fixed plate per plate; give the other stage its own id.",
            )
        rows.setdefault(plate, []).append((lineno, age, plat, plon, angle, rel, sigma))
    if not rows:
        raise ConfigError(f"{name} has no rotation rows.", "Add at least one plate.")

    tracks: dict[int, PlateTrack] = {}
    for plate, prow in rows.items():
        prow.sort(key=lambda r: r[1])
        if prow[0][1] != 0:
            raise ConfigError(
                f"{name} line {prow[0][0]}: plate {plate} has no row at 0 Ma.",
                f"Add '{plate},0,90,0,0,{prow[0][5]}' (the present day).",
            )
        arr = np.array([r[1:5] for r in prow], dtype=float)
        tracks[plate] = PlateTrack(
            plate=plate,
            relative_to=prow[0][5],
            ages=arr[:, 0],
            poles=unit_vectors(arr[:, 1], arr[:, 2]),
            angles_rad=np.radians(arr[:, 3]),
            sigma_rad=np.radians(np.array([r[6] for r in prow], dtype=float)),
            lines=tuple(r[0] for r in prow),
        )
    _check_circuit(tracks, name)
    body_hash = digest or hashlib.sha256(text.encode("utf-8")).hexdigest()
    notes = {k: v for k, v in meta.items() if k not in ("model", "frame")}
    return RotationModel(meta["model"], frame, tracks, body_hash, notes)


def _check_circuit(tracks: Mapping[int, PlateTrack], name: str) -> None:
    """Every relative plate exists, and every circuit reaches the frame without a loop."""
    for plate, track in tracks.items():
        if track.relative_to != FRAME_PLATE and track.relative_to not in tracks:
            raise ConfigError(
                f"{name} line {track.lines[0]}: plate {plate} is relative to "
                f"plate {track.relative_to}, which has no rows.",
                f"Add rows for plate {track.relative_to}, or use 0 (the frame).",
            )
    for plate in sorted(tracks):
        path = [plate]
        current = tracks[plate].relative_to
        while current != FRAME_PLATE:
            if current in path:
                loop = " → ".join(str(p) for p in path[path.index(current) :] + [current])
                raise ConfigError(
                    f"{name} line {tracks[current].lines[0]}: the plate circuit loops ({loop}).",
                    "Each plate chain must end at 0, the model's frame.",
                )
            path.append(current)
            current = tracks[current].relative_to


# ---------------------------------------------------------------------------------------------
# Rotations at any age


def _interpolate(track: PlateTrack, ages: np.ndarray, table: Rotation) -> Rotation:
    """Slerp of the tabulated rotations at ``ages`` (already within the track's range)."""
    if len(track.ages) == 1:
        return Rotation.identity(len(ages))
    return Slerp(track.ages, table)(ages)


def _to_frame(
    model: RotationModel, plate: int, ages: np.ndarray, tables: Mapping[int, Rotation]
) -> Rotation:
    """R(plate→0, t) = R(F→0, t) · R(plate→F, t), ages within ``model.limit_ma(plate)``."""
    if plate == FRAME_PLATE:
        return Rotation.identity(len(ages))
    track = model.tracks[plate]
    own = _interpolate(track, ages, tables[plate])
    return _to_frame(model, track.relative_to, ages, tables) * own


def _tables(model: RotationModel) -> dict[int, Rotation]:
    return {p: t.rotations() for p, t in model.tracks.items()}


def relative_rotation(model: RotationModel, plate: int, ages: np.ndarray) -> Rotation:
    """Finite rotation of ``plate`` relative to its fixed plate at ``ages`` (in range)."""
    ages = np.atleast_1d(np.asarray(ages, dtype=float))
    track = model.tracks[plate]
    _refuse_out_of_range(ages, float(track.ages[-1]), plate)
    return _interpolate(track, ages, track.rotations())


def frame_rotation(model: RotationModel, plate: int, ages: np.ndarray) -> Rotation:
    """Finite rotation of ``plate`` to the model's frame at ``ages`` (in range)."""
    ages = np.atleast_1d(np.asarray(ages, dtype=float))
    _refuse_out_of_range(ages, model.limit_ma(plate), plate)
    return _to_frame(model, plate, ages, _tables(model))


def _refuse_out_of_range(ages: np.ndarray, limit: float, plate: int) -> None:
    if np.any(~(ages >= 0)) or np.any(ages > limit):
        raise ValueError(
            f"ages must lie in 0…{limit:g} Ma for plate {plate}; "
            "use reconstruct() for NaN-and-status handling"
        )


# ---------------------------------------------------------------------------------------------
# Reconstruction of records


class _Groups(NamedTuple):
    status: np.ndarray
    valid: np.ndarray  # records that can be reconstructed
    key_plate: np.ndarray  # per distinct (plate, age)
    key_age: np.ndarray
    inverse: np.ndarray  # valid record -> key index


def _group(plate_ids: np.ndarray, ages: np.ndarray, model: RotationModel) -> _Groups:
    n = len(ages)
    status = np.full(n, OK, dtype=object)
    plate = np.where(np.isfinite(plate_ids), plate_ids, -1).astype(np.int64)
    known = np.isin(plate, np.fromiter(model.tracks, dtype=np.int64, count=len(model.tracks)))
    status[~known] = UNKNOWN_PLATE
    status[plate < 0] = NO_PLATE
    no_age = known & ~(ages >= 0)
    status[no_age] = NO_AGE
    limits = {p: model.limit_ma(p) for p in model.tracks}
    limit = np.array([limits.get(int(p), np.nan) for p in np.unique(plate)])
    per = limit[np.searchsorted(np.unique(plate), plate)]
    status[known & ~no_age & (ages > per)] = BEYOND
    valid = status == OK
    # distinct (plate, age) pairs: each coded 1-D and combined into one int64 key, which
    # sorts several times faster than a row-wise unique over a 2-column array
    p_vals, p_code = np.unique(plate[valid], return_inverse=True)
    a_vals, a_code = np.unique(ages[valid], return_inverse=True)
    combined = p_code.astype(np.int64) * len(a_vals) + a_code
    key, inverse = np.unique(combined, return_inverse=True)
    return _Groups(
        status,
        valid,
        p_vals[key // len(a_vals)].astype(np.int64),
        a_vals[key % len(a_vals)],
        np.asarray(inverse).reshape(-1),
    )


def _key_quats(groups: _Groups, model: RotationModel, tables: Mapping[int, Rotation]) -> np.ndarray:
    """One rotation (as a quaternion) per distinct (plate, age); a loop over plates only."""
    quats = np.empty((len(groups.key_plate), 4))
    for plate in np.unique(groups.key_plate):
        sel = groups.key_plate == plate
        quats[sel] = _to_frame(model, int(plate), groups.key_age[sel], tables).as_quat()
    return quats


def _as_arrays(
    lat: np.ndarray, lon: np.ndarray, plate_ids: np.ndarray, ages: np.ndarray
) -> tuple[np.ndarray, ...]:
    arrays = tuple(np.atleast_1d(np.asarray(a, dtype=float)) for a in (lat, lon, plate_ids, ages))
    if len({len(a) for a in arrays}) != 1:
        raise ValueError("lat, lon, plate_ids and ages must have one length")
    return arrays


def reconstruct(
    lat: np.ndarray, lon: np.ndarray, plate_ids: np.ndarray, ages: np.ndarray, model: RotationModel
) -> Reconstruction:
    """Rotate present-day points on their plates to the model's frame at their ages.

    Vectorised: one rotation per distinct (plate, age), applied to all records at once.
    Records without a plate (−1 or NaN), on a plate the model lacks, without an age, or older
    than their circuit's oldest rotation get NaN and a status saying which.
    """
    lat, lon, plate_ids, ages = _as_arrays(lat, lon, plate_ids, ages)
    groups = _group(plate_ids, ages, model)
    plat = np.full(len(lat), np.nan)
    plon = np.full(len(lat), np.nan)
    if groups.valid.any():
        quats = _key_quats(groups, model, _tables(model))
        moved = Rotation.from_quat(quats[groups.inverse]).apply(
            unit_vectors(lat[groups.valid], lon[groups.valid])
        )
        plat[groups.valid], plon[groups.valid] = lat_lon(moved)
    return Reconstruction(plat, plon, groups.status)


def _displaced_poles(poles: np.ndarray, sigma: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Each pole moved by a 2-D normal offset (σ per component, radians) in its tangent plane."""
    z = np.array([0.0, 0.0, 1.0])
    e1 = np.cross(poles, z)
    polar = np.linalg.norm(e1, axis=1) < 1e-12
    e1[polar] = np.array([1.0, 0.0, 0.0])
    e1 /= np.linalg.norm(e1, axis=1)[:, None]
    e2 = np.cross(poles, e1)
    s = np.where(np.isfinite(sigma), sigma, 0.0)
    a = rng.normal(size=len(poles)) * s
    b = rng.normal(size=len(poles)) * s
    theta = np.hypot(a, b)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = (a[:, None] * e1 + b[:, None] * e2) / theta[:, None]
    u[theta == 0] = 0.0
    return poles * np.cos(theta)[:, None] + u * np.sin(theta)[:, None]


def paleolat_sigma(
    lat: np.ndarray,
    lon: np.ndarray,
    plate_ids: np.ndarray,
    ages: np.ndarray,
    model: RotationModel,
    n_draws: int = N_DRAWS,
    seed: int = SEED,
) -> np.ndarray:
    """1σ of paleolatitude (degrees) from the poles' cones, by Monte Carlo (module docstring).

    NaN where the record is not reconstructed or no row on its circuit gives a pole σ.
    """
    if n_draws < 2:
        raise ValueError("n_draws must be at least 2")
    lat, lon, plate_ids, ages = _as_arrays(lat, lon, plate_ids, ages)
    groups = _group(plate_ids, ages, model)
    out = np.full(len(lat), np.nan)
    if not groups.valid.any():
        return out
    has_sigma = {
        p: any(np.isfinite(model.tracks[q].sigma_rad).any() for q in model.circuit(p))
        for p in np.unique(groups.key_plate).tolist()
    }
    key_ok = np.array([has_sigma[int(p)] for p in groups.key_plate])
    rec_ok = key_ok[groups.inverse]
    if not rec_ok.any():
        return out
    rng = np.random.default_rng(seed)
    vecs = unit_vectors(lat[groups.valid], lon[groups.valid])
    shift, _ = lat_lon(
        Rotation.from_quat(_key_quats(groups, model, _tables(model))[groups.inverse]).apply(vecs)
    )
    total = np.zeros(len(vecs))  # sums of (draw − undisturbed) keep the variance exact
    total_sq = np.zeros(len(vecs))
    for _ in range(n_draws):
        tables = {
            p: t.rotations(_displaced_poles(t.poles, t.sigma_rad, rng))
            for p, t in model.tracks.items()
        }
        quats = _key_quats(groups, model, tables)
        drawn, _ = lat_lon(Rotation.from_quat(quats[groups.inverse]).apply(vecs))
        drawn -= shift
        total += drawn
        total_sq += drawn * drawn
    mean = total / n_draws
    var = np.maximum(total_sq - n_draws * mean * mean, 0.0) / (n_draws - 1)
    sig = np.sqrt(var)
    sig[~rec_ok] = np.nan
    out[groups.valid] = sig
    return out
