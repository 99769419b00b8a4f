"""Incident replay: tolerant log ingest (JSON lines and CSV), episodes, attribution, scrubbing, interruption.

The attribution checks use the simulator's injected faults as the known answer: the sensor made
faulty is the one the replay must blame.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import json
from pathlib import Path

import pandas as pd
import pytest
from rich.console import Console

from fusion.backends import BACKENDS
from fusion.cli import main
from fusion.inspect import inspect_log
from fusion.io.case import load_case
from fusion.io.logs import CSV_COLUMNS, iter_observations
from fusion.monitor.episodes import EpisodeFinder, blame_shares
from fusion.runner import log_text
from fusion.simulate import simulate
from fusion.view.inspect_report import write_report
from fusion.view.scrub import scrub

TINY = Path(__file__).parent / "data" / "tiny.toml"

STUCK = """
[[sensors.faults]]
kind = "stuck"
value = true
start_s = 6.0
end_s = 14.0
"""


@pytest.fixture(scope="module")
def tiny_log(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tiny-log")
    log, truth = log_text(simulate(load_case(TINY)))
    (folder / "log.jsonl").write_text(log)
    (folder / "truth.jsonl").write_text(truth)
    return folder


def _stuck_case(tmp_path: Path) -> Path:
    """The test bay with its door contact stuck active while the robot is far from the door."""
    text = TINY.read_text().replace('door = "bay door"\nrate_hz = 2.0\n', 'door = "bay door"\nrate_hz = 2.0\n' + STUCK)
    assert STUCK in text
    path = tmp_path / "stuck.toml"
    path.write_text(text)
    return path


def _csv_of(jsonl: Path, out: Path) -> None:
    """The same log as a CSV written by pandas (an outside writer), one observation a row."""
    rows = []
    for line in jsonl.read_text().splitlines():
        rec = json.loads(line)
        if "ranges_m" in rec:
            rec["ranges_m"] = ";".join(repr(v) for v in rec["ranges_m"])
        if rec["kind"] == "markers" and rec.get("marker") is None:
            rec["marker"] = ""
        if "active" in rec:
            rec["active"] = "true" if rec["active"] else "false"
        rows.append(rec)
    pd.DataFrame(rows, columns=list(CSV_COLUMNS)).to_csv(out, index=False)


def test_a_csv_log_written_by_pandas_reads_as_the_json_lines_log(tiny_log, tmp_path):
    _csv_of(tiny_log / "log.jsonl", tmp_path / "log.csv")
    aside_json, aside_csv = [], []
    from_json = [o.to_record() for _, o in iter_observations(tiny_log / "log.jsonl", aside_json)]
    from_csv = [o.to_record() for _, o in iter_observations(tmp_path / "log.csv", aside_csv)]
    assert aside_json == [] and aside_csv == []
    assert from_csv == from_json and len(from_json) > 200


def test_csv_rows_keep_their_line_numbers_when_set_aside(tmp_path):
    path = tmp_path / "log.csv"
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["t", "sensor", "kind", "forward_m", "turn_deg", "active"])
        w.writerow([0.0, "wheels", "odometry", 0.1, 0.0, ""])
        w.writerow([0.25, "wheels", "odometry", "fast", 0.0, ""])  # line 3: not a number
        w.writerow([0.5, "contact", "door", "", "", "maybe"])  # line 4: not a flag
        w.writerow([0.75, "wheels"])  # line 5: too few cells
    aside = []
    good = list(iter_observations(path, aside))
    assert [line for line, _ in good] == [2]
    assert [(s.line, s.reason.split(" ")[0]) for s in aside] == [(3, "field"), (4, "field"), (5, "2")]


def _corrupt(src: Path, dst: Path, share: float = 0.1) -> set[int]:
    """Every tenth line damaged in one of five ways; returns the damaged line numbers."""
    lines = src.read_text().splitlines()
    damaged = set()
    for i in range(3, len(lines), round(1 / share)):
        rec = json.loads(lines[i])
        way = len(damaged) % 5
        if way == 0:
            lines[i] = lines[i][: len(lines[i]) // 2]  # cut mid-line
        elif way == 1:
            lines[i] = lines[i].replace(f'"t": {rec["t"]}', '"t": NaN')
        elif way == 2:
            rec["sensor"] = "spare lidar"
            lines[i] = json.dumps(rec)
        elif way == 3:
            rec["t"] = -5.0
            lines[i] = json.dumps(rec)
        else:
            rec.pop("kind")
            lines[i] = json.dumps(rec)
        damaged.add(i + 1)
    dst.write_text("\n".join(lines) + "\n")
    return damaged


def test_a_log_with_a_tenth_of_its_rows_corrupted_still_gives_a_report_listing_them(tiny_log, tmp_path):
    damaged = _corrupt(tiny_log / "log.jsonl", tmp_path / "bad.jsonl")
    found = inspect_log(
        load_case(TINY),
        tmp_path / "bad.jsonl",
        tmp_path / "out",
        truth_path=tiny_log / "truth.jsonl",
        report=write_report,
    )
    listed = {json.loads(line)["line"] for line in (tmp_path / "out" / "set_aside.jsonl").read_text().splitlines()}
    assert listed == damaged and found.set_aside == len(damaged)
    assert found.ticks > 50 and found.errors  # the replay went on, with the true error
    page = (tmp_path / "out" / "report.html").read_text()
    assert all(f"<tr><td>{n}</td>" in page for n in damaged)
    assert "not a certified safety function" in page
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["set_aside"] == len(damaged) and "unknown sensor" in summary["set_aside_reasons"]
    assert not list((tmp_path / "out").glob(".*"))  # no temporary file left behind


def test_a_log_from_another_site_is_reported(tiny_log, tmp_path):
    text = (tiny_log / "log.jsonl").read_text().replace('"R-west"', '"Q-17"').replace('"R-east"', '"Q-18"')
    (tmp_path / "elsewhere.jsonl").write_text(text)
    found = inspect_log(load_case(TINY), tmp_path / "elsewhere.jsonl", tmp_path / "out", frames=False)
    assert found.warnings and "another site" in found.warnings[0]
    assert found.reasons["marker not on the map"] > 0


def test_the_stuck_contact_is_ranked_first(tmp_path):
    case = load_case(_stuck_case(tmp_path))
    for seed in (1, 2, 3):
        seeded = dataclasses.replace(case, run=dataclasses.replace(case.run, seed=seed))
        log, truth = log_text(simulate(seeded))
        (tmp_path / "log.jsonl").write_text(log)
        (tmp_path / "truth.jsonl").write_text(truth)  # the replay starts from the first true pose
        found = inspect_log(
            seeded,
            tmp_path / "log.jsonl",
            tmp_path / f"out{seed}",
            truth_path=tmp_path / "truth.jsonl",
            frames=False,
            report=False,
        )
        assert found.ranking()[0][0] == "contact", f"seed {seed}: {found.ranking()}"
        during = [e for e in found.episodes if e.start_t <= 14.0 and e.end_t >= 6.0]
        worst = max(during, key=lambda e: e.severity)
        assert worst.shares()[0][0] == "contact", f"seed {seed}: episode {worst.number}: {worst.shares()}"
        assert any(a == "contact" or b == "contact" for a, b, _ in worst.pairwise())


def test_the_report_maps_carry_the_truth_and_each_estimate_at_their_moment(tmp_path):
    # The belief maps of the incident report mark the true position (from the truth file, the simulator's own
    # record) and each back end's estimate at the very tick drawn; the estimate is the steps.csv row's.
    case = load_case(_stuck_case(tmp_path))
    log, truth = log_text(simulate(case))
    (tmp_path / "log.jsonl").write_text(log)
    (tmp_path / "truth.jsonl").write_text(truth)
    found = inspect_log(
        case,
        tmp_path / "log.jsonl",
        tmp_path / "out",
        truth_path=tmp_path / "truth.jsonl",
        frames=False,
        report=write_report,
    )
    assert found.maps and list((tmp_path / "out").glob("maps_episode*.png"))
    true_at = {round(r["t"], 6): (r["x_m"], r["y_m"]) for r in map(json.loads, truth.splitlines())}
    steps = pd.read_csv(tmp_path / "out" / "steps.csv")
    for moments in found.maps.values():
        for m in moments.values():
            assert m.truth == pytest.approx(true_at[round(m.t, 6)])
            for b, (x, y) in m.estimates.items():
                row = steps[(steps.backend == b) & ((steps.t - m.t).abs() < 1e-6)].iloc[0]
                assert (x, y) == pytest.approx((row.x_m, row.y_m), abs=1e-3)


def test_episodes_open_at_the_threshold_and_close_after_quiet_ticks():
    finder = EpisodeFinder(open_k=0.8, keep_k=0.4, quiet_ticks=2)
    trace = [0.1, 0.85, 0.5, 0.3, 0.6, 0.95, 0.2, 0.1, 0.7, 0.2]  # 0.7 alone does not open a new one
    closed = []
    for tick, k in enumerate(trace):
        _, done = finder.add(tick, tick * 0.25, tick + 1, {"bayes": k, "evidential": k / 2})
        closed += [done] if done else []
    assert finder.finish() is None
    assert len(closed) == 1
    ep = closed[0]
    assert (ep.start_tick, ep.peak_tick, ep.end_tick, ep.ticks) == (1, 5, 5, 4)
    assert ep.peak == {"bayes": 0.95, "evidential": 0.475}
    assert ep.severity == pytest.approx(0.85 + 0.5 + 0.6 + 0.95)


def test_blame_shares_weigh_each_back_end_alike():
    shares = dict(blame_shares({"bayes": {"a": 9.0, "b": 1.0}, "evidential": {"a": 0.1, "b": 0.1, "c": -0.5}}))
    assert shares == pytest.approx({"a": 0.7, "b": 0.3, "c": 0.0})


def test_scrubbing_moves_by_the_keys(tiny_log, tmp_path):
    found = inspect_log(
        load_case(TINY),
        tiny_log / "log.jsonl",
        tmp_path / "out",
        truth_path=tiny_log / "truth.jsonl",
        report=write_report,
    )
    console = Console(file=io.StringIO(), width=130, record=True)
    view = scrub(tmp_path / "out", console, keys=iter(["l", "l", "]", "h", "G"]))
    assert view.tick == found.ticks - 1
    view = scrub(tmp_path / "out", console, keys=iter(["l", "[", "g", " ", "right", "left", "q", "l"]))
    assert view.tick == 1  # stopped at q
    text = console.export_text()
    assert "Bayesian histogram filter" in text and "Dempster–Shafer mass filter" in text
    if found.episodes:
        view = scrub(tmp_path / "out", console, keys=iter(["n"]))
        assert view.tick == found.episodes[0].start_tick and view.episode_here() is not None


def test_an_interrupted_replay_leaves_complete_files(tiny_log, tmp_path):
    calls = []

    def stop_after_a_while(line, total):
        calls.append(line)
        if len(calls) == 3:
            raise KeyboardInterrupt

    found = inspect_log(
        load_case(TINY), tiny_log / "log.jsonl", tmp_path / "out", progress=stop_after_a_while, report=write_report
    )
    assert found.interrupted and 0 < found.ticks < 77
    out = tmp_path / "out"
    steps = pd.read_csv(out / "steps.csv")
    assert len(steps) == len(BACKENDS) * found.ticks and set(steps["backend"]) == set(BACKENDS)  # every family
    assert json.loads((out / "summary.json").read_text())["interrupted"] is True
    assert (out / "report.html").exists() and not list(out.glob(".*"))
    index = json.loads((out / "frames.json").read_text())
    assert index["ticks"] == found.ticks
    assert (out / "frames.u8").stat().st_size == found.ticks * len(BACKENDS) * index["shape"][0] * index["shape"][1]


def test_without_a_truth_file_there_is_no_true_error(tiny_log, tmp_path):
    found = inspect_log(load_case(TINY), tiny_log / "log.jsonl", tmp_path / "out", frames=False)
    assert not found.errors and found.start.startswith("anywhere")
    assert json.loads((tmp_path / "out" / "summary.json").read_text())["true_error_m"] is None


def test_inspect_command_prints_the_summary(tiny_log, tmp_path, capsys):
    code = main(
        [
            "inspect",
            str(tiny_log / "log.jsonl"),
            "--site",
            str(TINY),
            "--truth",
            str(tiny_log / "truth.jsonl"),
            "--out",
            str(tmp_path / "out"),
            "--quiet",
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "Conflict episodes" in out and "not a certified safety function" in out and "fusion scrub" in out


@pytest.mark.parametrize(
    "argv, words",
    [
        (["--start", "1,2"], "--start must be x,y,heading_deg"),
        (["--start", "100,100,0"], "off the site"),
    ],
)
def test_inspect_command_refuses_bad_options(tiny_log, tmp_path, capsys, argv, words):
    code = main(
        ["inspect", str(tiny_log / "log.jsonl"), "--site", str(TINY), "--out", str(tmp_path / "o"), "--quiet", *argv]
    )
    assert code == 2 and words in capsys.readouterr().err


def test_inspect_command_refuses_a_missing_log(tmp_path, capsys):
    code = main(["inspect", str(tmp_path / "nope.jsonl"), "--site", str(TINY), "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert code == 2 and "nope.jsonl" in err and "cannot read the log" in err
    assert not (tmp_path / "o").exists()
