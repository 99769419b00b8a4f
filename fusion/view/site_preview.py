"""A picture of a case's site, drawn by ``fusion check``: walls, doors with their contact zones, markers, route.

Axes are in metres in the site's own frame (its origin included), north up, so a map drawn from
an occupancy image can be checked against the building before anything is replayed on it.  The
PNG records that fusion drew it (``PREVIEW_MARK``), so the next check may replace it; any other
file of the same name is kept unless ``--replace`` is given.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from fusion import __version__
from fusion.case_model import Case
from fusion.io.outdir import FolderError, atomic_write
from fusion.view.html_page import pyplot

__all__ = [
    "draw_site",
    "draw_site_on",
    "legend_if_any",
    "site_figsize",
    "write_preview",
    "write_picture",
    "preview_path",
    "PREVIEW_MARK",
]

PREVIEW_MARK = "fusion site preview"
MAX_LABELS = 60
"""Markers and doors labelled by name on the picture (more would hide the map; our choice)."""


def draw_site(case: Case) -> bytes:
    """The site of ``case`` as PNG bytes."""
    plt = pyplot()
    site = case.site
    fig, ax = plt.subplots(figsize=site_figsize(case), dpi=100)
    draw_site_on(ax, case)
    if case.route is not None:
        pts = np.array(case.route.waypoints)
        ax.plot(pts[:, 0], pts[:, 1], "-", color="tab:green", linewidth=1.2, label="route")
        ax.plot(pts[0, 0], pts[0, 1], "o", color="tab:green", markersize=6)
    ax.set_title(f"{case.name[:60]}: {site.width_m:g} m × {site.height_m:g} m at {site.resolution_m:g} m (walls grey)")
    legend_if_any(ax, loc="upper right", fontsize=7, framealpha=0.8)
    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format="png", metadata={"Software": f"{PREVIEW_MARK} ({__version__})"})
    plt.close(fig)
    return buf.getvalue()


def legend_if_any(ax, **options) -> None:
    """A legend, when something on the axes has a label (matplotlib warns about an empty one)."""
    if ax.get_legend_handles_labels()[0]:
        ax.legend(**options)


def site_figsize(case: Case, width: float = 9.0) -> tuple[float, float]:
    """A figure size with the site's aspect ratio (height kept between 3 and 14 inches)."""
    site = case.site
    return width, min(max(width * site.height_m / site.width_m, 3.0), 14.0)


def draw_site_on(ax, case: Case, labels: bool = True, walls_alpha: float = 1.0) -> None:
    """Walls (grey), doors with their contact zones and open side, markers, metre axes: the layers every map of
    the site shares (the site preview, the run report, the incident report's belief maps)."""
    site = case.site
    ax.imshow(site.occupied, origin="lower", extent=site.extent, cmap="Greys", vmin=0, vmax=1.6, alpha=walls_alpha)
    for door in site.doors:
        zone = site.door_zone(door)
        ax.contour(
            zone.astype(float),
            levels=[0.5],
            origin="lower",
            extent=site.extent,
            colors=["tab:orange"],
            linewidths=1.0,
        )
        ax.plot(door.x, door.y, "s", color="tab:orange", markersize=7)
        facing = math.radians(door.facing_deg)
        ax.annotate(
            "",
            (door.x + 0.6 * math.cos(facing), door.y + 0.6 * math.sin(facing)),
            (door.x, door.y),
            arrowprops={"arrowstyle": "->", "color": "tab:orange"},
        )
    if site.markers:
        xs = [m.x for m in site.markers]
        ys = [m.y for m in site.markers]
        ax.plot(xs, ys, "^", color="tab:blue", markersize=7, label="markers")
    labelled = 0
    items = [(d, "tab:orange") for d in site.doors] + [(m, "tab:blue") for m in site.markers] if labels else []
    for item, colour in items:
        if labelled >= MAX_LABELS:
            break
        name = getattr(item, "name", None) or item.marker_id
        ax.annotate(name[:24], (item.x, item.y), textcoords="offset points", xytext=(4, 4), fontsize=7, color=colour)
        labelled += 1
    if site.doors:
        ax.plot([], [], "s", color="tab:orange", label="doors (zone outlined, arrow: open side)")
    ax.set_xlim(site.extent[0], site.extent[1])
    ax.set_ylim(site.extent[2], site.extent[3])
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")
    ax.set_aspect("equal")
    ax.grid(True, linewidth=0.3, alpha=0.5)


def preview_path(case_path) -> Path:
    """``<case>-site.png`` in the current folder (the case's own folder may not be writable)."""
    stem = "".join(c if c.isalnum() or c in "-_." else "_" for c in Path(str(case_path)).stem) or "case"
    return Path(f"{stem}-site.png")


def write_preview(case: Case, path, replace: bool = False) -> Path:
    """Draw the site into ``path``: a preview fusion drew before is replaced; any other file only with ``replace``."""
    return write_picture(draw_site(case), path, replace)


def write_picture(data: bytes, path, replace: bool = False) -> Path:
    """Write a site picture's PNG ``data`` into ``path``: one fusion drew before is replaced; any other file only with
    ``replace``."""
    path = Path(path)
    if path.is_dir():
        raise FolderError(f"{path} is a folder; give a file name for the site picture")
    if path.exists() and not replace and not _ours(path):
        raise FolderError(
            f"{path} exists and is not a site picture fusion drew; choose another name with --preview, "
            "or pass --replace to overwrite it"
        )
    atomic_write(path, data)
    return path


def _ours(path: Path) -> bool:
    try:
        from PIL import Image

        with Image.open(path, formats=("PNG",)) as im:
            return str(im.info.get("Software", "")).startswith(PREVIEW_MARK)
    except Exception:  # noqa: BLE001 - any file we cannot read as our PNG is not ours
        return False
