"""Step through a replay in the terminal: every back end's belief map side by side, tick by tick.

Reads what ``fusion inspect`` stored (``frames.json`` and the coarse maps in ``frames.u8``,
mapped from disk, so a long replay costs no memory).  Keys:

    → l space   next tick          ← h   previous tick
    ] [         10 ticks on/back   n p   next / previous conflict episode
    g G         first / last tick  q     quit
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
from rich.console import Group
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from fusion import SAFETY_NOTICE
from fusion.errors import InputFileError
from fusion.io.bounded import read_text
from fusion.view.live import BACKEND_TITLES, draw_plane, sparkline

__all__ = ["Scrubber", "scrub", "KEYS"]

KEYS = {
    "right": 1,
    "l": 1,
    " ": 1,
    "left": -1,
    "h": -1,
    "]": 10,
    "[": -10,
}
_HELP = "→/l/space next · ←/h back · ]/[ ±10 · n/p next/previous episode · g/G first/last · q quit"


MAX_INDEX_BYTES = 256 * 1024**2
"""Largest frame index read (a replay of a million ticks writes about a tenth of this)."""


class Scrubber:
    """The state of a scrubbing session: which tick is shown; ``press`` moves, ``__rich__`` draws."""

    def __init__(self, folder):
        folder = Path(folder)
        index_path, frames_path = folder / "frames.json", folder / "frames.u8"
        if not index_path.exists():
            raise InputFileError(
                index_path, None, None, "no stored frames here: run fusion inspect (without --no-frames) first"
            )
        text = read_text(index_path, MAX_INDEX_BYTES, "frame index", regular=True)
        try:
            self.index = json.loads(text)
        except (ValueError, RecursionError) as err:
            raise InputFileError(index_path, None, None, f"cannot read the frame index: {str(err)[:200]}") from None
        ix = self.index
        try:
            self.backends = list(ix["backends"])
            self.rows, self.cols = (int(v) for v in ix["shape"])
            self.n = int(ix["ticks"])
            self.wall = np.array(ix["wall"], dtype=bool).reshape(self.rows, self.cols)
        except (KeyError, TypeError, ValueError) as err:
            raise InputFileError(
                index_path, None, None, f"the frame index is incomplete ({err}); re-run fusion inspect"
            ) from None
        per_tick = self.rows * self.cols * len(self.backends)
        expected = per_tick * self.n
        size = frames_path.stat().st_size if frames_path.exists() else -1
        if self.n == 0 or size != expected:
            raise InputFileError(
                frames_path,
                None,
                None,
                f"holds {max(size, 0):,} bytes where the index needs {expected:,}; re-run fusion inspect",
            )
        self.frames = np.memmap(
            frames_path, dtype=np.uint8, mode="r", shape=(self.n, len(self.backends), self.rows, self.cols)
        )
        self.episodes = [tuple(e) for e in ix["episodes"]]  # (start tick, peak tick, end tick, number)
        self.tick = 0

    # ------------------------------------------------------------------ moving
    def press(self, key: str) -> bool:
        """Apply one key; False when the key asks to quit."""
        if key in ("q", "Q", "escape"):
            return False
        if key in KEYS:
            self.tick += KEYS[key]
        elif key == "g":
            self.tick = 0
        elif key == "G":
            self.tick = self.n - 1
        elif key == "n":
            later = [e[0] for e in self.episodes if e[0] > self.tick]
            self.tick = later[0] if later else self.tick
        elif key == "p":
            earlier = [e[0] for e in self.episodes if e[0] < self.tick]
            self.tick = earlier[-1] if earlier else self.tick
        self.tick = min(max(self.tick, 0), self.n - 1)
        return True

    def episode_here(self):
        return next((e for e in self.episodes if e[0] <= self.tick <= e[2]), None)

    # ------------------------------------------------------------------ drawing
    def __rich__(self):
        ix, i = self.index, self.tick
        ep = self.episode_here()
        where = f"episode {ep[3]} (ticks {ep[0]}–{ep[2]}, peak at {ep[1]})" if ep else "no conflict episode"
        head = Text.from_markup(
            f"[bold]tick {i + 1:,}/{self.n:,}[/]   t = {ix['t'][i]:.2f} s   log line {ix['line'][i]:,}   {where}\n"
            "◆ true pose   ✚ estimate   ░▒▓█ probability of the place   ▪ wall/rack"
        )
        maps = Table.grid(expand=True, padding=(0, 1))
        for _ in self.backends:
            maps.add_column(ratio=1)
        panels = []
        lo = max(0, i - 40)
        for k, b in enumerate(self.backends):
            conflict = ix["conflict"][b]
            body = Group(
                draw_plane(
                    np.asarray(self.frames[i, k]),
                    self.wall,
                    int(ix["step"]),
                    ix["truth"][i],
                    ix["estimate"][b][i],
                    float(ix["resolution_m"]),
                    tuple(ix.get("origin_m", (0.0, 0.0))),
                ),
                Text(sparkline(conflict[lo : i + 1], width=44, top=1.0), style="green"),
                Text(
                    f"conflict K {conflict[i]:.3f}   action: {ix['action'][b][i]}",
                    style="bold" if conflict[i] >= 0.8 else "",
                ),
            )
            panels.append(Panel(body, title=BACKEND_TITLES.get(b, b), border_style="red" if ep else "blue"))
        maps.add_row(*panels)
        return Group(head, maps, Text(_HELP, style="dim"), Text(SAFETY_NOTICE, style="dim"))


def _read_keys():
    """Keys from a raw terminal, one at a time (arrow keys arrive as escape sequences)."""
    import termios
    import tty

    fd = sys.stdin.fileno()
    old = termios.tcgetattr(fd)
    try:
        tty.setcbreak(fd)
        while True:
            ch = sys.stdin.read(1)
            if ch == "\x1b":
                seq = sys.stdin.read(2)
                yield {"[C": "right", "[D": "left"}.get(seq, "escape")
            elif ch in ("", "\x03", "\x04"):
                return
            else:
                yield ch
    finally:
        termios.tcsetattr(fd, termios.TCSADRAIN, old)


def scrub(folder, console, keys=None) -> Scrubber:
    """Show the replay stored in ``folder`` and move with ``keys`` (default: the keyboard)."""
    from rich.live import Live

    view = Scrubber(folder)
    if keys is None:
        if not sys.stdin.isatty():
            raise InputFileError(Path(folder), None, None, "scrubbing needs a terminal for the keyboard")
        keys = _read_keys()
    with Live(view, console=console, auto_refresh=False, transient=False) as live:
        for key in keys:
            if not view.press(key):
                break
            live.update(view, refresh=True)
    return view
