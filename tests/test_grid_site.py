import math

import numpy as np
import pytest

from fusion.errors import PoseError, ResourceError, SiteError
from fusion.grid import PoseGrid
from fusion.places.graph import PlaceGraph
from fusion.site import Door, Marker, SiteMap


def test_cell_and_pose_round_trip():
    g = PoseGrid(60.0, 40.0, 0.25, 36)
    assert g.shape == (36, 160, 240) and g.n_cells == 1_382_400
    cell = g.cell_of(12.3, 7.9, math.radians(95))
    x, y, h = g.pose_of(cell)
    assert abs(x - 12.375) < 1e-12 and abs(y - 7.875) < 1e-12 and abs(math.degrees(h) - 100) < 1e-9
    xs, ys, hs = g.poses_of([cell, 0])
    assert g.cells_of(xs, ys, hs).tolist() == [cell, 0]
    assert g.cell_of(0.0, 0.0, 2 * math.pi) == 0  # headings wrap


@pytest.mark.parametrize(
    "pose, message",
    [
        ((61.0, 1.0, 0.0), "off the site"),
        ((1.0, -0.1, 0.0), "off the site"),
        ((1.0, 1.0, float("nan")), "heading must be a finite number"),
    ],
)
def test_bad_poses_are_refused(pose, message):
    with pytest.raises(PoseError, match=message):
        PoseGrid(60.0, 40.0, 0.25, 36).cell_of(*pose)


def test_a_grid_too_large_is_refused_with_the_figure():
    with pytest.raises(ResourceError, match=r"needs 138,240,000 cells, about 5\.1 GiB"):
        PoseGrid(600.0, 400.0, 0.25, 36)
    with pytest.raises(SiteError, match="resolution_m must be a positive"):
        PoseGrid(10.0, 10.0, 0.0)
    with pytest.raises(PoseError):
        PoseGrid(10.0, 10.0, 1.0, 1).pose_of(100)


def test_distance_field_matches_brute_force():
    # Reference: the Euclidean distance to the nearest occupied cell centre, by brute force with numpy.
    site = SiteMap.empty(5.0, 4.0, 0.5).with_box(2.0, 1.5, 3.0, 2.5)
    yy, xx = np.nonzero(site.occupied)
    g = site.grid(1)
    cx, cy = np.meshgrid(g.x_centres(), g.y_centres())
    occ_x, occ_y = g.x_centres()[xx], g.y_centres()[yy]
    brute = np.sqrt((cx[..., None] - occ_x) ** 2 + (cy[..., None] - occ_y) ** 2).min(axis=-1)
    # the field measures to the obstacle's face: half a cell less than to its centre, never below 0
    np.testing.assert_allclose(site.distance_m, np.maximum(brute - 0.25, 0.0), atol=1e-12)


def test_distance_field_beyond_the_map_measures_to_the_border_wall():
    # Plain geometry: a point i cells past a walled map's edge lies i cells from the wall's outer face
    # (the face a return ends on is half a cell from the wall cell's centre); inside, the padded field
    # is the map's own.  Same brute-force reference as above.
    site = SiteMap.empty(5.0, 4.0, 0.5, border=True)
    pad = 3
    beyond = site.distance_beyond(pad)
    assert beyond.shape == (site.occupied.shape[0] + 2 * pad, site.occupied.shape[1] + 2 * pad)
    np.testing.assert_allclose(beyond[pad:-pad, pad:-pad], site.distance_m, atol=1e-12)
    mid = beyond.shape[1] // 2
    for i in range(1, pad + 1):  # straight up from the top border, away from the corners
        assert abs(beyond[pad + site.occupied.shape[0] - 1 + i, mid] - (i * 0.5 - 0.25)) < 1e-12


def test_doors_and_markers_must_be_on_the_map():
    with pytest.raises(SiteError, match="door 'D9' at \\(30.0 m, 1.0 m\\) is off the map"):
        SiteMap.empty(20.0, 10.0, 0.5, doors=(Door("D9", 30.0, 1.0, 0.0),))
    with pytest.raises(SiteError, match="appears twice"):
        SiteMap.empty(20.0, 10.0, 0.5, markers=(Marker("A", 1, 1), Marker("A", 2, 2)))
    site = SiteMap.empty(20.0, 10.0, 0.5, markers=(Marker("A", 1, 1),))
    with pytest.raises(SiteError, match="marker 'B' is not on the map"):
        site.marker("B")


def test_door_zone_is_on_the_open_side():
    site = SiteMap.empty(10.0, 10.0, 0.5, doors=(Door("D", 5.0, 5.0, facing_deg=0.0, radius_m=1.5),))
    zone = site.door_zone(site.doors[0])
    g = site.grid(1)
    xs = g.x_centres()[np.nonzero(zone)[1]]
    assert zone.any() and (xs >= 5.0 - 0.25).all()


def test_ray_range_to_a_wall():
    site = SiteMap.empty(10.0, 4.0, 0.25)
    assert abs(site.ray_range(2.0, 2.0, 0.0, 20.0) - 7.75) <= 0.0625 + 1e-9  # wall cells start at x = 9.75
    assert site.ray_range(2.0, 2.0, 0.0, 3.0) == 3.0


def test_place_graph():
    # Shortest paths checked by hand on a four-place loop.
    graph = PlaceGraph(
        ("dock", "aisle A", "aisle B", "charger"),
        (("dock", "aisle A", 10.0), ("aisle A", "aisle B", 4.0), ("dock", "charger", 3.0), ("charger", "aisle B", 5.0)),
    )
    d = graph.distances()
    assert d[graph.cell_of("dock"), graph.cell_of("aisle B")] == 8.0
    assert d[graph.cell_of("aisle A"), graph.cell_of("charger")] == 9.0
    assert graph.pose_of(3) == "charger" and graph.n_cells == 4
    with pytest.raises(PoseError, match="unknown place 'roof'"):
        graph.cell_of("roof")
    with pytest.raises(SiteError, match="unknown place 'lift'"):
        PlaceGraph(("dock",), (("dock", "lift", 2.0),))
