"""The ``[site]`` table of a case: extent and origin, walls as boxes or from an occupancy image, doors, markers.

Coordinates are in the site's own frame, in metres.  ``origin_m = [x, y]`` is the frame's
coordinates of the map's lower-left corner (default 0, 0), so a map whose surveyed
coordinates go negative is entered as surveyed.

A site may be drawn from an occupancy image (``[site.image]``, read by ``fusion.io.site_image``):
its size and the site's extent then come from the image, and boxes, doors and markers are
added on top.  Everything is checked before anything runs, and every refusal names the file,
line and field.
"""

from __future__ import annotations

import math

from fusion.errors import FusionError
from fusion.io.toml_reader import TomlReader, finite_numbers
from fusion.site import Door, Marker, SiteMap

__all__ = ["read_site", "MAX_ITEMS", "MAX_BOXES", "SITE_FIELDS"]

MAX_ITEMS = 1000
"""Most doors, and most markers, on a site."""
MAX_BOXES = 10_000
"""Most boxes on a site."""
MAX_ORIGIN_M = 1e7
"""Largest origin coordinate accepted (10,000 km: any site's survey frame; beyond it metres lose precision)."""
SITE_FIELDS = {
    "name",
    "width_m",
    "height_m",
    "resolution_m",
    "headings",
    "border",
    "origin_m",
    "image",
    "boxes",
    "doors",
    "markers",
}


def read_site(r: TomlReader, d: dict, case_path: str) -> tuple[SiteMap, int]:
    """The site and its number of heading bins, from the ``[site]`` table ``d`` of the case at ``case_path``."""
    w = ("site",)
    r.only(d, w, SITE_FIELDS)
    res = r.number(d, w, "resolution_m", positive=True)
    headings = r.number(d, w, "headings", 36, whole=True, low=1, high=360)
    origin = r.numbers(d, w, "origin_m", length=2, default=(0.0, 0.0))
    for v in origin:
        if abs(v) > MAX_ORIGIN_M:
            r.fail((*w, "origin_m"), f"coordinates must lie within ±{MAX_ORIGIN_M:g} m, got {list(origin)}")
    name = r.name(d, w, "name", "site")
    image = r.table(d, w, "image", required=False)
    if image:
        for key in ("width_m", "height_m", "border"):
            if key in d:
                r.fail((*w, key), "is taken from the image when [site.image] is given; remove it")
        from fusion.io.site_image import read_site_image

        site = read_site_image(r, image, (*w, "image"), case_path, res, origin, name)
    else:
        width = r.number(d, w, "width_m", positive=True)
        height = r.number(d, w, "height_m", positive=True)
        border = r.flag(d, w, "border", True)
        try:
            site = SiteMap.empty(width, height, res, border=border, name=name, origin_m=origin)
        except FusionError as err:
            r.fail(w, str(err))
    doors, markers = _doors_and_markers(r, d, w, site)
    try:
        site = SiteMap(site.width_m, site.height_m, res, site.occupied, doors, markers, name, site.origin_m)
        site.grid(headings)  # refuses grids too large for memory
    except FusionError as err:
        r.fail(w, str(err))
    boxes = d.get("boxes", [])
    if not isinstance(boxes, list):
        r.fail((*w, "boxes"), "must be an array of [x0, y0, x1, y1] boxes in metres")
    if len(boxes) > MAX_BOXES:
        r.fail((*w, "boxes"), f"holds {len(boxes):,} items; the limit is {MAX_BOXES:,}")
    for i, box in enumerate(boxes):
        if not finite_numbers(box, 4):
            r.fail((*w, "boxes"), f"box {i + 1} must be [x0, y0, x1, y1] in metres, got {box!r}")
        site = site.with_box(*box)
    return site, headings


def _doors_and_markers(r: TomlReader, d: dict, w: tuple, site: SiteMap) -> tuple[tuple, tuple]:
    doors, markers = [], []
    for key in ("doors", "markers"):
        if isinstance(d.get(key), list) and len(d[key]) > MAX_ITEMS:
            r.fail((*w, key), f"holds {len(d[key]):,} items; the limit is {MAX_ITEMS:,}")
    for i, door in enumerate(r.tables(d, w, "doors")):
        dw = (*w, "doors", i)
        r.only(door, dw, {"name", "x_m", "y_m", "facing_deg", "radius_m"})
        doors.append(
            Door(
                r.name(door, dw, "name"),
                r.number(door, dw, "x_m"),
                r.number(door, dw, "y_m"),
                r.number(door, dw, "facing_deg"),
                r.number(door, dw, "radius_m", 1.0, positive=True),
            )
        )
        on_map(r, dw, site, doors[-1].x, doors[-1].y, f"door {doors[-1].name!r}")
    for i, marker in enumerate(r.tables(d, w, "markers")):
        mw = (*w, "markers", i)
        r.only(marker, mw, {"id", "x_m", "y_m"})
        markers.append(Marker(r.name(marker, mw, "id"), r.number(marker, mw, "x_m"), r.number(marker, mw, "y_m")))
        on_map(r, mw, site, markers[-1].x, markers[-1].y, f"marker {markers[-1].marker_id!r}")
    for kind, items, key in (("door", doors, "doors"), ("marker", markers, "markers")):
        names = [getattr(i, "name", None) or i.marker_id for i in items]
        for j, n in enumerate(names):
            if names.index(n) != j:
                r.fail((*w, key, j), f"{kind} name {n!r} is used twice; names must be unique")
    return tuple(doors), tuple(markers)


def on_map(r: TomlReader, where: tuple, site: SiteMap, x: float, y: float, what: str) -> None:
    """Refuse a point off the site's map, giving the map's extent."""
    if not site.contains(x, y):
        r.fail(where, f"{what} at ({x} m, {y} m) is off the map ({site.grid(1).spans()})")


def free_point(r: TomlReader, where: tuple, site: SiteMap, p, what: str) -> None:
    x, y = p
    on_map(r, where, site, x, y, what)
    if site.occupied_at(x, y):
        r.fail(where, f"{what} ({x} m, {y} m) is inside a wall or rack")


def free_segment(r: TomlReader, where: tuple, site: SiteMap, a, b, what: str) -> None:
    """Refuse a straight leg that crosses an occupied cell (sampled at a quarter cell, all at once)."""
    import numpy as np

    length = math.hypot(b[0] - a[0], b[1] - a[1])
    steps = max(2, int(length / (site.resolution_m / 4)) + 1)
    k = np.arange(steps + 1) / steps
    xs, ys = a[0] + (b[0] - a[0]) * k, a[1] + (b[1] - a[1]) * k
    iy, ix = site.grid(1).plane_index(xs, ys)
    hit = np.flatnonzero(site.occupied[iy, ix])
    if hit.size:
        x, y = xs[hit[0]], ys[hit[0]]
        r.fail(
            where,
            f"{what} from ({a[0]}, {a[1]}) to ({b[0]}, {b[1]}) passes through a wall or rack near ({x:.2f} m, {y:.2f} m)",
        )
