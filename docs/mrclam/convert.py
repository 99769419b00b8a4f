"""Make a case and a log layout for one robot of the UTIAS MRCLAM data sets, so `fusion inspect` replays it as recorded.

Data: Keith Y. K. Leung, Yoni Halpern, Timothy D. Barfoot and Hugh H. T. Liu, "The UTIAS
multi-robot cooperative localization and mapping dataset", The International Journal of Robotics
Research 30(8):969-974, 2011, doi:10.1177/0278364911398404.

The tool gains no reader for this data set: its files are plain tables, read through a log
layout (docs/recordings.md).  This script only writes what the tables do not say:

* the case: a site whose origin and extent cover the landmarks and the robot's true path (with a
  1 m margin), open floor (no walls are surveyed), one marker per landmark named by its barcode
  (the id the robot's camera reports), and the robot's two sensors;
* the layout: odometry as velocities (forward m/s, turn rad/s), sightings as barcode, range (m)
  and bearing (rad), true poses; the barcodes of the other robots are no markers of the site;
* copies of the robot's three tables beside them (a layout reads only files in its own folder),
  cut to the first ``--seconds`` if given.

The sensor parameters are generic guesses written before any replay, not fitted to a log:
run ``fusion calibrate`` on a log with its true poses to fit them.  One is read from the log itself, never from
its true poses: the camera's range is at least the longest range it reported for a landmark (rounded up to half a
metre), since a model that declares such a sighting impossible makes it conflict with every pose.

    python docs/mrclam/convert.py DATA_FOLDER --robot 1 --out OUT [--seconds 150]
    fusion inspect OUT/layout.toml --site OUT/case.toml
    fusion calibrate OUT/layout.toml --site OUT/case.toml        # the truth comes from the layout
"""

from __future__ import annotations

import argparse
import math
import shutil
import sys
from pathlib import Path

CASE = """[case]
name = "MRCLAM {dataset}, robot {robot}"
description = "Converted by docs/mrclam/convert.py from {source}. Leung, Halpern, Barfoot & Liu 2011, IJRR 30(8):969-974."

[site]
name = "MRCLAM arena"
origin_m = [{x0:.2f}, {y0:.2f}]
width_m = {width:.2f}
height_m = {height:.2f}
resolution_m = 0.1
headings = 36
border = false
{markers}

[[sensors]]
name = "wheels"
kind = "odometry"
sigma_per_m = 0.1
turn_sigma_per_m_deg = 5.0
turn_sigma_per_turn = 0.1

[[sensors]]
name = "camera"
kind = "markers"
rate_hz = 5.0
max_range_m = {camera_range:.1f}
fov_deg = 120.0
p_detect = 0.5
false_rate = 0.05
sigma_range_m = 0.15
sigma_bearing_deg = 5.0
reliability = 0.9
"""

LAYOUT = """# Log layout of MRCLAM robot {robot} (tables as recorded; see docs/recordings.md)
[layout]
time_unit = "s"

[[feeds]]
sensor = "wheels"
file = "{odometry}"
format = "spaces"
odometry = "velocities"
angle_unit = "rad"
[feeds.columns]
t = 1
forward = 2
turn = 3

[[feeds]]
sensor = "camera"
file = "{measurement}"
format = "spaces"
angle_unit = "rad"
not_markers = [{robots}]
[feeds.columns]
t = 1
marker = 2
range = 3
bearing = 4

[truth]
file = "{groundtruth}"
format = "spaces"
angle_unit = "rad"
[truth.columns]
t = 1
x = 2
y = 3
heading = 4
"""


CAMERA_RANGE_GUESS_M = 6.0
"""The camera's range guessed before any replay; raised to the longest landmark range the log reports."""


def rows(path: Path) -> list[list[str]]:
    return [
        line.split() for line in path.read_text().splitlines() if line.strip() and not line.lstrip().startswith("#")
    ]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("data", type=Path, help="folder with Barcodes.dat, Landmark_Groundtruth.dat and RobotN_*.dat")
    ap.add_argument("--robot", type=int, default=1)
    ap.add_argument("--out", type=Path, required=True)
    ap.add_argument("--seconds", type=float, help="keep only the first this many seconds of the robot's tables")
    args = ap.parse_args(argv)
    data, robot = args.data, args.robot
    barcode = {int(s): b for s, b in rows(data / "Barcodes.dat")}
    landmarks = {int(r[0]): (float(r[1]), float(r[2])) for r in rows(data / "Landmark_Groundtruth.dat")}
    names = {kind: f"Robot{robot}_{kind}.dat" for kind in ("Odometry", "Measurement", "Groundtruth")}
    truth = rows(data / names["Groundtruth"])
    first = min(float(rows(data / names[k])[0][0]) for k in names)
    end = first + args.seconds if args.seconds else math.inf
    xs = [float(r[1]) for r in truth if float(r[0]) <= end] + [p[0] for p in landmarks.values()]
    ys = [float(r[2]) for r in truth if float(r[0]) <= end] + [p[1] for p in landmarks.values()]
    x0, y0 = math.floor(min(xs)) - 1.0, math.floor(min(ys)) - 1.0
    width, height = math.ceil(max(xs)) + 1.0 - x0, math.ceil(max(ys)) + 1.0 - y0
    markers = "\n".join(
        f'[[site.markers]]\nid = "{barcode[s]}"\nx_m = {x:.4f}\ny_m = {y:.4f}'
        for s, (x, y) in sorted(landmarks.items())
    )
    robots = ", ".join(f'"{barcode[s]}"' for s in sorted(barcode) if s not in landmarks)
    landmark_codes = {int(barcode[s]) for s in landmarks}
    seen = [
        float(r[2]) for r in rows(data / names["Measurement"]) if float(r[0]) <= end and int(r[1]) in landmark_codes
    ]
    camera_range = max([CAMERA_RANGE_GUESS_M, *(math.ceil(2.0 * r) / 2.0 for r in seen)])
    out = args.out
    out.mkdir(parents=True, exist_ok=True)
    for name in names.values():
        if args.seconds:
            kept = [
                line
                for line in (data / name).read_text().splitlines(keepends=True)
                if line.lstrip().startswith("#") or not line.strip() or float(line.split()[0]) <= end
            ]
            (out / name).write_text("".join(kept))
        else:
            shutil.copyfile(data / name, out / name)
    source = data.name or str(data)
    (out / "case.toml").write_text(
        CASE.format(
            dataset=source,
            robot=robot,
            source=source,
            x0=x0,
            y0=y0,
            width=width,
            height=height,
            markers=markers,
            camera_range=camera_range,
        )
    )
    (out / "layout.toml").write_text(
        LAYOUT.format(
            robot=robot,
            odometry=names["Odometry"],
            measurement=names["Measurement"],
            groundtruth=names["Groundtruth"],
            robots=robots,
        )
    )
    print(f"wrote {out / 'case.toml'}, {out / 'layout.toml'} and the robot's tables", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
