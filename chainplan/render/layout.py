"""Tables that fit the terminal without cutting a number.

Every terminal table goes through :func:`fit_table`.  Columns carry a priority:
figures are never wrapped or cut; labels (stage names, texts) wrap; when the
table is wider than the console, the columns with the highest ``drop`` number
are left out first (and named under the table: ``--wide`` shows them), then
label columns are narrowed and wrap.  Headers wrap at their words.  Columns
marked ``wide=True`` appear only with ``--wide``.  With ``--wide`` every column
is shown at its natural width, however wide the table gets.

Width of a table: the sum of its column widths plus two characters between
columns (a blank divider and one space of padding; no vertical rules, so piped
output and a terminal read the same)."""
from __future__ import annotations

import textwrap
from dataclasses import dataclass

from rich.cells import cell_len

GAP = 2                 # spaces between columns
MIN_LABEL = 8           # a wrapping label column is not narrowed below this (or its longest word)


@dataclass
class Col:
    name: str
    right: bool = False     # figures: right-aligned, never wrapped
    wrap: int = 0           # a label that may wrap (left-aligned); 2: narrowed before the 1s
    drop: int = 0           # 0: always shown; higher numbers are left out first when the table is too wide
    wide: bool = False      # shown only with --wide
    whole: bool = False     # a wrapping label kept whole while columns with a drop number can be left out


def is_wide(console) -> bool:
    return bool(getattr(console, "chainplan_wide", False))


def _longest_word(text: str) -> int:
    return max((cell_len(w) for w in str(text).split()), default=0)


def _natural(col: Col, cells: list[str]) -> tuple[int, int]:
    """(natural width, narrowest width) of a column."""
    lines = [ln for c in cells for ln in str(c).split("\n")]
    body = max((cell_len(ln) for ln in lines), default=0)
    head_min = _longest_word(col.name)
    natural = max(body, cell_len(col.name))
    if col.right or not col.wrap:
        narrow = max(body, head_min) if col.right else natural
        return natural, narrow
    return natural, max(min(natural, MIN_LABEL), max((_longest_word(c) for c in cells), default=0), head_min)


def layout(cols: list[Col], rows: list[list[str]], width: int, wide: bool):
    """Which columns to show and how wide: (indices, widths, names of columns left out)."""
    keep = [i for i, c in enumerate(cols) if (wide or not c.wide) and (c.name or any(r[i] for r in rows))]
    hidden = [c.name for i, c in enumerate(cols) if not wide and c.wide and any(r[i] for r in rows)]
    nat = {i: _natural(cols[i], [r[i] for r in rows]) for i in keep}
    total = lambda idx, k: sum(nat[i][k] for i in idx) + GAP * (len(idx) - 1)  # noqa: E731
    if wide:
        return keep, [nat[i][0] for i in keep], hidden
    whole = lambda i, k: nat[i][0] if k == 1 and cols[i].whole else nat[i][k]  # noqa: E731
    while sum(whole(i, 1) for i in keep) + GAP * (len(keep) - 1) > width:
        droppable = [i for i in keep if cols[i].drop > 0]
        if not droppable:
            break
        worst = max(droppable, key=lambda i: (cols[i].drop, i))
        keep.remove(worst)
        hidden.append(cols[worst].name)
    widths = {i: nat[i][0] for i in keep}
    excess = total(keep, 0) - width
    first = [i for i in keep if cols[i].wrap == 2]
    share = {i: max(nat[i][1], min(nat[i][0], int(0.45 * width))) for i in first}
    floor = {i: nat[i][1] for i in keep}
    steps = [([i for i in keep if cols[i].right], floor), (first, share),     # headers of figures first,
             ([i for i in keep if cols[i].wrap == 1], floor), (first, floor)]  # then labels
    for group, low in steps:
        while excess > 0:
            room = [i for i in group if widths[i] > low[i]]
            if not room:
                break
            i = max(room, key=lambda j: (widths[j], -j))     # narrow the widest first
            widths[i] -= 1
            excess -= 1
    return keep, [widths[i] for i in keep], hidden


def _header(name: str, width: int) -> str:
    if cell_len(name) <= width:
        return name
    return "\n".join(textwrap.wrap(name, width, break_long_words=False)) or name


#: a table longer than MAX_ROWS shows its first HEAD_ROWS and last TAIL_ROWS rows and every
#: marked (styled) one — worst, tightest, clipping — and counts the rest (``--wide`` shows all):
#: a 1 000-stage chain stays readable and prints in a fraction of a second
MAX_ROWS, HEAD_ROWS, TAIL_ROWS = 60, 20, 10


def fit_rows(n: int, marked=()) -> list:
    """Indices of the rows a long table shows, in order, with ``-k`` standing for a run of
    k rows left out: all when n ≤ MAX_ROWS, else the first and last ones and every index
    in ``marked`` (at most MAX_ROWS of those)."""
    if n <= MAX_ROWS:
        return list(range(n))
    keep = set(sorted(marked)[:MAX_ROWS])
    out = []
    for i in range(n):
        if i < HEAD_ROWS or i >= n - TAIL_ROWS or i in keep:
            out.append(i)
        elif out and out[-1] < 0:
            out[-1] -= 1
        else:
            out.append(-1)
    return out


def fit_table(console, cols: list[Col], rows: list[list[str]], title: str | None = None,
              styles: list | None = None, caption: str | None = None, show_header: bool = True):
    """A rich Table of ``rows`` (lists of strings, one per column) that fits the console.
    ``styles``: one rich style (or None) per row."""
    from rich.table import Table
    from rich.text import Text

    from .console import table_box
    rows = [[("" if c is None else str(c)) for c in r] for r in rows]
    total = len(rows)
    if not is_wide(console) and total > MAX_ROWS:
        picked = fit_rows(total, [k for k in range(total) if styles and styles[k]])
        rows = [rows[k] if k >= 0 else [f"… {-k} more"] + [""] * (len(cols) - 1) for k in picked]
        styles = [(styles[k] if styles else None) if k >= 0 else "dim" for k in picked]
        shown = sum(1 for k in picked if k >= 0)
        caption = "; ".join(x for x in (caption, f"{shown} of {total} rows shown (first, last and marked); "
                                                  "--wide or --json shows every one") if x)
    keep, widths, hidden = layout(cols, rows, console.width, is_wide(console))
    t = Table(title=title, box=table_box(console), title_justify="left", show_header=show_header,
              show_edge=False, pad_edge=False, padding=(0, GAP - 1, 0, 0), collapse_padding=False,
              caption_justify="left", expand=False)
    for i, w in zip(keep, widths):
        c = cols[i]
        t.add_column(_header(c.name, w), justify="right" if c.right else "left", width=w, min_width=w,
                     max_width=w, no_wrap=not c.wrap, overflow="fold")
    for k, r in enumerate(rows):
        t.add_row(*(Text(r[i]) for i in keep), style=(styles[k] if styles else None))
    notes = [caption] if caption else []
    if hidden:
        notes.append(f"--wide adds: {', '.join(h for h in hidden if h) or 'the marker column'}")
    if notes:
        t.caption = "\n".join(notes)
    return t


def print_table(console, *args, **kw) -> None:
    """Build with :func:`fit_table` and print (at the table's own width with ``--wide``)."""
    t = fit_table(console, *args, **kw)
    if is_wide(console):
        width = sum(c.width or 0 for c in t.columns) + GAP * (len(t.columns) - 1)
        before = console.width          # console.print(width=) is capped at the console's width:
        console.width = max(before, width)   # widen the console itself, or rich folds the cells
        try:
            console.print(t)
        finally:
            console.width = before
    else:
        console.print(t)
