"""The FILTERS options, declared once and shared by every command that filters records.

A command takes them by declaring ``filters: FilterArgs = NO_FILTERS`` and decorating itself
with :func:`filter_options`: the decorator puts the ten options (``--interval``,
``--time-scale``, ``--region``, ``--frame``, ``--paleolat``, ``--lithology``,
``--component``, ``--source``, ``--screened``, ``--keep-duplicates``) in that parameter's
place in the command's signature, so they appear in its ``--help``, and hands the command
one :class:`FilterArgs` holding what was given. ``FilterArgs.build`` checks them against the
store and returns the library's ``Filters``.
"""

from __future__ import annotations

import functools
import inspect
import typing
from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Annotated, Any

import typer

if TYPE_CHECKING:
    from strata13.compile.api import Filters, Store

IntervalOpt = Annotated[
    str | None,
    typer.Option(
        "--interval",
        help="Time bin: a stage, series or period name, NAME..NAME, or 'A-B' in Ma (either order).",
        show_default=False,
    ),
]
TimeScaleOpt = Annotated[
    str | None,
    typer.Option(
        "--time-scale",
        help="Chart the --interval is read on (default: the store's).",
        show_default=False,
    ),
]
RegionOpt = Annotated[
    str | None,
    typer.Option(
        "--region",
        help="A region name of the store, a GeoJSON file, or bbox:W,S,E,N.",
        show_default=False,
    ),
]
FrameOpt = Annotated[str, typer.Option("--frame", help="present | paleo: where --region applies.")]
LithologyOpt = Annotated[
    list[str] | None, typer.Option("--lithology", help="Repeatable.", show_default=False)
]
ComponentOpt = Annotated[
    list[str] | None, typer.Option("--component", help="Repeatable.", show_default=False)
]
SourceOpt = Annotated[
    list[str] | None, typer.Option("--source", help="Source id; repeatable.", show_default=False)
]
ScreenedOpt = Annotated[
    str,
    typer.Option(
        "--screened",
        help="Screen states to keep: pass, warn, fail, untested (comma list) or all.",
    ),
]
PaleolatOpt = Annotated[
    str | None,
    typer.Option(
        "--paleolat",
        help="Paleolatitude range MIN:MAX in degrees (negative values parse: -30:30).",
        show_default=False,
    ),
]
KeepDupOpt = Annotated[
    bool,
    typer.Option(
        "--keep-duplicates",
        help="Keep both records of confirmed duplicate pairs (default: counted once).",
    ),
]


@dataclass(frozen=True)
class FilterArgs:
    """The FILTERS options as given on the command line (defaults: no filter)."""

    interval: str | None = None
    time_scale: str | None = None
    region: str | None = None
    frame: str = "present"
    lithology: tuple[str, ...] = ()
    component: tuple[str, ...] = ()
    source: tuple[str, ...] = ()
    screened: str = "all"
    keep_duplicates: bool = False
    paleolat: str | None = None

    def given(self) -> dict[str, object]:
        """The options as a command line names them (defaults as None, False or [])."""
        return {
            "interval": self.interval,
            "time_scale": self.time_scale,
            "region": self.region,
            "frame": self.frame if self.frame != "present" else None,
            "lithology": list(self.lithology),
            "component": list(self.component),
            "source": list(self.source),
            "screened": self.screened,
            "keep_duplicates": self.keep_duplicates,
            "paleolat": self.paleolat,
        }

    def build(self, store: Store) -> Filters:
        """The library's Filters for these options on ``store`` (validated against its
        chart, regions, sources and the vocabularies)."""
        from strata13.cli import render
        from strata13.compile import api

        from strata13.errors import OptionError

        for flag, given in (
            ("--interval", self.interval),
            ("--region", self.region),
            ("--paleolat", self.paleolat),
            ("--time-scale", self.time_scale),
        ):
            if given is not None and not given.strip():  # an empty value is not "no filter"
                raise OptionError(f"{flag} is empty.", f"Give a value, or leave {flag} out.")
        if self.frame not in ("present", "paleo"):
            raise OptionError(
                f"--frame {self.frame!r} is not present or paleo.",
                "Use --frame present (today's coordinates) or --frame paleo.",
            )
        api.screen_states(self.screened)  # refuses an unknown state with a hint
        band = api.parse_paleolat(self.paleolat) if self.paleolat else None
        if band is not None or self.frame == "paleo":
            frame_kind = store.settings().get("rotation_frame")
            if frame_kind is None:
                render.note("the store has no rotation model: no record has a paleo-position yet")
            elif band is not None and frame_kind != "paleomagnetic":
                render.note(
                    f"--paleolat on a {frame_kind}-frame model: paleolatitudes in a "
                    "mantle frame are not those climate belts follow"
                )
        if self.time_scale is not None and not self.interval:
            raise OptionError(
                "--time-scale names the chart of --interval, which is not given.",
                "Add --interval NAME, or leave out --time-scale.",
            )
        iv = api.interval(store, self.interval, self.time_scale) if self.interval else None
        for note in iv.notes if iv else []:
            render.note(f"--interval: {note}")
        return api.Filters(
            interval=(iv.younger_ma, iv.older_ma) if iv else None,
            interval_info=iv.describe() if iv else None,
            region=api.region(store, self.region) if self.region else None,
            frame=self.frame,
            lithology=api.check_vocab(list(self.lithology), "lithology", "--lithology"),
            component=api.check_vocab(list(self.component), "component", "--component"),
            source=api.check_sources(store, list(self.source)),
            screened=self.screened,
            keep_duplicates=self.keep_duplicates,
            paleolat=band,
        )


NO_FILTERS = FilterArgs()
# syntheses keep failed and untested records out unless asked (the library's own default,
# repeated here as a literal so --help needs no import of the library)
SYNTHESIS_SCREENED = "pass,warn"

# the options in the order --help lists them, each with its declaration and default
_OPTIONS: list[tuple[str, Any, Any]] = [
    ("interval", IntervalOpt, None),
    ("time_scale", TimeScaleOpt, None),
    ("region", RegionOpt, None),
    ("frame", FrameOpt, "present"),
    ("lithology", LithologyOpt, None),
    ("component", ComponentOpt, None),
    ("source", SourceOpt, None),
    ("screened", ScreenedOpt, "all"),
    ("keep_duplicates", KeepDupOpt, False),
    ("paleolat", PaleolatOpt, None),
]
assert [n for n, _, _ in _OPTIONS] == [f.name for f in fields(FilterArgs)]


def filter_options(func: Callable[..., None] | None = None, *, screened: str = "all") -> Any:
    """Give a command the FILTERS options in place of its ``filters`` parameter.

    ``@filter_options`` keeps every record by default; a synthesis declares
    ``@filter_options(screened=SYNTHESIS_SCREENED)`` so failed and untested records stay
    out unless the user asks for them.
    """
    if func is None:
        return functools.partial(filter_options, screened=screened)
    sig = inspect.signature(func)
    hints = typing.get_type_hints(func, include_extras=True)  # the Annotated declarations
    params = [
        p.replace(annotation=hints.get(p.name, p.annotation)) for p in sig.parameters.values()
    ]
    names = [p.name for p in params]
    if "filters" not in names:
        raise TypeError(f"{func.__name__} has no 'filters' parameter for the FILTERS options")
    at = names.index("filters")
    defaults = {n: d for n, _, d in _OPTIONS} | {"screened": screened}
    added = [
        inspect.Parameter(n, inspect.Parameter.KEYWORD_ONLY, default=defaults[n], annotation=a)
        for n, a, _ in _OPTIONS
    ]
    rest = [p.replace(kind=inspect.Parameter.KEYWORD_ONLY) for p in params[:at] + params[at + 1 :]]
    new_params = rest[:at] + added + rest[at:]

    @functools.wraps(func)
    def command(**kwargs: Any) -> None:
        given = {n: kwargs.pop(n) for n, _, _ in _OPTIONS}
        for n in ("lithology", "component", "source"):
            given[n] = tuple(given[n] or ())
        func(filters=FilterArgs(**given), **kwargs)

    annotations = {k: v for k, v in hints.items() if k != "filters"}
    annotations.update({n: a for n, a, _ in _OPTIONS})
    command.__annotations__ = annotations
    command.__signature__ = sig.replace(parameters=new_params)  # type: ignore[attr-defined]
    return command
