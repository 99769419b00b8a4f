"""The terminal views at the sizes people use: nothing cut off at 80×24, the space used at 120×40, walls kept
when the map is shrunk.  (Our own conventions; no outside source.)"""

from __future__ import annotations

import numpy as np
import pytest
from rich.console import Console

from fusion.belief.coarse import coarse_plane
from fusion.io.case import load_case
from fusion.runner import run_case
from tests.test_case import TINY


@pytest.fixture(scope="module")
def view():
    from fusion.view.live import RunView

    case = load_case(TINY)
    v = RunView(case, case.run.backends, 77)  # every family: four panels, two to a row when narrow
    run_case(case, on_tick=v.on_tick)
    return v


@pytest.mark.parametrize("width, height", [(80, 24), (120, 40), (200, 60)])
def test_the_live_view_fits_the_terminal_and_keeps_progress_and_actions_visible(view, width, height):
    console = Console(width=width, height=height, record=True)
    console.print(view)
    lines = console.export_text().splitlines()
    assert len(lines) <= height and max(len(line) for line in lines) <= width
    text = "\n".join(lines)
    assert "77/77 ticks" in text and "monitor actions" in text and "◆ truth" in text


def test_the_particles_and_the_gaussian_ellipse_are_drawn_over_their_maps(view):
    """The sampling and Gaussian back ends give the view points to draw (``Backend.overlay``); the legend names
    them.  The ellipse's points lie at squared Mahalanobis distance χ²₂(0.95) from the mean (scipy's quantile);
    smaller than a character, it hides under the estimate's mark, so only the particles are asserted on screen."""
    from scipy.stats import chi2

    from fusion.backends import build

    console = Console(width=200, height=60, record=True)
    console.print(view)
    assert "∘ particles or 95% ellipse" in console.export_text()
    panel = Console(width=100, height=40, record=True)
    panel.print(view._panel("particles", 40))
    assert "∘" in panel.export_text()
    f = build("gaussian", view.case.site.grid(view.case.headings))
    f.reset(f.view.density(_gaussian(2.0, 3.0)))
    g = f.gaussian
    d = f.overlay().points - g.mean[:2]
    m2 = np.einsum("ki,ij,kj->k", d, np.linalg.inv(g.cov[:2, :2]), d)
    np.testing.assert_allclose(m2, chi2.ppf(0.95, 2), rtol=1e-3)
    bayes = Console(width=100, height=40, record=True)
    bayes.print(view._panel("bayes", 40))
    assert "∘" not in bayes.export_text()


def _gaussian(x, y):
    from fusion.belief.gaussian import PoseGaussian

    return PoseGaussian(np.array([x, y, 0.5]), np.diag([0.6**2, 0.4**2, 0.1**2]))


def test_a_wider_terminal_gets_a_wider_map(view):
    from fusion.view.live import RunView

    narrow, wide = view._map_width(40, 24), view._map_width(120, 60)
    assert wide > narrow
    single = RunView(view.case, ("bayes",), 1)
    assert single._map_width(200, 60) >= view._map_width(100, 60)  # one back end gets the full width


def test_shrinking_a_map_never_drops_a_thin_wall():
    # A wall one cell thick, every fourth column: at any character width it must still show.
    occupied = np.zeros((40, 200), dtype=bool)
    occupied[:, ::4] = True
    for width in (10, 23, 44, 77):
        _, wall, step = coarse_plane(np.ones(occupied.shape), occupied, width)
        for column in range(0, 200, 4):
            assert wall[:, column // step].all(), (width, column)


def _printed(parts, width: int) -> str:
    console = Console(width=width, record=True)
    for part in parts:
        console.print(part)
    return console.export_text()


@pytest.mark.parametrize("width", [80, 120])
def test_bench_and_fidelity_tables_fit_without_cutting_a_name(width):
    from fusion.bench import BenchRow
    from fusion.fidelity import FidelityRow
    from fusion.view.tables import bench_table, fidelity_table

    note = "odometry kernel convolution as Bayes, then the region size of the belief over every cell of the grid"
    rows = [
        BenchRow(
            "240×160×36 (1,382,400 cells)",
            "evidential focal sets",
            "predict (probabilistic)",
            5.7,
            0.2,
            29.3,
            None,
            note,
        ),
        BenchRow("100×100×36 (360,000 cells)", "bayes", "update", 0.4, 0.2, 1.93, 1.0, "target ≤ 3× floor"),
    ]
    fidelity = [FidelityRow("plausibility transform", "contour (running max under motion)", 0.158, "TV", note)]
    text = _printed([*bench_table(rows, width), *fidelity_table(fidelity, width)], width)
    assert max(len(line) for line in text.splitlines()) <= width
    for whole in ("evidential focal sets", "predict (probabilistic)", "plausibility transform", "1,382,400 cells"):
        assert whole in text
    assert " ".join(note.split()) in " ".join(text.split())  # the note as a sentence, wrapped between words


def test_calibration_tables_keep_parameter_names_whole_at_80_columns():
    from types import SimpleNamespace

    from fusion.calibration.output import ParameterEstimate, SensorCalibration
    from fusion.view.tables import calibration_tables

    case = load_case(TINY)
    entry = SensorCalibration("wheels", "odometry", ["nuts"], 400)
    for name in ("sigma_per_m", "turn_sigma_per_m_deg", "turn_sigma_per_turn"):
        entry.parameters[name] = ParameterEstimate(0.0123, 0.0101, 0.0145, 1.001, 812.0)
    text = _printed(calibration_tables(SimpleNamespace(summary=[entry]), case), 80)
    assert max(len(line) for line in text.splitlines()) <= 80
    assert all(name in text for name in entry.parameters)
