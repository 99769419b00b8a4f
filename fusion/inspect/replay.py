"""The replay itself: ticks of a log on every back end, episodes, blame, the per-tick rows and frames."""

from __future__ import annotations

import dataclasses
import heapq
import json
import math
from array import array
from collections import defaultdict
from pathlib import Path

import numpy as np

from fusion import __version__
from fusion.belief.coarse import coarse_plane
from fusion.case_model import Case
from fusion.conflict import pairwise_conflict
from fusion.errors import FusionError
from fusion.inspect.findings import (
    FRAME_WIDTH,
    KEEP_MAPS,
    MISMATCH_SHARE,
    PAIR_TICKS,
    SET_ASIDE_WARN,
    Inspection,
    Moment,
)
from fusion.inspect.outputs import _fmt, _Outputs
from fusion.io.logs import SetAside
from fusion.io.mcap_feed import CUT_REASON
from fusion.io.observations import Observation
from fusion.io.outdir import atomic_write
from fusion.io.start_pose import ANYWHERE
from fusion.io.ticks import form_ticks
from fusion.localizer import Localizer
from fusion.monitor import CARRY_ON, Policy
from fusion.monitor.episodes import Episode, EpisodeFinder
from fusion.scoring import time_to_hold
from fusion.sensors.markers import MarkerSighting
from fusion.sensors.odometry import check_odometry_step
from fusion.sensors.sensor_set import SensorSet
from fusion.step_row import decision_cells, pose_errors


def _ticks(records, found: Inspection, odometry: str | None, min_tick_s: float):
    """The ticks of ``(line, observation)`` records (``fusion.io.ticks``), counting the records read."""

    def counted():
        for item in records:
            found.records += 1
            yield item

    yield from form_ticks(counted(), lambda obs: obs.moves and obs.sensor == odometry, min_tick_s)


def _place_start(locs: dict, start, truth) -> str:
    """Start every back end at the given pose, else at the first true pose, else anywhere in free space."""
    first = truth.first() if truth is not None else None
    if start == ANYWHERE:
        first = None
    elif start is not None:
        for loc in locs.values():
            loc.start_at(*start)
        return f"given pose ({start[0]:g}, {start[1]:g}) m, {start[2]:g}°"
    if first is not None:
        for loc in locs.values():
            loc.start_at(first.x_m, first.y_m, first.heading_deg)
        return f"first true pose ({first.x_m:g}, {first.y_m:g}) m, {first.heading_deg:g}°"
    for loc in locs.values():
        loc.start_anywhere()
    if start == ANYWHERE:
        return "anywhere in free space (--start anywhere)"
    return "anywhere in free space (no start pose and no truth file given)"


class _TruthCursor:
    """The latest true pose at or before a time, from a streamed truth file."""

    def __init__(self, poses):
        self._poses = poses
        self._next = next(poses, None)
        self.current = None

    def first(self):
        return self._next[1] if self._next is not None else None

    def at(self, t: float):
        while self._next is not None and self._next[1].t <= t + 1e-6:
            self.current = self._next[1]
            self._next = next(self._poses, None)
        return self.current


class _Replay:
    def __init__(self, case: Case, sensors: SensorSet, locs: dict, policy: Policy, found: Inspection, out: _Outputs):
        self.case, self.sensors, self.locs, self.found, self.out = case, sensors, locs, found, out
        self.finder = EpisodeFinder(policy.conflict_k, policy.clear_fraction * policy.conflict_k)
        self.site_markers = {m.marker_id for m in case.site.markers}
        self.unknown_sensor, self.sightings, self.unknown_marker = 0, 0, 0
        self.odometry_t: float | None = None  # time of the last odometry record used
        self.shape = case.site.occupied.shape
        self.prev_moment: Moment | None = None
        self.open_maps: dict | None = None
        self.kept: list[tuple[float, int]] = []  # min-heap of (severity, episode) whose maps are kept
        self.index: dict = {"t": [], "line": [], "truth": [], "est": defaultdict(list), "action": defaultdict(list)}
        self.series = {"t": array("d"), "episode": array("l")}
        for b in locs:
            for key in ("conflict", "surprise", "jousselme", "error", "heading_error"):
                self.series[f"{key}:{b}"] = array("d")
        self.wall = None
        self.frame_shape = None
        self.frame_step = 1

    def set_aside(self, row: SetAside) -> None:
        f = self.found
        f.set_aside += 1
        f.reasons[_reason_kind(row.reason)] += 1
        if len(f.first_set_aside) < 200:
            f.first_set_aside.append(row)
        if row.reason.startswith(CUT_REASON):
            f.warnings.append(row.reason)
        record = {"line": row.line, "reason": row.reason, "text": row.text}
        if row.file:
            record["file"] = row.file
        self.out.aside.write(json.dumps(record) + "\n")

    # ---------------------------------------------------------------- one tick
    def tick(self, group, truth) -> None:
        f = self.found
        first = min(line for line, _ in group)  # a split odometry record comes first but may stand later in the log
        if f.ticks and group[0][1].t < f.last_t:
            self.odometry_t = None
            for loc in self.locs.values():
                loc.restart_clock()
            f.warnings.append(
                f"line {first}: the log's clock restarted (from {f.last_t:g} s back to {group[0][1].t:g} s, "
                "confirmed by the records after it); odometry across the restart is not integrated"
            )
        odometry, readings, lines = None, [], {}
        for line, obs in group:
            try:
                self._usable(obs)
            except FusionError as err:
                self.set_aside(SetAside(line, str(err), json.dumps(obs.to_record())[:80]))
                continue
            if obs.moves:
                odometry = obs
            else:
                readings.append(obs)
                lines[id(obs)] = line
        t = max(obs.t for _, obs in group)
        tick = f.ticks
        f.ticks += 1
        f.used += len(readings)
        if f.first_t is None:
            f.first_t = t
        elif t >= f.last_t:
            f.duration_s += t - f.last_t
        f.last_t = t
        pose = truth.at(t) if truth is not None else None
        decisions = {b: loc.step(odometry, readings) for b, loc in self.locs.items()}
        conflict = {b: d.figures.conflict for b, d in decisions.items()}
        episode, closed = self.finder.add(tick, t, first, conflict)
        planes = {b: self._plane(loc) for b, loc in self.locs.items()}
        if closed is not None:
            self._close(closed)
        moment = Moment(
            t,
            planes,
            {b: (d.x_m, d.y_m) for b, d in decisions.items()},
            None if pose is None else (pose.x_m, pose.y_m),
        )
        if episode is not None:
            self._in_episode(episode, tick, decisions, readings, moment, pose)
        for b, d in decisions.items():
            self._row(tick, t, first, b, d, len(readings), episode, pose)
            if d.action != CARRY_ON:
                act = (t, b, d.action, " | ".join(d.reasons))
                f.actions.append(act)
                if episode is not None:
                    episode.actions.append(act)
        self._frame(t, first, decisions, planes, pose)
        self.prev_moment = moment

    def _usable(self, obs: Observation) -> None:
        """Refuse what the site cannot use, counting what suggests the log is from another site."""
        if obs.sensor not in self.sensors.kinds:
            self.unknown_sensor += 1
        self.sensors.check(obs)  # raises on an unknown sensor (naming the site's) or the wrong kind
        if obs.moves:
            check_odometry_step(self.odometry_t, obs.t, obs.sensor)
            self.odometry_t = obs.t
            return
        if isinstance(obs.reading, MarkerSighting):
            self.sightings += 1
            if obs.reading.marker_id not in self.site_markers:
                self.unknown_marker += 1
        self.sensors.encode(obs)  # raises on a payload the model cannot use (e.g. a marker not on the map)

    def _plane(self, loc: Localizer) -> np.ndarray:
        """The probability of each position, headings summed, as the step just taken left the belief: the step's
        pose estimate summed it already where the back end estimates from the grid."""
        est = loc.last_estimate
        if est is not None and est.plane is not None:
            return est.plane
        return loc.filter.distribution().reshape(loc.sensors.grid.shape).sum(axis=0)

    def _in_episode(self, ep: Episode, tick: int, decisions, readings, moment: Moment, pose) -> None:
        if ep.start_tick == tick:
            self.open_maps = {"before": self.prev_moment or moment, "peak": moment, "end": moment}
        elif self.open_maps is not None:
            if ep.peak_tick == tick:
                self.open_maps["peak"] = moment
            if ep.end_tick == tick:
                self.open_maps["end"] = moment
        busy = ep.end_tick == tick  # a tick above the clear level (calm ticks inside an episode add nothing)
        if not busy:
            return
        for b, d in decisions.items():
            for sensor, v in d.blame:
                ep.blame[b][sensor] += v
                self.found.blame[b][sensor] += v
            if pose is not None:
                ep.errors[b] = max(ep.errors[b], pose_errors(d, pose.x_m, pose.y_m, pose.heading_deg)[0])
        if ep.ticks <= PAIR_TICKS:
            self._pairs(ep, readings)

    def _pairs(self, ep: Episode, readings) -> None:
        """Conflict K between each two sensors' readings of this tick (first reading of each sensor)."""
        first: dict[str, Observation] = {}
        for obs in readings:
            first.setdefault(obs.sensor, obs)
        for a, b, k in pairwise_conflict([(sensor, self.sensors.encode(obs)) for sensor, obs in first.items()]):
            ep.pairs[(a, b)].append(k)

    def _close(self, ep: Episode) -> None:
        self.found.episodes.append(ep)
        maps, self.open_maps = self.open_maps, None
        if maps is None:
            return
        heapq.heappush(self.kept, (ep.severity, ep.number))
        self.found.maps[ep.number] = {
            k: dataclasses.replace(m, planes={b: p.astype(np.float32) for b, p in m.planes.items()})
            for k, m in maps.items()
        }
        if len(self.kept) > KEEP_MAPS:
            _, dropped = heapq.heappop(self.kept)
            self.found.maps.pop(dropped, None)

    def _row(self, tick, t, line, backend, d, n_readings, episode, pose) -> None:
        fig = d.figures
        err = herr = None
        if pose is not None:
            err, herr = pose_errors(d, pose.x_m, pose.y_m, pose.heading_deg)
        row = {
            "tick": tick,
            "t": t,
            "line": line,
            "backend": backend,
            "readings": n_readings,
            **decision_cells(d),
            "reason": " | ".join(d.reasons),
            "episode": episode.number if episode is not None else "",
            "true_x_m": pose.x_m if pose is not None else "",
            "true_y_m": pose.y_m if pose is not None else "",
            "error_m": err if err is not None else "",
            "heading_error_deg": herr if herr is not None else "",
        }
        self.out.steps_csv.writerow({k: (_fmt(k, v) if isinstance(v, float) else v) for k, v in row.items()})
        s = self.series
        if backend == next(iter(self.locs)):
            s["t"].append(t)
            s["episode"].append(episode.number if episode is not None else 0)
        s[f"conflict:{backend}"].append(fig.conflict)
        s[f"surprise:{backend}"].append(fig.surprise)
        s[f"jousselme:{backend}"].append(fig.value("jousselme"))
        s[f"error:{backend}"].append(err if err is not None else math.nan)
        s[f"heading_error:{backend}"].append(herr if herr is not None else math.nan)

    def _frame(self, t, line, decisions, planes, pose) -> None:
        idx = self.index
        idx["t"].append(round(t, 6))
        idx["line"].append(line)
        idx["truth"].append([round(pose.x_m, 3), round(pose.y_m, 3)] if pose is not None else None)
        for b, d in decisions.items():
            idx["est"][b].append([round(d.x_m, 3), round(d.y_m, 3)])
            idx["action"][b].append(d.action)
        if self.out.frames is None:
            return
        for b in self.locs:
            intensity, wall, step = coarse_plane(planes[b], self.case.site.occupied, FRAME_WIDTH)
            if self.wall is None:
                self.wall, self.frame_shape, self.frame_step = wall, intensity.shape, step
            self.out.frames.write(intensity.tobytes())

    # ---------------------------------------------------------------- the end
    def finish(self) -> None:
        last = self.finder.finish()
        if last is not None:
            self._close(last)
        f = self.found
        f.series = {k: np.array(v) for k, v in self.series.items()}
        if f.truth:
            for b in self.locs:
                e = f.series[f"error:{b}"]
                e = e[np.isfinite(e)]
                if len(e):
                    f.errors[b] = (float(np.median(e)), float(np.percentile(e, 95)))
                    h = f.series[f"heading_error:{b}"]
                    f.heading_errors[b] = float(np.median(h[np.isfinite(h)]))
                    f.found_after[b] = time_to_hold(f.series["t"], f.series[f"error:{b}"], h)
        self._site_check()

    def _site_check(self) -> None:
        f = self.found
        if f.records and f.set_aside >= max(1, SET_ASIDE_WARN * f.lines):
            kind, n = f.reasons.most_common(1)[0]
            f.warnings.insert(
                0,
                f"{f.set_aside:,} of {f.lines:,} lines ({f.set_aside / max(f.lines, 1):.0%}) were set aside, most as "
                f"'{kind}' ({n:,}); the report covers the rest only (every row and its reason: set_aside.jsonl)",
            )
        if f.records and self.unknown_sensor / f.records >= MISMATCH_SHARE:
            f.warnings.insert(
                0,
                f"{self.unknown_sensor:,} of {f.records:,} records ({self.unknown_sensor / f.records:.0%}) come from "
                f"sensors site {self.case.site.name!r} does not have: the log is probably from another site or robot",
            )
        if self.sightings >= 5 and self.unknown_marker / self.sightings >= MISMATCH_SHARE:
            f.warnings.insert(
                0,
                f"{self.unknown_marker:,} of {self.sightings:,} marker sightings ({self.unknown_marker / self.sightings:.0%}) "
                f"name markers that are not on the map of site {self.case.site.name!r}: the log is probably "
                "from another site (or the map is out of date)",
            )
        if f.records == 0:
            f.warnings.insert(0, "no usable observation in the log: every line was set aside")

    def write_frames_index(self, out_dir: Path) -> list[str]:
        ep = [[e.start_tick, e.peak_tick, e.end_tick, e.number] for e in self.found.episodes]
        index = {
            "tool": f"fusion {__version__}",
            "site": self.case.site.name,
            "backends": list(self.locs),
            "shape": list(self.frame_shape) if self.frame_shape else [0, 0],
            "step": self.frame_step,
            "resolution_m": self.case.site.resolution_m,
            "origin_m": list(self.case.site.origin_m),
            "wall": self.wall.astype(int).tolist() if self.wall is not None else [],
            "ticks": len(self.index["t"]),
            "t": self.index["t"],
            "line": self.index["line"],
            "truth": self.index["truth"],
            "estimate": dict(self.index["est"]),
            "action": dict(self.index["action"]),
            "conflict": {b: [round(v, 4) for v in self.series[f"conflict:{b}"]] for b in self.locs},
            "episodes": ep,
        }
        atomic_write(out_dir / "frames.json", json.dumps(index, allow_nan=False) + "\n")
        return ["frames.json"]


_REASON_KINDS = (
    ("unknown sensor", "unknown sensor"),
    ("not on the map", "marker not on the map"),
    ("the layout's not_markers", "id in the layout's not_markers"),
    ("is before the previous", "out of time order"),
    ("time outlier", "time outlier"),
    ("time step after the previous odometry", "odometry time step"),
    ("not a time stamp", "time outlier"),
    ("does not agree with the records after it", "time outlier"),
    ("out of time order", "out of time order"),
    ("not a JSON", "not JSON"),
    ("not a CSV", "not CSV"),
    ("cells where the header", "wrong number of CSV cells"),
    ("longer than", "line too long"),
    ("not UTF-8", "not UTF-8"),
    ("missing", "field missing"),
    ("finite", "not a finite number"),
    ("must be", "field of the wrong type or range"),
)


def _reason_kind(reason: str) -> str:
    """A short name for a set-aside reason, to count them by kind in the report."""
    return next((kind for needle, kind in _REASON_KINDS if needle in reason), "other")
