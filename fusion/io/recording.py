"""One stream of observations from any recording: our own log, or a robot's tables or MCAP file through a layout.

``observations(log, layout, ...)`` yields ``(line, observation)`` in time order:

* without a layout, ``log`` is our JSON-lines or CSV log (``fusion.io.logs``);
* with a layout (``fusion.io.layout``), each feed is read on its own (a table named in the
  layout, the table ``log`` itself, or a topic of the MCAP file ``log``), put in time order by
  the rule of ``fusion.io.timeline`` (a clock never restarts inside one feed: a row going back is
  set aside), and the feeds are merged by time.  ``line`` is then the row's line in its own table
  (or the message's number in the MCAP file); set-aside reasons name the file.

``truth(path, layout, ...)`` yields ``(line, TruthPose)`` from a JSON-lines truth file, or from the
layout's ``[truth]`` table.
"""

from __future__ import annotations

import heapq
from collections.abc import Iterator
from pathlib import Path

from fusion.errors import InputFileError
from fusion.io.layout import Layout, refuse
from fusion.io.logs import ReadPosition, SetAside, iter_observations
from fusion.io.timeline import Timeline
from fusion.io.truth_file import iter_truth

__all__ = ["observations", "truth", "is_mcap"]


def is_mcap(path) -> bool:
    """Whether ``path`` names an MCAP recording (by its suffix; the reader checks the magic bytes)."""
    return str(path).lower().endswith(".mcap")


def observations(log, layout: Layout | None, on_set_aside, position: ReadPosition | None = None) -> Iterator:
    if layout is None:
        if is_mcap(log):
            raise InputFileError(
                log, None, None, "an MCAP recording needs a log layout saying which topic feeds which sensor: --layout"
            )
        yield from iter_observations(log, on_set_aside=on_set_aside, position=position)
        return
    streams = [
        _ordered(_feed(feed, log, layout, on_set_aside), on_set_aside, _source(feed, log)) for feed in layout.feeds
    ]
    for line, obs in heapq.merge(*streams, key=lambda item: item[1].t):
        if position is not None:
            position.lines += 1
        yield line, obs


def _feed(feed, log, layout: Layout, aside) -> Iterator:
    if feed.topic is not None:
        if log is None or not is_mcap(log):
            raise InputFileError(
                layout.path,
                feed.line,
                "topic",
                f"the feed of {feed.sensor!r} names an MCAP topic, but the recording given ({log}) is not an MCAP file",
            )
        from fusion.io.mcap_feed import topic_observations

        return topic_observations(feed, Path(log), aside)
    from fusion.io.tables import feed_observations

    if feed.file is None and (log is None or is_mcap(log)):
        raise refuse(feed, "the feed names no file, and no table was given beside the layout")
    return feed_observations(feed, feed.file if feed.file is not None else Path(log), aside)


def _source(feed, log) -> str:
    """The name of the file a feed reads, for set-aside rows."""
    return Path(feed.file if feed.file is not None else log or "").name


def _ordered(rows, aside, source: str) -> Iterator:
    """A feed's rows with times going back set aside (``fusion.io.timeline``; a feed's clock never restarts)."""
    timeline = Timeline(hold=True, restarts=False)
    for line, obs in rows:
        for verdict in timeline.offer(obs.t, (line, obs)):
            yield from _kept(verdict, aside, source)
    for verdict in timeline.flush():
        yield from _kept(verdict, aside, source)


def _kept(verdict, aside, source: str) -> Iterator:
    line, obs = verdict.item
    if verdict.accepted:
        yield line, obs
    else:
        aside(SetAside(line, f"{obs.sensor}: {verdict.reason}", "", source))


def truth(path, layout: Layout | None, set_aside: list) -> Iterator:
    """True poses from ``path`` (JSON lines) or, when ``path`` is None, the layout's ``[truth]`` table."""
    if path is not None:
        return iter_truth(path, set_aside)
    if layout is None or layout.truth is None:
        raise ValueError("no truth source")
    from fusion.io.tables import truth_poses

    return _ordered_truth(truth_poses(layout.truth, set_aside.append), set_aside, layout.truth.file.name)


def _ordered_truth(rows, set_aside, source: str) -> Iterator:
    timeline = Timeline(hold=True, strict=True, restarts=False)
    for line, pose in rows:
        for verdict in timeline.offer(pose.t, (line, pose)):
            if verdict.accepted:
                yield verdict.item
            else:
                set_aside.append(SetAside(line, verdict.reason, "", source))
    for verdict in timeline.flush():
        if verdict.accepted:
            yield verdict.item
        else:
            set_aside.append(SetAside(verdict.item[0], verdict.reason, "", source))
