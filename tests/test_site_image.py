"""Sites drawn from occupancy images, and the site picture of ``fusion check``.

The images are written here with Pillow in the open Netpbm PGM format (binary grey map, "P5";
netpbm.sourceforge.net/doc/pgm.html) and in PNG (ISO/IEC 15948); the expected walls follow from
how each image is built: row 0 of an image is its top (north) edge.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from fusion.cli import main
from fusion.errors import InputFileError
from fusion.io.case import load_case

CASE = """[case]
name = "image site"
[site]
resolution_m = 0.25
origin_m = [-2.0, -1.0]
[site.image]
file = "{file}"
metres_per_pixel = 0.05
{extra}
[[sensors]]
name = "wheels"
kind = "odometry"
[[sensors]]
name = "ranger"
kind = "ranging"
rate_hz = 4.0
bearings_deg = [0.0, 90.0, 180.0, 270.0]
"""


def _image(path: Path, rows: int = 60, cols: int = 100) -> np.ndarray:
    """White floor, a 1-pixel black wall along the image's column 50, a grey (unknown) top band of 10 rows."""
    pixels = np.full((rows, cols), 255, dtype=np.uint8)
    pixels[:, 50] = 0
    pixels[:10, :] = 128
    Image.fromarray(pixels, mode="L").save(path)
    return pixels


def _case(tmp_path: Path, file: str = "map.pgm", extra: str = "") -> Path:
    path = tmp_path / "site.toml"
    path.write_text(CASE.format(file=file, extra=extra))
    return path


@pytest.mark.parametrize("name", ["map.pgm", "map.png"])
def test_an_occupancy_image_becomes_the_site_walls(tmp_path, name):
    _image(tmp_path / name)
    case = load_case(_case(tmp_path, name))
    site = case.site
    # 100 × 60 pixels of 5 cm: a 5 m × 3 m site whose lower-left corner is the origin (-2, -1).
    assert (site.width_m, site.height_m, site.origin_m) == (5.0, 3.0, (-2.0, -1.0))
    assert site.occupied.shape == (12, 20)
    # The one-pixel wall (x from 2.50 to 2.55 m past the origin) survives the 25 cm grid: cell column 10.
    assert site.occupied_at(-2.0 + 2.52, 0.0) and not site.occupied_at(-2.0 + 2.2, 0.0)
    # The grey band on top (the image's first 10 rows = the top 0.5 m) is unknown, counted as wall by default.
    assert site.occupied_at(0.0, -1.0 + 2.9) and not site.occupied_at(0.0, -1.0 + 2.2)
    free = load_case(_case(tmp_path, name, 'unknown = "free"')).site
    assert not free.occupied_at(0.0, -1.0 + 2.9)


def test_map_images_outside_the_case_folder_or_unreadable_are_refused(tmp_path):
    inner = tmp_path / "case"
    inner.mkdir()
    _image(tmp_path / "outside.pgm")
    os.symlink(tmp_path / "outside.pgm", inner / "link.pgm")
    (inner / "text.pgm").write_text("this is not an image\n")
    noise = np.random.default_rng(1).integers(0, 256, (80, 80), dtype=np.uint8)  # does not compress
    Image.fromarray(noise).save(inner / "cut.png")
    (inner / "cut.png").write_bytes((inner / "cut.png").read_bytes()[:3000])  # cut inside the pixel data
    (inner / "huge.pgm").write_bytes(b"P5\n20000 20000\n255\n" + b"\0" * 100)
    cases = {
        str(tmp_path / "outside.pgm"): "absolute path",
        "../outside.pgm": "leads outside the case's folder",
        "link.pgm": "leads outside the case's folder",
        "absent.pgm": "cannot read the map image",
        "text.pgm": "is not a PGM or PNG image",
        "cut.png": "cannot be decoded",
        "huge.pgm": "would need about",
    }
    for file, message in cases.items():
        with pytest.raises(InputFileError) as err:
            load_case(_case(inner, file))
        text = str(err.value)
        assert message in text and "site.image.file" in text and "line 7" in text, text


def test_check_draws_the_site_and_replaces_only_its_own_picture(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    _image(tmp_path / "map.pgm")
    case = _case(tmp_path)
    assert main(["check", str(case)]) == 0
    out = capsys.readouterr().out
    assert "no route: the case replays recorded logs only" in out and "site drawn in site-site.png" in out
    picture = tmp_path / "site-site.png"
    with Image.open(picture) as im:
        assert im.format == "PNG" and str(im.info["Software"]).startswith("fusion site preview")
    assert main(["check", str(case)]) == 0  # its own picture is drawn again
    (tmp_path / "mine.png").write_bytes(b"someone else's file")
    assert main(["check", str(case), "--preview", "mine.png"]) == 2
    assert (tmp_path / "mine.png").read_bytes() == b"someone else's file"
    assert "not a site picture fusion drew" in capsys.readouterr().err
