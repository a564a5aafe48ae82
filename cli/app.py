"""The strata13 command line: one module per command; this module wires them and maps
errors to exit codes (0 done, 1 refused, 2 wrong instructions, 130 interrupted)."""

from __future__ import annotations

import sys
from typing import Annotated, Any

import typer
from strata13.cli import (
    chrono,
    compact,
    demo,
    explain,
    export,
    ingest,
    init,
    integrity,
    listing,
    move,
    propose,
    query,
    reharmonise,
    scales,
    screen,
    synthesis,
)

from strata13 import __version__

app = typer.Typer(
    name="strata13",
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    help="A local compilation database for carbonate carbon-isotope chemostratigraphy.",
    context_settings={"help_option_names": ["-h", "--help"]},
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"strata13 {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Show the version.")
    ] = False,
    debug: Annotated[bool, typer.Option("--debug", help="Show tracebacks.")] = False,
) -> None:
    """strata13: ingest, harmonise, query and export carbonate δ13C compilations."""


app.command("demo")(demo.demo)
app.command("init")(init.init)
app.command("ingest")(ingest.ingest)
app.command("propose-map")(propose.propose_map)
app.command("sources")(listing.sources)
app.command("history")(listing.history)
app.command("query")(query.query)
app.command("sql")(query.sql)
app.command("export")(export.export)
app.command("explain")(explain.explain)
app.command("scales")(scales.scales)
app.command("reharmonise")(reharmonise.reharmonise)
app.command("stages")(chrono.stages)
app.command("redate")(chrono.redate)
app.command("agemodel")(chrono.agemodel)
app.command("replace-rotations")(chrono.replace_rotations)
app.command("screen")(screen.screen)
app.command("curve")(synthesis.curve)
app.command("excursion")(synthesis.excursion)
app.command("correct", context_settings={"ignore_unknown_options": True})(integrity.correct)
app.command("corrections")(integrity.corrections)
app.command("overlaps")(integrity.overlaps)
app.command("coverage")(integrity.coverage)
app.command("compact")(compact.compact)
app.command("move-catalog")(move.move_catalog)


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the app and turn every outcome into one exit code.

    A Ctrl-C anywhere — in a command, in DuckDB, or while the result is being printed —
    ends with exit 130 and one line on stderr, never a traceback.
    """
    import signal
    import threading

    seen = threading.Event()

    def library() -> Any:
        # the API is imported by the commands, not here: --help stays quick
        return sys.modules.get("strata13.compile.api")

    def on_sigint(signum: int, frame: object) -> None:
        seen.set()
        api = library()
        if api is not None:  # the library's long loops stop at their next safe point
            api.interrupt()
        raise KeyboardInterrupt

    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, on_sigint)
    try:
        code = _run(list(sys.argv[1:] if argv is None else argv))
        api = library()
        pressed = seen.is_set() or (api is not None and api.interrupted())
        if pressed and code != 130:  # swallowed by a library, but the user asked
            code = _interrupted()
    except KeyboardInterrupt:
        code = _interrupted()
    sys.exit(code)


def _interrupted(message: str = "") -> int:
    """Exit 130 with the truth: the version this process committed, or that it wrote
    nothing (the library keeps that record, ``compile/interrupts.py``)."""
    try:
        sys.stderr.write(f"error: {_verdict()}\n")
        sys.stderr.flush()
    except (KeyboardInterrupt, OSError):
        pass
    return 130


def _verdict() -> str:
    lib = sys.modules.get("strata13.compile.api")  # loaded once a command ran
    return str(lib.interrupt_verdict()) if lib is not None else "interrupted: nothing was written"


def _is_duckdb_interrupt(exc: BaseException) -> bool:
    """DuckDB turns SIGINT during a query into its own exception."""
    return type(exc).__name__ == "InterruptException" or (
        isinstance(exc, RuntimeError) and "interrupted" in str(exc).lower()
    )


def _run(args: list[str]) -> int:
    try:  # recent typer releases carry their own copy of click
        from typer._click import exceptions as cx
    except ImportError:  # pragma: no cover - older typer with click as a dependency
        from click import exceptions as cx  # type: ignore[no-redef]

    from strata13.cli import render

    from strata13.errors import Interrupted, Strata13Error

    debug = "--debug" in args
    args = [a for a in args if a != "--debug"]  # accepted anywhere on the line
    command = typer.main.get_command(app)
    try:
        rv = command.main(args=args, prog_name="strata13", standalone_mode=False)
        if rv == 130:  # typer turns Ctrl-C into a return value here
            return _interrupted()
        return rv if isinstance(rv, int) else 0
    except typer.Exit as exc:
        if exc.exit_code == 130:  # typer turns Ctrl-C into Exit(130); say what happened
            return _interrupted()
        return exc.exit_code
    except cx.UsageError as exc:
        if isinstance(exc, getattr(cx, "NoArgsIsHelpError", ())):
            sys.stderr.write((exc.ctx.get_help() if exc.ctx else "") + "\n")
            return 0 if not args else 2
        usage = exc.ctx.get_usage() if exc.ctx else ""
        render.error(
            exc.format_message(),
            (usage.replace("\n", " ") + "  (--help for more)") if usage else "Run strata13 --help.",
        )
        return 2
    except (typer.Abort, KeyboardInterrupt, Interrupted):
        return _interrupted()
    except Strata13Error as exc:
        if debug:
            import traceback

            traceback.print_exc()
        render.error(exc.message, exc.hint)
        return exc.exit_code
    except cx.ClickException as exc:
        render.error(exc.format_message(), "")
        return exc.exit_code if exc.exit_code in (1, 2) else 2
    except Exception as exc:  # an internal fault: one line, details with --debug
        if _is_duckdb_interrupt(exc):
            return _interrupted()
        if debug:
            raise
        render.error(
            f"internal error: {type(exc).__name__}: {exc}",
            "Run again with --debug for the traceback, and report it.",
        )
        return 1
