"""Hostile case files and names: refused before work with file, line and field, or run and shown literally.

Each refusal below is one that ``fusion check`` used to accept and ``fusion run`` then failed on, or
that ran out of memory or time; each figure a refusal quotes comes from ``fusion.budget``.  The
rendering checks use rich's documented markup escaping (``rich.markup.escape``) as the reference: a
name printed through ``fusion.text.literal`` must come out character for character.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest
from rich.console import Console

from fusion.cli import main
from fusion.errors import InputFileError
from fusion.io.case import load_case, parse_case
from fusion.io.toml_lines import key_lines
from fusion.localizer import Localizer
from fusion.monitor import Policy
from fusion.sensors.sensor_set import SensorSet
from fusion.text import MAX_NAME_CHARS, literal, plain

TINY = Path(__file__).parent / "data" / "tiny.toml"
TEXT = TINY.read_text()


def _with(*edits: tuple[str, str]) -> str:
    text = TEXT
    for old, new in edits:
        assert old in text
        text = text.replace(old, new, 1)
    return text


@pytest.mark.parametrize(
    "edits, field",
    [
        ((("wall_spread_m = 0.15", "wall_spread_m = 0.0"),), "sensors[1].wall_spread_m"),
        ((("bearings_deg = [-90.0, 0.0, 90.0]", "bearings_deg = []"),), "sensors[1].bearings_deg"),
        ((('kind = "markers"', 'kind = "markers"\nfov_deg = 0'),), "sensors[2].fov_deg"),
        ((('kind = "markers"', 'kind = "markers"\np_detect = 2'),), "sensors[2].p_detect"),
        (
            (("wall_spread_m = 0.15", "wall_spread_m = 0.15\nwall_share = 0.8\nearly_share = 1.2"),),
            "sensors[1].early_share",
        ),
        ((("wall_spread_m = 0.15", "wall_spread_m = 0.15\nstray_share = 0.5"),), "sensors[1].wall_share"),  # sum 1.45
        ((("wall_spread_m = 0.15", "wall_spread_m = 0.15\nlevels = 1000000000000"),), "sensors[1].levels"),
        ((('name = "ranger"', 'name = "' + "r" * (MAX_NAME_CHARS + 1) + '"'),), "sensors[1].name"),
        ((('name = "test bay"', 'name = "bay\\u001b[2J"'),), "case.name"),
        (  # the door's zone walled in: its contact could never read true
            (("boxes = [[4.0, 2.5, 6.0, 3.5]]", "boxes = [[4.0, 2.5, 6.0, 3.5], [0, 1.6, 2.2, 4.4]]"),),
            "sensors[3].door",
        ),
    ],
)
def test_what_a_sensor_model_would_refuse_is_refused_by_check_with_line_and_field(edits, field):
    with pytest.raises(InputFileError) as caught:
        parse_case(_with(*edits), "hostile.toml")
    assert caught.value.field == field and caught.value.line


@pytest.mark.parametrize(
    "edits, words",
    [
        (  # 1 cm cells: the marker sensor's line-of-sight test alone would take tens of GiB
            (("resolution_m = 0.5", "resolution_m = 0.01"), ("headings = 12", "headings = 1")),
            "GiB (77 ticks; most for the line-of-sight test of camera",
        ),
        ((("speed_mps = 1.0", "speed_mps = 0.0001"),), "ticks of 0.25 s; the limit is 100,000"),
        (
            (
                ("seed = 3", 'seed = 3\nrule = "yager"\nmax_focal = 4096'),
                ("resolution_m = 0.5", "resolution_m = 0.1"),
                ("headings = 12", "headings = 36"),
            ),
            "most for the evidential back end",
        ),
        (
            (("resolution_m = 0.5", "resolution_m = 0.1"), ("headings = 12", "headings = 72")),
            "min (77 ticks; most for the",
        ),
        ((("width_m = 10.0", "width_m = 1e300"),), "cells, about"),
    ],
)
def test_cases_beyond_the_budgets_are_refused_with_the_figure(edits, words):
    text = _with(*edits)
    if "headings = 72" in text:  # 2,880 beams on a fine grid: 257 s of processor time measured here
        text = text.replace("bearings_deg = [-90.0, 0.0, 90.0]", f"bearings_deg = {[i * 0.125 for i in range(2880)]}")
    with pytest.raises(InputFileError, match="needs|takes") as caught:
        parse_case(text, "big.toml")
    assert words in str(caught.value)


def test_an_endless_case_file_is_refused_after_the_size_limit():
    with pytest.raises(InputFileError, match="limited to"):
        load_case("/dev/zero")


def test_a_site_whose_width_is_not_a_whole_number_of_cells_checks_and_runs(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)  # check draws the site into the current folder
    text = _with(
        ("width_m = 10.0", "width_m = 10.3\nborder = false"),
        ("[1.5, 4.5]]", "[1.5, 4.5], [10.2, 4.5]]"),  # the last waypoint lies in the last, partial cell
    )
    path = tmp_path / "partial.toml"
    path.write_text(text)
    assert main(["check", str(path)]) == 0
    assert main(["run", str(path), "--quiet", "--out", str(tmp_path / "o"), "--backend", "bayes"]) == 0


HOSTILE_NAMES = ["[/]", "[bold red]x[/]", "[link=file:///etc]y", "a\\[b]", "$x_{1", "50% [ok]", "tab\tnew\nline"]


@pytest.mark.parametrize("name", HOSTILE_NAMES)
def test_names_print_literally_through_rich(name):
    console = Console(record=True, width=200, color_system=None)
    console.print(literal(name))
    assert console.export_text().rstrip("\n") == plain(name)


def test_markup_and_plot_maths_in_names_reach_the_report_literally(tmp_path, capsys):
    text = _with(('name = "test bay"', 'name = "[/] bay $x_{"'))
    text = text.replace('"camera"', '"cam$era [/]"')
    path = tmp_path / "odd.toml"
    path.write_text(text)
    assert main(["run", str(path), "--quiet", "--out", str(tmp_path / "run")]) == 0
    out = capsys.readouterr().out
    assert "[/] bay $x_{" in out
    log = tmp_path / "run" / "observations.jsonl"
    code = main(["inspect", str(log), "--site", str(path), "--out", str(tmp_path / "ins"), "--quiet"])
    assert code == 0 and (tmp_path / "ins" / "report.html").exists()


def test_blame_costs_one_pass_per_sensor_not_per_reading(monkeypatch):
    case = load_case(TINY)
    loc = Localizer("bayes", SensorSet(case.site, case.site.grid(case.headings), case.sensors), Policy(), explain=True)
    loc.start_anywhere()
    from fusion.io.observations import from_record

    burst = [
        from_record({"t": 1.0, "sensor": "ranger", "kind": "ranging", "ranges_m": [1.0, 2.0, 3.0]})
        if i % 2
        else from_record({"t": 1.0, "sensor": "contact", "kind": "door", "active": True})
        for i in range(400)
    ]
    calls = []
    real = loc.filter.joint_conflict
    monkeypatch.setattr(loc.filter, "joint_conflict", lambda *a: calls.append(1) or real(*a))
    d = loc.step(None, burst)
    assert len({s for s, _ in d.blame}) == len(d.blame) <= 2  # one entry per sensor
    assert len(calls) <= 1 + 2 + 2  # the whole tick, once without each sensor, and the monitor's own look


def test_the_toml_line_finder_is_linear_in_the_line_length():
    def seconds(n: int) -> float:
        text = "[" + " " * n + '"]"\n' + " " * n + '"]" = 1\n' + "a" + " ." * n + "\n"
        best = float("inf")
        for _ in range(3):
            start = time.process_time()
            key_lines(text)
            best = min(best, time.process_time() - start)
        return max(best, 1e-4)

    small, large = seconds(2_000), seconds(32_000)
    assert large / small < 64  # linear: about 16; the old pattern was cubic (about 4,000)


@pytest.mark.parametrize(
    "argv",
    [
        ["run", str(TINY), "--seed", "-5"],
        ["run", str(TINY), "--seed", str(2**64)],
        ["compare", str(TINY), "--seeds", "1000000"],
        ["compare", str(TINY), "--workers", "100000"],
        ["calibrate", "log", "--truth", "t", "--site", str(TINY), "--samples", "5000000000"],
        ["calibrate", "log", "--truth", "t", "--site", str(TINY), "--chains", "1000"],
    ],
)
def test_counts_and_seeds_out_of_range_are_refused_at_the_command_line(argv, capsys):
    with pytest.raises(SystemExit) as caught:
        main(argv)
    assert caught.value.code == 2 and "expected" in capsys.readouterr().err


def test_a_command_that_holds_a_whole_log_refuses_one_beyond_its_bound(tmp_path, monkeypatch):
    from fusion.io import logs

    path = tmp_path / "log.jsonl"
    path.write_text("".join(f'{{"t": {i}, "sensor": "contact", "kind": "door", "active": false}}\n' for i in range(30)))
    monkeypatch.setattr(logs, "MAX_HELD_RECORDS", 10)
    with pytest.raises(InputFileError, match="more than 10 observations"):
        logs.read_observations(path)
