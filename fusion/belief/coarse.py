"""A probability plane reduced to character cells: the coarse pictures of a belief that the replay stores
per tick and the terminal views draw."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["coarse_plane"]


def coarse_plane(probability: np.ndarray, occupied: np.ndarray, width: int = 44) -> tuple[np.ndarray, np.ndarray, int]:
    """A (ny, nx) probability plane reduced to character cells: (intensity 0–255 per cell, wall per cell,
    metres-cells per character column).  The intensity is √(p / max p), so faint alternatives still show; a
    character is a wall when any cell under it is."""
    ny, nx = occupied.shape
    step = max(1, math.ceil(nx / width))
    rows_step = step * 2  # a character is about twice as tall as wide
    cols, rows = math.ceil(nx / step), math.ceil(ny / rows_step)
    pad_y, pad_x = rows * rows_step - ny, cols * step - nx
    p = np.pad(probability, ((0, pad_y), (0, pad_x))).reshape(rows, rows_step, cols, step).sum(axis=(1, 3))
    occ = np.pad(occupied, ((0, pad_y), (0, pad_x)), constant_values=True).reshape(rows, rows_step, cols, step)
    wall = occ.any(axis=(1, 3))  # by maximum: a wall or rack thinner than a character never disappears
    top = p.max() if p.max() > 0 else 1.0
    intensity = np.clip(np.ceil(np.sqrt(np.clip(p, 0, None) / top) * 255), 0, 255).astype(np.uint8)
    return intensity, wall, step
