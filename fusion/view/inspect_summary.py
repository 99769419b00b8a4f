"""The terminal summary of an incident replay (rich): what was read, the episodes, whom to blame."""

from __future__ import annotations

from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from fusion import SAFETY_NOTICE
from fusion.monitor import ALERT, QUARANTINE, RELOCALIZE
from fusion.scoring import HOLD_S, WITHIN_DEG, WITHIN_M
from fusion.text import literal, plain
from fusion.words import plural

__all__ = ["summary_renderables", "EPISODE_ROWS"]

EPISODE_ROWS = 12
"""Episodes listed in the terminal (the most severe ones; the HTML report and episodes.json have all)."""

_SHORT = {ALERT: "alert", RELOCALIZE: "re-loc", QUARANTINE: "quar"}


def summary_renderables(found):
    yield Text(SAFETY_NOTICE, style="dim")
    for w in found.warnings:
        yield Panel(Text(plain(w)), title="warning", border_style="red")
    head = Table.grid(padding=(0, 2))
    head.add_row("log", literal(found.log))
    head.add_row("site", literal(found.site))
    head.add_row(
        "read",
        f"{plural(found.lines, 'line')} → {plural(found.records, 'observation')} in {plural(found.ticks, 'tick')} "
        f"({found.duration_s:.1f} s of log); {plural(found.used, 'reading')} absorbed by every back end",
    )
    aside = ", ".join(f"{n:,} {kind}" for kind, n in found.reasons.most_common())
    head.add_row(
        "set aside",
        f"{found.set_aside:,} row{'' if found.set_aside == 1 else 's'}"
        + (f" ({aside}); listed in set_aside.jsonl" if aside else ""),
    )
    head.add_row("start", literal(found.start))
    head.add_row("replay", f"{found.seconds:.1f} s of wall time on one core")
    if found.errors:
        head.add_row(
            "true error",
            "; ".join(f"{b}: median {m:.2f} m, 95th percentile {p:.2f} m" for b, (m, p) in found.errors.items()),
        )
        head.add_row("heading error", "; ".join(f"{b}: median {v:.1f}°" for b, v in found.heading_errors.items()))
    if found.found_after and found.start.startswith("anywhere"):
        head.add_row(
            "found itself",
            "; ".join(f"{b}: " + ("never" if v is None else f"after {v:.1f} s") for b, v in found.found_after.items())
            + f" (the estimate then held within {WITHIN_M:g} m and {WITHIN_DEG:g}° for {HOLD_S:g} s or to the end)",
        )
    yield Panel(head, title="incident replay", border_style="blue")
    yield _episode_table(found)
    yield _blame_table(found)


def _episode_table(found) -> Table:
    eps = sorted(found.episodes, key=lambda e: -e.severity)[:EPISODE_ROWS]
    table = Table(
        title=f"Conflict episodes: {len(found.episodes)} found"
        + (f", the {len(eps)} most severe shown" if len(found.episodes) > len(eps) else "")
    )
    table.add_column("#", justify="right")
    o = found.time_origin
    table.add_column("start–end (s)" if not o else "start–end (s from the first tick)", justify="right")
    table.add_column("ticks", justify="right")
    table.add_column("peak K " + " / ".join(found.backends), justify="right")
    table.add_column("most to blame")
    table.add_column("first actions (s)")
    for e in sorted(eps, key=lambda e: e.start_t):
        shares = e.shares()
        blame = ", ".join(f"{literal(s)} {v:.0%}" for s, v in shares[:2]) or "one reading only"
        acts = []
        for b in found.backends:
            taken = [
                f"{_SHORT[a]} {e.acted(b, a) - o:.2f}"
                for a in (ALERT, RELOCALIZE, QUARANTINE)
                if e.acted(b, a) is not None
            ]
            acts.append(f"{b}: {', '.join(taken) or 'none'}")
        table.add_row(
            str(e.number),
            f"{e.start_t - o:.2f}–{e.end_t - o:.2f}",
            str(e.ticks),
            " / ".join(f"{e.peak.get(b, 0.0):.2f}" for b in found.backends),
            blame,
            "\n".join(acts),
        )
    table.caption = (
        "K: conflict of a tick's readings with the belief (Dempster's K; for Bayes the same K of conditioning "
        "on the cells still possible). Blame: leave-one-out drop in K, as a share per back end, averaged."
    )
    return table


def _blame_table(found) -> Table:
    table = Table(title="Sensors ranked by their share of the conflict, over all episodes")
    table.add_column("rank", justify="right")
    table.add_column("sensor")
    table.add_column("share", justify="right")
    for b in found.backends:
        table.add_column(f"Σ blame {b}", justify="right")
    for i, (sensor, share) in enumerate(found.ranking(), 1):
        table.add_row(
            str(i), literal(sensor), f"{share:.0%}", *[f"{found.blame[b].get(sensor, 0.0):.3f}" for b in found.backends]
        )
    if not found.ranking():
        table.caption = "no episode with two or more readings to compare: nothing to attribute"
    return table
