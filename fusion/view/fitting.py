"""Tables that fit the terminal: key columns (what a row is) are never cut or wrapped; value columns are spread over
as many tables as the width needs, each repeating the keys; long notes become numbered footnotes below, where
they wrap as sentences instead of one word per line."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Column", "fitted_tables", "footnoted"]


@dataclass(frozen=True)
class Column:
    header: str
    justify: str = "left"
    style: str | None = None


def fitted_tables(title: str, keys: list[Column], values: list[Column], rows: list[list[str]], width: int) -> list:
    """``rows``: the keys' cells, then the values' cells.  Returns one table, or several titled "(k of n)" when
    the values do not fit ``width`` side by side.  When that would take more than two tables, the keys are first
    stacked into one column (one line each), which leaves the values more room."""
    groups = _groups(keys, values, rows, width)
    if len(groups) > 2 and len(keys) > 1:
        stacked = [["\n".join(r[: len(keys)]), *r[len(keys) :]] for r in rows]
        return _tables(title, [Column("\n".join(c.header for c in keys))], values, stacked, width)
    return _tables(title, keys, values, rows, width)


def _need(rows: list[list[str]], i: int, header: str) -> int:
    widest = max([*(len(line) for line in header.split("\n")), *(len(line) for r in rows for line in r[i].split("\n"))])
    return widest + 3  # padding and border


def _groups(keys, values, rows, width) -> list[list[int]]:
    """Indices of the value columns of each table, packed greedily into ``width``."""
    n_keys = len(keys)
    fixed = 1 + sum(_need(rows, i, c.header) for i, c in enumerate(keys))
    groups: list[list[int]] = [[]]
    used = fixed
    for j, col in enumerate(values):
        w = _need(rows, n_keys + j, col.header)
        if groups[-1] and used + w > width:
            groups.append([])
            used = fixed
        groups[-1].append(j)
        used += w
    return groups


def _tables(title, keys, values, rows, width) -> list:
    from rich.table import Table

    n_keys = len(keys)

    groups = _groups(keys, values, rows, width)
    out = []
    for k, group in enumerate(groups, 1):
        part = f" ({k} of {len(groups)})" if len(groups) > 1 else ""
        table = Table(title=f"{title}{part}")
        for c in keys:
            table.add_column(c.header, justify=c.justify, no_wrap=True)
        for j in group:
            c = values[j]
            table.add_column(c.header, justify=c.justify, style=c.style, no_wrap=True)
        for r in rows:
            table.add_row(*r[:n_keys], *(r[n_keys + j] for j in group))
        out.append(table)
    return out


def footnoted(notes: list[str]) -> tuple[list[str], list[str]]:
    """Each row's note as a marker ("1", "2", …; equal notes share one; "" for none), and the footnotes."""
    index: dict[str, int] = {}
    marks = []
    for note in notes:
        if not note:
            marks.append("")
            continue
        marks.append(str(index.setdefault(note, len(index) + 1)))
    return marks, [f"[{i}] {note}" for note, i in index.items()]
