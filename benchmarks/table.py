"""The one result table every benchmark prints: case, size, ours, baseline, ratio, target,
verdict — used by run.py and by each standalone case script."""

from __future__ import annotations

from collections.abc import Sequence

HEAD = ("case", "size", "ours", "baseline", "ratio", "target", "verdict")


def print_table(rows: Sequence[Sequence[str]]) -> None:
    """Print the rows under the header as a plain fixed-width table."""
    cells = [list(HEAD), *[[str(c) for c in r] for r in rows]]
    widths = [max(len(c[k]) for c in cells) for k in range(len(HEAD))]
    for n, line in enumerate(cells):
        print("  ".join(c.ljust(w) for c, w in zip(line, widths, strict=True)).rstrip())
        if n == 0:
            print("  ".join("-" * w for w in widths))


def report(rows: Sequence[Sequence[str]], notes: Sequence[str]) -> int:
    """Table, then notes; exit status 0 when every verdict is PASS, else 1."""
    print_table(rows)
    print()
    print("\n".join(notes))
    return 0 if all(r[-1] == "PASS" for r in rows) else 1
