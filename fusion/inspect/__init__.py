"""Incident investigation: replay a recorded log on every back end of the site and explain where and why it conflicted.

The log is streamed (JSON lines or CSV, see ``fusion.io.logs``), never loaded whole.  Records
are formed into ticks by ``fusion.io.ticks``: each reading is applied at the pose odometry gives
at its own time (an odometry record is split at the readings inside its span).  A reading the site cannot use (unknown sensor, a marker not on its map, a bad
payload) is set aside with its line and reason, like a malformed row; nothing is dropped silently.

Both back ends absorb identical readings tick by tick (one shared sensor set, so each reading is
encoded once).  Conflict episodes are found on the larger of the two conflict figures
(``fusion.monitor.episodes``); on every busy tick each back end computes leave-one-out blame, and the
pairwise conflict between the sensors' readings is computed too.  If a truth file is given the
true error is added.

Written to the output folder, each under a temporary name renamed into place when the replay
ends — also when it is interrupted (Ctrl-C), in which case the report covers what was read:
``steps.csv`` (a row per tick and back end), ``set_aside.jsonl`` (every row not used, with its
reason), ``episodes.json``, ``summary.json``, ``frames.u8`` + ``frames.json`` (coarse belief
maps of every tick, for ``fusion scrub``) and ``report.html``.

Decision support and monitoring only: not a certified safety function.
"""

from __future__ import annotations

import time
from pathlib import Path

from fusion.backends import BACKENDS
from fusion.case_model import Case
from fusion.inspect.findings import FRAME_WIDTH, MISMATCH_SHARE, STEP_COLUMNS, Inspection
from fusion.inspect.outputs import _Outputs, _write_summary
from fusion.inspect.replay import _place_start, _Replay, _ticks, _TruthCursor
from fusion.io import recording
from fusion.io.line_count import count_lines
from fusion.io.logs import ReadPosition, SetAside, require_readable
from fusion.localizer import Localizer
from fusion.monitor import Policy
from fusion.sensors.sensor_set import SensorSet

__all__ = ["Inspection", "inspect_log", "MISMATCH_SHARE", "STEP_COLUMNS", "FRAME_WIDTH"]


def inspect_log(
    case: Case,
    log_path,
    out_dir,
    *,
    truth_path=None,
    start: tuple[float, float, float] | None = None,
    backends=tuple(BACKENDS),
    frames: bool = True,
    report=None,
    progress=None,
    layout=None,
) -> Inspection:
    """Replay ``log_path`` on ``case``'s site and sensors; write the findings into ``out_dir``.

    ``progress(line, total_lines)`` is called every few ticks.  Ctrl-C ends the replay early: the
    files and the report then cover the lines read so far (``Inspection.interrupted``).  ``report(found,
    case, out_dir) -> file name`` draws the incident report (``fusion.view.inspect_report.write_report``;
    None: no report), so that the job imports no view.  ``layout`` (a
    ``fusion.io.layout.Layout``) reads a robot's own recording; its ``[truth]`` table scores the replay
    when no ``truth_path`` is given."""
    began = time.perf_counter()
    log_path, out_dir = Path(log_path), Path(out_dir)
    if layout is None or layout.needs_recording:
        require_readable(log_path, "log")  # a missing or unreadable file is refused before anything is written
    if truth_path is not None:
        require_readable(truth_path, "truth file")
    scored = truth_path is not None or (layout is not None and layout.truth is not None)
    total_lines = count_lines(log_path) if layout is None else None  # None for a pipe: read once, by the replay
    grid = case.site.grid(case.headings)
    sensors = SensorSet(case.site, grid, case.sensors)
    policy = Policy(**case.run.policy)
    locs = _localizers(case, sensors, policy, backends)
    found = Inspection(str(log_path), case.site.name, tuple(backends), truth=scored)
    position = ReadPosition()
    truth_rows: list[SetAside] = []
    truth = _TruthCursor(recording.truth(truth_path, layout, truth_rows)) if scored else None
    found.start = _place_start(locs, start, truth)  # a start off the site is refused before anything is written
    out_dir.mkdir(parents=True, exist_ok=True)
    out = _Outputs(out_dir, frames)
    replay = _Replay(case, sensors, locs, policy, found, out)
    try:
        records = recording.observations(log_path, layout, replay.set_aside, position)
        odometry = sensors.odometry.name if sensors.odometry else None
        for group in _ticks(records, found, odometry, case.run.tick_s):
            replay.tick(group, truth)
            if progress is not None and found.ticks % 8 == 0:
                progress(max(line for line, _ in group), total_lines)
    except KeyboardInterrupt:
        found.interrupted = True
        found.warnings.append(f"the replay was interrupted after {found.ticks:,} ticks: the report covers those only")
    except BaseException:
        out.abandon()
        raise
    found.lines = position.lines
    _finish(found, case, replay, out, truth_rows, frames, report, began)
    found.files.sort()
    if progress is not None:
        progress(found.lines, found.lines)
    return found


def _localizers(case: Case, sensors: SensorSet, policy: Policy, backends) -> dict:
    """One localizer per back end on the same sensor set, explaining every busy tick (leave-one-out blame)."""
    run = case.run
    return {
        b: Localizer(b, sensors, policy, rule=run.rule, max_focal=run.max_focal, motion=run.motion, explain=True)
        for b in backends
    }


def _finish(found: Inspection, case: Case, replay, out, truth_rows, frames: bool, report, began: float) -> None:
    """Close the replay: its findings, the truth rows set aside, the files renamed into place, the summary and
    the report."""
    replay.finish()
    for row in truth_rows:
        found.warnings.append(f"truth {row.where} set aside: {row.reason}")
        if len(found.warnings) > 20:
            break
    found.files = out.close()
    found.files += replay.write_frames_index(out.dir) if frames else []
    found.seconds = time.perf_counter() - began
    _write_summary(found, out.dir)
    if report:
        found.files.append(report(found, case, out.dir))
