"""Options shared by several commands, defined once (the FILTERS options: cli/filters.py)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

StoreOpt = Annotated[
    Path | None,
    typer.Option(
        "--store",
        help="Store folder (default: $STRATA13_STORE or ./compilation).",
        show_default=False,
    ),
]
FormatOpt = Annotated[str, typer.Option("--format", help="table | csv | json | parquet.")]
# every figure command takes the same width option (compile/plotting/style.py WIDTHS_MM)
WidthOpt = Annotated[
    str,
    typer.Option(
        "--width",
        help="Figure width for a journal column: single (about 85 mm) or double (about "
        "175 mm), common practice; type sizes follow.",
    ),
]
OutOpt = Annotated[
    Path | None,
    typer.Option("--out", help="Write to this file instead of stdout.", show_default=False),
]
ALL_FORMATS = ("table", "csv", "json", "parquet")


def check_format(
    fmt: str, out: Path | None, store: Path | None = None, allowed: tuple[str, ...] = ALL_FORMATS
) -> None:
    """Refuse an unknown format, parquet to a terminal, and an --out that is unsafe."""
    from strata13.compile import api

    from strata13.errors import OptionError

    if fmt not in allowed:
        raise OptionError(
            f"--format {fmt!r} is not one of {', '.join(allowed)}.", "Example: --format csv"
        )
    if fmt == "parquet" and out is None:
        raise OptionError("--format parquet needs --out FILE.", "Parquet is binary; name a file.")
    if out is not None:
        api.output_file(out, option="--out", stores=[store] if store else [])


def command_line(
    command: str,
    store: Path,
    options: dict[str, object],
    pinned: tuple[str, ...] = (),
) -> str:
    """The command line that repeats a run, for its manifest: the store by folder name,
    ``--out DIR`` (so the manifest does not depend on where it was written), the
    ``pinned`` arguments, then every option given (None, False and [] are left out)."""
    import shlex

    args = ["strata13", command, "--store", store.name, "--out", "DIR", *pinned]
    for name, value in options.items():
        flag = "--" + name.replace("_", "-")
        if value is None or value is False or value == []:
            continue
        if value is True:
            args.append(flag)
        elif isinstance(value, list):
            for v in value:
                args += [flag, str(v)]
        else:
            args += [flag, str(value)]
    return shlex.join(args)
