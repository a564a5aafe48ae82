"""Run the README's tour and compare its output with the README, or rewrite the README's
output blocks from the run, so the tour always shows real, current output; the same for the
README's list of mapping fields, written from the field registry (``schemas/fields.py``).

    python tools/readme_tour.py            # compare; exit 1 and a diff if the README drifted
    python tools/readme_tour.py --write    # rewrite the tour's output from a fresh run
    python tools/readme_tour.py --fields   # compare or (with --write) rewrite only the fields

A tour block is a ```text block right after a ``<!-- tour -->`` line. Its lines starting
with ``$ `` are commands, the lines after each its output (stdout and stderr as a terminal
would interleave them, piped). Every tour block runs in order, each command with bash in one
fresh folder holding a copy of ``demo_compilation/`` and nothing else, with the installed
``strata13`` first on PATH. A command's exit code is not compared; its output is.

What the README shows, and what the comparison forgives (the normalisation rules; the same
in DEVELOPERS.md):

1. The run's folder is written as ``~/strata13`` (the repository root the README runs from).
2. A line longer than 150 characters is cut to 149 and ``…``.
3. An output whose last shown line is ``… (N more lines)`` shows its first lines only; the
   rewrite keeps as many as the README shows and recounts N, the comparison checks both.
   A command the README shows without output (a new one) gets its first 10 lines and the
   count when its output is longer than 15 lines; any other output is shown whole.
4. Compared, not rewritten: SHA-256 digests (``sha256`` and 16 or more hex digits; the
   bytes of figures depend on the plotting library and its fonts), durations (``12.3 s``,
   ``45 ms``) and the strata13 version (``strata13 0.1.0``) are replaced by placeholders on
   both sides.
"""

from __future__ import annotations

import argparse
import difflib
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"
MARK = "<!-- tour -->"
SHOWN_AS = "~/strata13"
WIDTH = 150
LONG, SHORT = 15, 10
MORE = re.compile(r"^… \((\d+) more lines?\)$")
FORGIVEN = [
    (re.compile(r"(sha256[ :=]+)[0-9a-f]{16,64}…?"), r"\1<sha256>"),
    (re.compile(r"\b\d+(\.\d+)? ?(s|ms)\b(?![\w-])"), "<duration>"),
    (re.compile(r"\bstrata13 \d+\.\d+\.\d+\S*"), "strata13 <version>"),
]


@dataclass
class Step:
    """One ``$ command`` of a tour block and the output the README shows for it."""

    command: str
    shown: list[str]

    @property
    def keep(self) -> int | None:
        """How many output lines the README shows when it shortens the output."""
        if self.shown and MORE.match(self.shown[-1]):
            return len(self.shown) - 1
        return None


@dataclass
class Block:
    start: int  # index of the first line inside the fence
    end: int  # index of the closing fence
    steps: list[Step]


def blocks(text: str) -> list[Block]:
    """The tour blocks of a README, in order."""
    lines = text.split("\n")
    found = []
    for i, line in enumerate(lines):
        if line.strip() != MARK:
            continue
        if i + 1 >= len(lines) or not lines[i + 1].startswith("```"):
            raise SystemExit(f"README line {i + 1}: {MARK} must stand right before a ``` fence")
        start = i + 2
        end = next(k for k in range(start, len(lines)) if lines[k].startswith("```"))
        steps: list[Step] = []
        for line in lines[start:end]:
            if line.startswith("$ "):
                steps.append(Step(line[2:], []))
            elif steps:
                steps[-1].shown.append(line)
            else:
                raise SystemExit(f"README line {start + 1}: a tour block starts with a $ line")
        found.append(Block(start, end, steps))
    return found


def cut(line: str) -> str:
    return line if len(line) <= WIDTH else line[: WIDTH - 1] + "…"


def shown_output(raw: str, folder: Path, keep: int | None) -> list[str]:
    """A command's output as the README shows it (rules 1–3)."""
    text = raw.replace(str(folder.resolve()), SHOWN_AS).replace(str(folder), SHOWN_AS)
    lines = [cut(line.rstrip()) for line in text.rstrip("\n").split("\n")] if text.strip() else []
    if keep is not None and len(lines) > keep:
        rest = len(lines) - keep
        lines = [*lines[:keep], f"… ({rest} more line{'s' if rest != 1 else ''})"]
    return lines


def forgiven(lines: list[str]) -> list[str]:
    """Rule 4: what the comparison does not look at."""
    out = []
    for line in lines:
        for pattern, placeholder in FORGIVEN:
            line = pattern.sub(placeholder, line)
        out.append(line)
    return out


def environment() -> dict[str, str]:
    env = dict(os.environ)
    env["PATH"] = str(Path(sys.executable).parent) + os.pathsep + env.get("PATH", "")
    env["PYTHONUNBUFFERED"] = "1"  # stdout and stderr interleave as written
    env["COLUMNS"] = "200"
    for name in ("STRATA13_STORE", "FORCE_COLOR"):
        env.pop(name, None)
    env["NO_COLOR"] = "1"
    return env


def run_tour(text: str, folder: Path, times: bool = False) -> list[list[list[str]]]:
    """Every tour block's commands run in ``folder``: the output of each, as shown."""
    shutil.copytree(ROOT / "demo_compilation", folder / "demo_compilation")
    env = environment()
    results = []
    for block in blocks(text):
        outs = []
        for step in block.steps:
            if step.command.startswith("#"):
                outs.append(step.shown)  # a comment line to the reader
                continue
            began = time.perf_counter()
            done = subprocess.run(
                ["bash", "-c", step.command],
                cwd=folder,
                env=env,
                stdout=subprocess.PIPE,
                stderr=subprocess.STDOUT,
                stdin=subprocess.DEVNULL,
                text=True,
                timeout=300,
            )
            if times:
                print(
                    f"{time.perf_counter() - began:6.1f} s  $ {step.command[:90]}", file=sys.stderr
                )
            outs.append(shown_output(done.stdout, folder, step.keep))
        results.append(outs)
    return results


def differences(text: str, results: list[list[list[str]]]) -> list[str]:
    """A unified diff per command whose output differs from the README's (after rule 4)."""
    found = []
    for block, outs in zip(blocks(text), results, strict=True):
        for step, out in zip(block.steps, outs, strict=True):
            if forgiven(step.shown) != forgiven(out):
                diff = difflib.unified_diff(step.shown, out, "README", "real run", lineterm="", n=1)
                found.append(f"$ {step.command}\n" + "\n".join(diff))
    return found


def rewritten(text: str, results: list[list[list[str]]]) -> str:
    """The README with every tour block's output replaced by the run's."""
    lines = text.split("\n")
    for block, outs in reversed(list(zip(blocks(text), results, strict=True))):
        body = []
        for step, out in zip(block.steps, outs, strict=True):
            if step.keep is None and not step.shown and len(out) > LONG:
                out = [*out[:SHORT], f"… ({len(out) - SHORT} more lines)"]
            body += [f"$ {step.command}", *out]
        lines[block.start : block.end] = body
    return "\n".join(lines)


FIELDS_BEGIN = "<!-- fields: written by tools/readme_tour.py from schemas/fields.py -->"
FIELDS_END = "<!-- /fields -->"


def field_table() -> str:
    """The README's table of every field a mapping may feed, from the field registry."""
    from strata13.schemas.fields import (
        BASIS_KEYS,
        CONC_BASES,
        DELTA_SCALES,
        FIELDS,
        SCALE_KEYS,
        UNITS,
    )
    from strata13.schemas.vocabularies import vocabulary

    def cell(text: str) -> str:
        return text.replace("|", "\\|")

    rows = [
        "| field | stored as | units accepted | plausible range | terms | what |",
        "|---|---|---|---|---|---|",
    ]
    for f in FIELDS:
        units = ", ".join(UNITS[f.unit_kind]) if f.unit_kind else ""
        span = f"{f.plausible[0]:g} … {f.plausible[1]:g}" if f.plausible else ""
        terms = ", ".join(vocabulary(f.vocab).terms) if f.vocab else ""
        cells = [f"`{f.name}`", f"`{f.stored}`", cell(units), span, cell(terms), cell(f.doc)]
        rows.append("| " + " | ".join(cells) + " |")
    for key, delta in SCALE_KEYS.items():
        scales = ", ".join(DELTA_SCALES[delta])
        rows.append(f"| `{key}` | `{key}` |  |  | {scales} | reference scale of `{delta}` |")
    for key, conc in BASIS_KEYS.items():
        rows.append(f"| `{key}` | `{key}` |  |  | {', '.join(CONC_BASES)} | basis of `{conc}` |")
    return "\n".join(rows)


def with_fields(text: str) -> str:
    """The README with its fields table rewritten."""
    if FIELDS_BEGIN not in text or FIELDS_END not in text:
        raise SystemExit(f"README: the fields table needs {FIELDS_BEGIN} … {FIELDS_END}")
    head, rest = text.split(FIELDS_BEGIN, 1)
    _, tail = rest.split(FIELDS_END, 1)
    return f"{head}{FIELDS_BEGIN}\n{field_table()}\n{FIELDS_END}{tail}"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--write", action="store_true", help="rewrite the README's output")
    parser.add_argument("--times", action="store_true", help="say how long each command took")
    parser.add_argument("--fields", action="store_true", help="only the fields table")
    args = parser.parse_args(argv)
    text = README.read_text(encoding="utf-8")
    if args.fields:
        if args.write:
            README.write_text(with_fields(text), encoding="utf-8")
            return 0
        return 0 if with_fields(text) == text else 1
    with tempfile.TemporaryDirectory(prefix="strata13-tour-") as tmp:
        results = run_tour(text, Path(tmp), times=args.times)
    if args.write:
        README.write_text(with_fields(rewritten(text, results)), encoding="utf-8")
        print(f"rewrote the output of {sum(len(r) for r in results)} tour commands in {README}")
        return 0
    found = differences(text, results)
    for d in found:
        print(d + "\n")
    return 1 if found else 0


if __name__ == "__main__":
    raise SystemExit(main())
