"""What ``fusion inspect`` prints for a replay on a place graph: the conflict episodes, most severe first, each with
its time, peak conflict, the sensors to blame and what the monitor did; then what was read and set aside."""

from __future__ import annotations

from rich.table import Table

from fusion.text import literal
from fusion.words import plural

__all__ = ["graph_inspection_table", "MAX_EPISODES_SHOWN"]

MAX_EPISODES_SHOWN = 12
"""Episodes listed on screen, most severe first (all are in episodes.json)."""


def graph_inspection_table(found) -> Table:
    table = Table(
        title=f"{literal(found.case)}: {plural(len(found.episodes), 'conflict episode')} in {literal(found.log)}"
    )
    for column in ("#", "time (s)", "peak K", "most to blame", "monitor"):
        table.add_column(column, justify="right" if column in ("#", "peak K") else "left")
    worst = sorted(found.episodes, key=lambda e: -e.severity)[:MAX_EPISODES_SHOWN]
    for e in sorted(worst, key=lambda e: e.start_t):
        blamed = ", ".join(f"{s} {v:.0%}" for s, v in e.shares()[:2] if v > 0) or "no single sensor"
        acts = sorted({a for _, _, a, _ in e.actions})
        table.add_row(
            str(e.number),
            f"{e.start_t:.2f}–{e.end_t:.2f}",
            f"{e.top_conflict:.2f}",
            literal(blamed),
            ", ".join(acts) or "—",
        )
    errors = ""
    if found.errors:
        errors = (
            " Median error along the graph: "
            + ", ".join(
                f"{b} {found.median_error(b):.1f} m" for b in found.backends if found.median_error(b) is not None
            )
            + "."
        )
    table.caption = (
        f"{found.ticks:,} ticks from {found.lines:,} lines; {found.used:,} readings used, {len(found.set_aside):,} records "
        f"set aside (set_aside.jsonl). The {min(len(found.episodes), MAX_EPISODES_SHOWN)} most severe episodes are listed; "
        f"blame is each sensor's share of the leave-one-out blame, averaged over the back ends.{errors}"
    )
    return table
