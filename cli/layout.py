"""Tables laid out for a terminal of a given width, never breaking a number, an identifier
or a column name across lines.

Text with spaces (citations, notes, hints) wraps at its spaces; every other cell and every
header keeps its whole width. When the whole table does not fit, columns are left out from
the right (the first column always stays) and a note says which; when more than half of
them would go, each row is shown as a vertical record instead (one ``name  value`` line per
column), so nothing is hidden.
"""

from __future__ import annotations

import math
import shutil
import textwrap

GAP = 2  # spaces between columns
FALLBACK_WIDTH = 100


def terminal_width() -> int:
    """The terminal's width in characters: $COLUMNS when set, else the terminal's own."""
    return max(20, shutil.get_terminal_size((FALLBACK_WIDTH, 24)).columns)


def _wraps(cells: list[str]) -> bool:
    """Text with spaces wraps at them; numbers, ids and one-word text never do."""
    return any(" " in c for c in cells)


def _min_width(header: str, cells: list[str], wraps: bool) -> int:
    if wraps:
        longest_word = max((len(w) for c in cells for w in c.split()), default=0)
        return max(len(header), longest_word)
    return max([len(header), *(len(c) for c in cells)])


Line = tuple[str, bool]  # text, shown bold


def lay_out(columns: list[str], cells: list[list[str]], width: int) -> tuple[list[Line], list[str]]:
    """The lines of the table (or of its vertical view) and the columns left out."""
    n = len(columns)
    if n == 0:
        return [], []
    by_col = [[r[j] for r in cells] for j in range(n)]
    wraps = [_wraps(col) for col in by_col]
    natural = [max([len(columns[j]), *(len(c) for c in by_col[j])]) for j in range(n)]
    least = [_min_width(columns[j], by_col[j], wraps[j]) for j in range(n)]

    keep: list[int] = []
    used = 0
    for j in range(n):
        extra = least[j] + (GAP if keep else 0)
        if used + extra <= width:
            keep.append(j)
            used += extra
    if len(keep) < n and (len(keep) < math.ceil(n / 2) or 0 not in keep):
        if not cells:  # nothing to show record by record: say which columns there are
            return [(f"no rows (columns: {', '.join(columns)})", False)], []
        return vertical(columns, cells, width), []
    widths = _share(width, [natural[j] for j in keep], [least[j] for j in keep])
    lines = _rows([columns[j] for j in keep], [[r[j] for j in keep] for r in cells], widths)
    return lines, [columns[j] for j in range(n) if j not in keep]


def _share(width: int, natural: list[int], least: list[int]) -> list[int]:
    """Column widths: natural where the table fits, else the room over the least widths
    shared among the wrapping columns in proportion to what they lack."""
    room = width - GAP * (len(natural) - 1)
    if sum(natural) <= room:
        return natural
    spare = room - sum(least)
    lack = [nat - lo for nat, lo in zip(natural, least, strict=True)]
    total = sum(lack)
    widths = [
        lo + (spare * la) // total if total else lo for lo, la in zip(least, lack, strict=True)
    ]
    return widths


def _rows(headers: list[str], cells: list[list[str]], widths: list[int]) -> list[Line]:
    def join(parts: list[str]) -> str:
        return (" " * GAP).join(p.ljust(w) for p, w in zip(parts, widths, strict=True)).rstrip()

    lines: list[Line] = [(join(headers), True), (join(["─" * w for w in widths]), False)]
    for row in cells:
        wrapped = [
            textwrap.wrap(c, w, break_long_words=False, break_on_hyphens=False) or [""]
            if len(c) > w
            else [c]
            for c, w in zip(row, widths, strict=True)
        ]
        for k in range(max(len(p) for p in wrapped)):
            lines.append((join([p[k] if k < len(p) else "" for p in wrapped]), False))
    return lines


def vertical(columns: list[str], cells: list[list[str]], width: int) -> list[Line]:
    """Each row as a block of ``name  value`` lines; long text wraps under its value."""
    name_w = max(len(c) for c in columns)
    value_w = max(10, width - name_w - GAP)
    lines: list[Line] = []
    for k, row in enumerate(cells, 1):
        lines.append((f"── {k} of {len(cells)} " + "─" * max(0, min(width, 40) - 8), True))
        for name, value in zip(columns, row, strict=True):
            parts = textwrap.wrap(value, value_w, break_long_words=False, break_on_hyphens=False)
            parts = parts or [""]
            lines.append(((name.ljust(name_w) + " " * GAP + parts[0]).rstrip(), False))
            lines += [(" " * (name_w + GAP) + p, False) for p in parts[1:]]
    return lines


def left_out_note(left_out: list[str], n: int) -> str:
    """What a shortened table leaves out and how to see it."""
    return (
        f"{len(left_out)} of {n} columns left out to fit the terminal: {', '.join(left_out)}; "
        "a wider terminal (or COLUMNS=200) or --format csv shows every column"
    )
