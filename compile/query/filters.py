"""Filters -> SQL with bound parameters -> records, then the exact polygon test.

``Filters`` is the one structure every command's FILTERS options become. ``where()`` turns
it into a WHERE clause over the ``records`` view with ``?`` parameters only (no user text
ever enters the SQL string); a region adds a bounding-box predicate there and an exact
shapely test afterwards. The filter is recorded in export manifests via ``describe()``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from strata13.compile.query.regions import Region

from strata13.errors import OptionError

if TYPE_CHECKING:
    import pyarrow as pa

SCREENED = ("pass", "warn", "fail", "untested", "all")  # the stored states, and all
# what syntheses (curve, excursion, coverage) use unless told otherwise: records that
# failed a screen or were never tested stay out of a synthesis by default (common practice
# is to publish curves from screened data; the user's judgement decides, --screened all)
SYNTHESIS_SCREENED = "pass,warn"
_RANGE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*-\s*(\d+(?:\.\d+)?)\s*$")


def parse_interval(text: str) -> tuple[float, float]:
    """``'190-180'`` or ``'180-190'`` -> (180.0, 190.0) Ma.

    Stage, series and period names are resolved by the time-scale tables; until a store
    has them, only numeric ranges are accepted.
    """
    m = _RANGE.match(text)
    if not m:
        raise OptionError(
            f"--interval {text!r} is not a range in Ma like 185-180.",
            "Give two ages in Ma separated by '-', in either order; stage names "
            "need the time-scale tables.",
        )
    a, b = float(m.group(1)), float(m.group(2))
    return (min(a, b), max(a, b))


@dataclass
class Filters:
    interval: tuple[float, float] | None = None
    region: Region | None = None
    frame: str = "present"
    lithology: list[str] = field(default_factory=list)
    component: list[str] = field(default_factory=list)
    source: list[str] = field(default_factory=list)
    screened: str = "all"
    interval_info: dict[str, Any] | None = None  # how --interval was read (for manifests)
    keep_duplicates: bool = False  # True: keep records a confirmed duplicate pair drops
    paleolat: tuple[float, float] | None = None  # (min, max) degrees

    def where(self) -> tuple[str, list[Any]]:
        parts: list[str] = []
        params: list[Any] = []
        if self.interval is not None:
            parts.append("age_ma BETWEEN ? AND ?")
            params += list(self.interval)
        if self.paleolat is not None:
            parts.append("paleolat BETWEEN ? AND ?")
            params += list(self.paleolat)
        if self.region is not None:
            if self.frame == "paleo":
                sql, p = self.region.sql("paleolon", "paleolat")
            else:
                sql, p = self.region.sql()
            parts.append(sql)
            params += p
        for column, values in (
            ("lithology", self.lithology),
            ("component", self.component),
            ("source_id", self.source),
        ):
            if values:
                parts.append(f"{column} IN ({', '.join('?' for _ in values)})")
                params += list(values)
        states = screen_states(self.screened)
        if states is not None:
            parts.append(f"screen IN ({', '.join('?' for _ in states)})")
            params += list(states)
        if not self.keep_duplicates:  # counted once: the dropped side of confirmed pairs
            parts.append(
                "record_id NOT IN (SELECT drop_record_id FROM duplicates WHERE "
                "decision = 'confirm' AND drop_record_id IS NOT NULL)"
            )
        return (" AND ".join(parts) if parts else "TRUE"), params

    def describe(self) -> dict[str, Any]:
        """The filter as plain data, for manifests and messages."""
        return {
            "interval_ma": list(self.interval) if self.interval else None,
            "interval": self.interval_info,
            "region": self.region.describe() if self.region else None,
            "frame": self.frame,
            "lithology": self.lithology,
            "component": self.component,
            "source": self.source,
            "screened": self.screened,
            "keep_duplicates": self.keep_duplicates,
            "paleolat": list(self.paleolat) if self.paleolat else None,
        }


def screen_states(text: str, option: str = "--screened") -> tuple[str, ...] | None:
    """The screen states a ``--screened`` value keeps ("pass,warn" -> ("pass", "warn"));
    None for all. Refuses a state that is not one of SCREENED."""
    states = tuple(dict.fromkeys(t.strip() for t in str(text).split(",") if t.strip()))
    bad = [t for t in states if t not in SCREENED]
    if bad or not states:
        raise OptionError(
            f"{option} {text!r} is not one of {', '.join(SCREENED)} (or a comma list).",
            f"Example: {option} pass,warn (see `strata13 screen --summary`).",
        )
    return None if "all" in states else states


def screen_left_out(table: pa.Table, filters: Filters) -> tuple[pa.Table, dict[str, int]]:
    """Records of ``table`` (matched with every filter but the screen) that the screen
    filter keeps, and how many of each screen state it leaves out."""
    import pyarrow as pa
    import pyarrow.compute as pc

    states = screen_states(filters.screened)
    if states is None or not table.num_rows:
        return table, {}
    screen = pc.fill_null(table.column("screen"), "untested")
    keep = pc.is_in(screen, value_set=pa.array(states, pa.string()))
    out: dict[str, int] = {}
    for state in screen.filter(pc.invert(keep)).to_pylist():
        out[state] = out.get(state, 0) + 1
    return table.filter(keep), dict(sorted(out.items()))


def parse_paleolat(text: str) -> tuple[float, float]:
    """``'-30:30'`` -> (-30.0, 30.0) degrees (either order; both within −90…90)."""
    m = re.match(r"^\s*([+-]?\d+(?:\.\d+)?)\s*:\s*([+-]?\d+(?:\.\d+)?)\s*$", text.replace("−", "-"))
    if not m:
        raise OptionError(
            f"--paleolat {text!r} is not MIN:MAX in degrees.", "Example: --paleolat -30:30"
        )
    a, b = sorted((float(m.group(1)), float(m.group(2))))
    if a < -90 or b > 90:
        raise OptionError(f"--paleolat {text!r} leaves −90…90.", "Latitudes lie in −90…90.")
    return a, b


def check_vocab(values: list[str], vocab: str, option: str) -> list[str]:
    """Canonical vocabulary terms for filter values, with a "did you mean" on a miss."""
    from strata13.schemas.vocabularies import vocabulary

    voc = vocabulary(vocab)
    out = []
    for v in values:
        term = voc.resolve(v)
        if term is None:
            sug = voc.suggest(v)
            raise OptionError(
                f"{option} {v!r} is not a known {vocab}."
                + (f" Did you mean {sug!r}?" if sug else ""),
                f"Known: {', '.join(voc.terms)}.",
            )
        out.append(term)
    return out


READING_ORDER = "source_id, section_id, position_m, top_m, sample_id, replicate, record_id"


def run(
    con: Any, filters: Filters, columns: list[str] | None = None, order: str = READING_ORDER
) -> pa.Table:
    """Records matching ``filters`` as an Arrow table: by default in reading order (source,
    section, position); exports ask for ``order="record_id"``, which never changes."""
    import pyarrow as pa

    where, params = filters.where()
    cols = ", ".join(f'"{c}"' for c in columns) if columns else "*"
    table = con.execute(
        f"SELECT {cols} FROM records WHERE {where} ORDER BY {order}", params
    ).to_arrow_table()
    if filters.region is not None and table.num_rows:
        lon_c, lat_c = ("paleolon", "paleolat") if filters.frame == "paleo" else ("lon", "lat")
        keep = filters.region.contains(
            table.column(lon_c).to_numpy(zero_copy_only=False),
            table.column(lat_c).to_numpy(zero_copy_only=False),
        )
        table = table.filter(pa.array(keep))
    return table
