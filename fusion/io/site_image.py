"""A site's walls from an occupancy image (PGM or PNG, read with Pillow).

The ``[site.image]`` table of a case:

    [site.image]
    file = "level2.pgm"        # relative to the case file; must stay inside the case's folder
    metres_per_pixel = 0.05    # the image's resolution
    wall_darkness = 0.65       # a pixel at least this dark is a wall (0 = white, 1 = black)
    free_darkness = 0.2        # a pixel at most this dark is free floor
    unknown = "wall"           # pixels in between: "wall" (default) or "free"

The image's lower-left pixel corner sits at the site's ``origin_m``; its top row is the
site's far (north) edge, as mapping tools draw it.  Darkness is ``1 − value / full scale`` of
the grey level (colour images are turned grey first, transparent pixels count as unknown).
The image is resampled onto the pose grid: a grid cell is a wall when any wall pixel falls in
it, so a wall one pixel thick survives a coarser grid; a cell is free otherwise, unless unknown
pixels fill it and ``unknown = "wall"``.

Refused before anything runs: a path outside the case's folder, a file that is missing, not
a PGM or PNG image, or larger than ``MAX_IMAGE_PIXELS`` (the memory it would need is given).
The thresholds' defaults are our choice (mid-grey counts as unknown).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from fusion.io.toml_reader import TomlReader
from fusion.site import SiteMap

__all__ = ["read_site_image", "occupancy_from_pixels", "MAX_IMAGE_PIXELS", "MAX_IMAGE_BYTES"]

MAX_IMAGE_PIXELS = 64_000_000
"""Largest occupancy image read (8,000 × 8,000 pixels: 400 m square at 5 cm); our choice, about
0.6 GiB while resampling."""
MAX_IMAGE_BYTES = 256 * 1024**2
"""Largest image file read."""
_BYTES_PER_PIXEL = 10  # grey bytes, darkness as float32 and masks while resampling (measured, rounded up)
FORMATS = ("PPM", "PNG")  # Pillow's names: PPM covers the PGM family (P2 and P5 grey maps)


def read_site_image(
    r: TomlReader, d: dict, w: tuple, case_path: str, resolution_m: float, origin, name: str
) -> SiteMap:
    """The site drawn by the image of ``[site.image]`` table ``d``: its extent from the image, walls resampled
    onto ``resolution_m``."""
    r.only(d, w, {"file", "metres_per_pixel", "wall_darkness", "free_darkness", "unknown"})
    path = _inside_case_folder(r, d, w, case_path)
    mpp = r.number(d, w, "metres_per_pixel", positive=True)
    wall = r.number(d, w, "wall_darkness", 0.65, low=0, high=1)
    free = r.number(d, w, "free_darkness", 0.2, low=0, high=1)
    if free >= wall:
        r.fail((*w, "free_darkness"), f"must be below wall_darkness ({wall:g}), got {free:g}")
    unknown = r.text(d, w, "unknown", "wall", choices=("wall", "free"))
    darkness, known = _pixels(r, w, path)
    rows, cols = darkness.shape
    width, height = cols * mpp, rows * mpp
    occupied = occupancy_from_pixels(darkness, known, mpp, resolution_m, wall, free, unknown == "wall")
    from fusion.errors import FusionError

    try:
        return SiteMap(width, height, resolution_m, occupied, name=name, origin_m=origin)
    except FusionError as err:
        r.fail(w, str(err))


def case_folder(case_path: str) -> Path | None:
    """The folder of the case file, or None for a case given as text (no file to be relative to)."""
    if not case_path or case_path.startswith("<"):
        return None
    return Path(case_path).resolve().parent


def _inside_case_folder(r: TomlReader, d: dict, w: tuple, case_path: str) -> Path:
    text = r.text(d, w, "file")
    folder = case_folder(case_path)
    if folder is None:
        r.fail((*w, "file"), "a map image needs the case to be read from a file (its path is relative to it)")
    given = Path(text)
    if given.is_absolute():
        r.fail((*w, "file"), f"must be a path relative to the case file's folder, got the absolute path {text!r}")
    path = (folder / given).resolve()  # links are followed, so one pointing out of the folder is caught
    if not path.is_relative_to(folder):
        r.fail((*w, "file"), f"{text!r} leads outside the case's folder ({folder}); keep the image beside the case")
    return path


def _pixels(r: TomlReader, w: tuple, path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Darkness (0 white … 1 black, float32) and where it is known (not transparent), top row first."""
    import os
    import stat
    import warnings

    from PIL import Image, UnidentifiedImageError

    from fusion.errors import InputFileError

    where = (*w, "file")
    try:
        info = os.stat(path)
    except OSError as err:
        r.fail(where, f"cannot read the map image {str(path)!r}: {err.strerror}")
    if not stat.S_ISREG(info.st_mode):
        r.fail(where, f"the map image {str(path)!r} is not a regular file")
    if info.st_size > MAX_IMAGE_BYTES:
        r.fail(where, f"the map image is {info.st_size:,} bytes; the limit is {MAX_IMAGE_BYTES:,}")
    limit = Image.MAX_IMAGE_PIXELS
    Image.MAX_IMAGE_PIXELS = None  # the header's size is checked below, against our own limit, with a better message
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(path, formats=FORMATS) as im:  # reads the header only
                cols, rows = im.size
                if cols * rows > MAX_IMAGE_PIXELS:
                    gib = cols * rows * _BYTES_PER_PIXEL / 1024**3
                    r.fail(
                        where,
                        f"the map image is {cols:,} × {rows:,} pixels and would need about {gib:.1f} GiB; the limit "
                        f"is {MAX_IMAGE_PIXELS:,} pixels (crop it to the site, or save it at a coarser resolution)",
                    )
                if cols < 1 or rows < 1:
                    r.fail(where, "the map image has no pixels")
                alpha = im.mode in ("RGBA", "LA", "PA") or (im.mode == "P" and "transparency" in im.info)
                grey = im.convert("LA") if alpha else im.convert("L") if im.mode not in ("I", "I;16", "F") else im
                values = np.asarray(grey, dtype=np.float32)
    except InputFileError:
        raise
    except (UnidentifiedImageError, Image.DecompressionBombError, Image.DecompressionBombWarning) as err:
        r.fail(where, f"{str(path)!r} is not a PGM or PNG image we can read ({err})")
    except (OSError, ValueError, SyntaxError) as err:  # truncated or corrupt image data
        r.fail(where, f"the map image {str(path)!r} cannot be decoded: {err}")
    finally:
        Image.MAX_IMAGE_PIXELS = limit
    if values.ndim == 3:
        known = values[..., 1] > 0
        values = values[..., 0]
    else:
        known = np.ones(values.shape, dtype=bool)
    top = 255.0 if grey.mode in ("L", "LA") or float(values.max()) <= 255 else 65535.0  # 8- or 16-bit grey
    darkness = 1.0 - np.clip(values / top, 0.0, 1.0)
    return darkness, known


def occupancy_from_pixels(
    darkness: np.ndarray,
    known: np.ndarray,
    mpp: float,
    resolution_m: float,
    wall: float,
    free: float,
    unknown_wall: bool,
) -> np.ndarray:
    """(ny, nx) bool walls on the pose grid, north-up image (top row first) in, south-up grid out.

    A grid cell is a wall when a wall pixel's centre falls in it; when no pixel of it is wall and
    none is free floor, it is a wall if ``unknown_wall`` (cells no pixel reaches count as unknown)."""
    rows, cols = darkness.shape
    is_wall = known & (darkness >= wall)
    is_free = known & (darkness <= free) & ~is_wall
    ny = max(1, math.ceil(rows * mpp / resolution_m - 1e-9))
    nx = max(1, math.ceil(cols * mpp / resolution_m - 1e-9))
    # The grid cell of each pixel centre (row 0 of the image is the site's top edge).
    iy = np.minimum(((rows - 1 - np.arange(rows) + 0.5) * mpp / resolution_m).astype(np.int64), ny - 1)
    ix = np.minimum(((np.arange(cols) + 0.5) * mpp / resolution_m).astype(np.int64), nx - 1)
    walls = np.zeros((ny, nx), dtype=bool)
    floor = np.zeros((ny, nx), dtype=bool)
    rr, cc = np.nonzero(is_wall)
    walls[iy[rr], ix[cc]] = True
    rr, cc = np.nonzero(is_free)
    floor[iy[rr], ix[cc]] = True
    if unknown_wall:
        return walls | ~floor
    return walls
