"""Steps, chains and columns: the three things every derive stage writes.

A :class:`Step` says what was done to a value, with which parameters, on whose authority
and how much. When the value after the step is an affine map of the value before it
(identity, offset, linear scale, a correction that sets the value), ``maps`` stores that map
as (slope, intercept), so ``explain`` shows the value after every step from the stored step
itself. A chain is a list of steps, stored once under its hash; a record names its chain.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pyarrow as pa

IDENTITY = (1.0, 0.0)


@dataclass(frozen=True)
class Step:
    """One step of a chain (see the module docstring)."""

    step: str
    method: str
    source: str
    parameters: dict[str, Any] = field(default_factory=dict)
    size_permil: float | None = None  # largest absolute change this δ step made (‰)
    flags: tuple[str, ...] = ()
    # value after = slope × value before + intercept; None: not a map of the value alone
    # (an age model, a drift correction that depends on the run position)
    maps: tuple[float, float] | None = None
    # further named parts of the record of this step, kept at the top level of its JSON
    # (an age model's list of ties)
    extra: dict[str, Any] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        """The step as stored in a chain's JSON."""
        out: dict[str, Any] = {
            **self.extra,
            "step": self.step,
            "method": self.method,
            "source": self.source,
            "parameters": self.parameters,
            "flags": list(self.flags),
            "maps": None if self.maps is None else [float(self.maps[0]), float(self.maps[1])],
        }
        if self.size_permil is not None:
            out["size_permil"] = self.size_permil
        return out

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Step:
        """A step from its stored form (a chart conversion built in ``schemas``, say)."""
        known = {"step", "method", "source", "parameters", "size_permil", "flags", "maps"}
        maps = d.get("maps")
        return cls(
            d["step"],
            d["method"],
            d["source"],
            dict(d.get("parameters") or {}),
            d.get("size_permil"),
            tuple(d.get("flags") or ()),
            None if maps is None else (float(maps[0]), float(maps[1])),
            {k: v for k, v in d.items() if k not in known},
        )

    def flagged(self, *flags: str) -> Step:
        """The same step with more flags."""
        return replace(self, flags=(*self.flags, *flags))


def value_after(step: dict[str, Any], value: float | None) -> float | None:
    """The value after a stored step, from its ``maps`` (None when the step has none)."""
    maps = step.get("maps")
    if value is None or maps is None:
        return None
    slope, intercept = maps
    return float(slope * value + intercept)


def chain_id(steps: list[dict[str, Any]]) -> tuple[str, str]:
    """(id, JSON text) of a chain: the id is the first 16 hex digits of its SHA-256."""
    text = json.dumps(steps, sort_keys=True, ensure_ascii=False)
    return hashlib.sha256(text.encode()).hexdigest()[:16], text


def add_chain(chains: dict[str, str], steps: list[Step]) -> str:
    """Record a chain in ``chains`` (id -> JSON) and return its id."""
    cid, text = chain_id([s.as_dict() for s in steps])
    chains[cid] = text
    return cid


def set_column(table: pa.Table, name: str, values: pa.Array) -> pa.Table:
    """Replace a column of ``table`` by name, cast to the column's stored type."""
    i = table.column_names.index(name)
    return table.set_column(i, table.schema.field(name), values.cast(table.schema.field(name).type))
