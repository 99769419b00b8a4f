"""Readings from a topic of an MCAP recording (the open container format, read with its own library).

A layout feed with ``topic = "/scan"`` reads that topic's messages in file order.  Messages are
decoded with the library's decoders: ROS 2 (CDR with ``ros2msg`` schemas, ``mcap-ros2-support``)
and JSON-encoded messages.  What each message gives:

* ``sensor_msgs/LaserScan`` → a range scan for a ``ranging`` sensor: for each of the case's beam
  bearings the scan's beam at that angle (``angle_min + i · angle_increment``); a case bearing
  with no beam of the scan within half an increment is refused.  A range outside
  ``[range_min, range_max]`` or not finite is a beam with no return.
* ``nav_msgs/Odometry`` → odometry: its pose (``odometry = "poses"``, the default for this type)
  or its twist (``odometry = "velocities"``), through ``fusion.io.odometry_forms``.
* anything else → the feed's ``fields``: dotted paths into the message for each field the
  sensor's kind needs (``marker``, ``range``, ``bearing`` for markers; ``active`` for a door,
  default ``data`` as in ``std_msgs/Bool``; ``forward``/``turn`` or ``x``/``y``/``heading`` for
  odometry).  Angles and lengths in the feed's units.

Times are the message's log time (``stamp = "log"``, nanoseconds in the container) or its
header stamp (``stamp = "header"``).  A recording cut short (a robot that lost power) has its
complete messages replayed; the cut is reported, with its byte offset, as a set-aside row.
A topic that is not in the recording, or a field that is not in its messages, is refused
naming the layout's line.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator
from pathlib import Path

from fusion.errors import InputFileError, ObservationError
from fusion.io.layout import Feed, refuse
from fusion.io.logs import SetAside
from fusion.io.observations import Observation
from fusion.io.odometry_forms import OdometryForm
from fusion.sensors.kinds import sensor_kind
from fusion.sensors.ranging import RangeScan

__all__ = ["topic_observations", "CUT_REASON"]

CUT_REASON = "the recording is cut"
"""Start of the set-aside reason that reports a truncated recording (the replay turns it into a warning)."""

MAX_RECORD_BYTES = 256 * 1024**2
"""Largest MCAP record read (a chunk of a robot's recording is a few MiB; a larger length is a corrupt file)."""

_DEFAULT_FIELDS = {
    ("Odometry", "poses"): {
        "x": "pose.pose.position.x",
        "y": "pose.pose.position.y",
        "heading": "pose.pose.orientation",
    },
    ("Odometry", "velocities"): {
        "forward": "twist.twist.linear.x",
        "left": "twist.twist.linear.y",
        "turn": "twist.twist.angular.z",
    },
}


def topic_observations(feed: Feed, path: Path, aside) -> Iterator[tuple[int, Observation]]:
    """``(message number, observation)`` of every usable message on the feed's topic, in file order."""
    from mcap.exceptions import InvalidMagic
    from mcap.reader import NonSeekingReader
    from mcap_ros2.decoder import DecoderFactory

    ros2 = DecoderFactory()
    size = path.stat().st_size
    with open(path, "rb") as fh:
        messages = NonSeekingReader(fh, record_size_limit=MAX_RECORD_BYTES).iter_messages(log_time_order=False)
        topics: set[str] = set()
        decoders: dict[int, object] = {}
        reading = _Reading(feed)
        number = seen = 0
        while True:
            try:
                schema, channel, message = next(messages)
            except StopIteration:
                break
            except InvalidMagic:
                raise InputFileError(
                    path, None, None, "not an MCAP recording (it does not start with MCAP's magic bytes)"
                ) from None
            except Exception as err:  # noqa: BLE001 - whatever a cut or corrupt container raises, the rest is lost
                if number == 0 and not seen and fh.tell() < 64:
                    raise InputFileError(path, None, None, f"not an MCAP recording we can read: {err}") from None
                problem = str(err) or type(err).__name__
                aside(
                    SetAside(
                        number,
                        f"{CUT_REASON} at byte {fh.tell():,} of {size:,} ({problem}): the {seen:,} complete messages "
                        f"on {feed.topic} before it are replayed",
                        "",
                        path.name,
                    )
                )
                return
            number += 1
            topics.add(channel.topic)
            if channel.topic != feed.topic:
                continue
            seen += 1
            decode = decoders.get(channel.id)
            if decode is None:
                decode = decoders[channel.id] = _decoder(ros2, schema, channel, feed)
            obs = _message(reading, decode, schema, message, number, feed, path, aside)
            if obs is not None:
                yield number, obs
        if seen == 0:
            known = ", ".join(sorted(topics)) or "none"
            raise refuse(
                feed, f"the recording {path.name} has no messages on topic {feed.topic!r} (its topics: {known})"
            )


def _message(reading, decode, schema, message, number: int, feed: Feed, path: Path, aside) -> Observation | None:
    """One message on the feed's topic as an observation; a message that cannot be decoded or read is set aside
    with its reason (it costs that message only), a mapping that cannot work is refused."""
    try:
        decoded = decode(message.data)
    except Exception as err:  # noqa: BLE001 - one undecodable message costs that message only
        aside(SetAside(number, f"message on {feed.topic} cannot be decoded: {_said(err)}", "", path.name))
        return None
    try:
        return reading.observation(schema.name if schema else "", decoded, message.log_time)
    except InputFileError:
        raise
    except ObservationError as err:
        aside(SetAside(number, f"message on {feed.topic}: {err}", "", path.name))
    except Exception as err:  # noqa: BLE001 - a message whose values are not what its type says
        aside(SetAside(number, f"message on {feed.topic} cannot be read: {_said(err)}", "", path.name))
    return None


def _said(err: Exception) -> str:
    return f"{type(err).__name__}: {err}" if str(err) else type(err).__name__


def _decoder(ros2, schema, channel, feed: Feed):
    """The channel's decoder; a schema the library cannot parse (a damaged file) gives a decoder that
    refuses every message with the reason, so each is set aside, never a traceback."""
    if channel.message_encoding == "json":
        return lambda data: json.loads(data)
    try:
        decode = ros2.decoder_for(channel.message_encoding, schema)
    except Exception as err:  # noqa: BLE001 - whatever the schema parser raises
        problem = f"its schema ({schema.name if schema else 'none'}) cannot be parsed: {_said(err)}"

        def decode(data, problem=problem):
            raise ValueError(problem)

        return decode
    if decode is None:
        raise refuse(
            feed,
            f"topic {feed.topic!r} holds {channel.message_encoding!r} messages "
            f"({schema.name if schema else 'no schema'}); fusion decodes ROS 2 (cdr) and JSON messages",
        )
    return decode


class _Reading:
    """Turn decoded messages of one feed into observations."""

    def __init__(self, feed: Feed):
        self.feed = feed
        self.odometry = OdometryForm(feed.odometry) if sensor_kind(feed.kind).motion else None
        self.checked: set[str] = set()

    def fields(self, type_name: str) -> dict:
        if self.feed.columns:
            return self.feed.columns
        short = type_name.rsplit("/", 1)[-1]
        key = (short, self.feed.odometry if sensor_kind(self.feed.kind).motion else "steps")
        if key in _DEFAULT_FIELDS:
            return _DEFAULT_FIELDS[key]
        defaults = sensor_kind(self.feed.kind).default_fields
        if defaults:
            return defaults
        raise refuse(
            self.feed,
            f"messages of type {type_name or 'unknown'} on {self.feed.topic!r} need 'fields' naming where the "
            f"{self.feed.kind} sensor's values are",
        )

    def observation(self, type_name: str, msg, log_time_ns: int) -> Observation | None:
        feed = self.feed
        t = _stamp(msg, log_time_ns, feed.stamp)
        if t < 0 or not math.isfinite(t):
            raise ObservationError(f"time {t!r} s is not a time ≥ 0")
        if feed.kind == "ranging" and type_name.endswith("LaserScan"):
            return Observation(t, feed.sensor, "ranging", RangeScan(_scan(msg, feed)))
        fields = self.fields(type_name)
        value = lambda name: _field(msg, fields[name], name, feed, self.checked)  # noqa: E731
        kind = sensor_kind(feed.kind)
        if not kind.motion:  # a reading: its kind reads its own values (fusion.sensors.kinds)
            if kind.from_fields is None:
                raise refuse(feed, f"messages of type {type_name} cannot feed a {feed.kind} sensor")
            return Observation(t, feed.sensor, feed.kind, kind.from_fields(value, feed))
        if feed.odometry == "poses":  # a motion kind: its record is formed from poses, steps or velocities
            a, b = _number(value("x"), "x"), _number(value("y"), "y")
            c = _heading(value("heading"), feed)
        else:
            a = _number(value("forward"), "forward")
            b = _number(value("left"), "left") if "left" in fields else 0.0
            c = _number(value("turn"), "turn")
            c = math.radians(c) if feed.angle_unit == "deg" else c
        record = self.odometry.record(t, a * feed.length_unit, b * feed.length_unit, c)
        return None if record is None else Observation(t, feed.sensor, feed.kind, record)


def _stamp(msg, log_time_ns: int, stamp: str) -> float:
    if stamp == "log":
        return log_time_ns * 1e-9
    header = _get(msg, "header")
    when = _get(header, "stamp") if header is not None else None
    if when is None:
        raise ObservationError('the message has no header stamp (use stamp = "log")')
    sec = _get(when, "sec") if _get(when, "sec") is not None else _get(when, "secs")
    nsec = _get(when, "nanosec") if _get(when, "nanosec") is not None else _get(when, "nsecs")
    return float(sec or 0) + float(nsec or 0) * 1e-9


def _get(obj, name: str):
    if isinstance(obj, dict):
        return obj.get(name)
    return getattr(obj, name, None)


_MISSING = object()


def _field(msg, path: str, name: str, feed: Feed, checked: set):
    obj = msg
    for part in str(path).split("."):
        nxt = obj.get(part, _MISSING) if isinstance(obj, dict) else getattr(obj, part, _MISSING)
        if nxt is _MISSING:
            if name not in checked:  # the first message decides: a field absent from the type is the layout's fault
                raise refuse(
                    feed, f"the messages on {feed.topic!r} have no field {path!r} (for '{name}'; '{part}' is missing)"
                )
            raise ObservationError(f"field {path!r} is missing")
        obj = nxt
    checked.add(name)
    return obj


def _number(v, name: str) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ObservationError(f"'{name}' must be a finite number, got {v!r}")
    return float(v)


def _heading(v, feed: Feed) -> float:
    """Heading in radians from a quaternion (x, y, z, w: the yaw of a planar rotation) or an angle."""
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        return math.radians(v) if feed.angle_unit == "deg" else float(v)
    x, y, z, w = (_number(_get(v, k), f"heading.{k}") for k in ("x", "y", "z", "w"))
    return math.atan2(2.0 * (w * z + x * y), 1.0 - 2.0 * (y * y + z * z))


def _scan(msg, feed: Feed) -> tuple[float, ...]:
    bearings = feed.bearings
    ranges = list(_get(msg, "ranges") or [])
    a0, inc = float(_get(msg, "angle_min")), float(_get(msg, "angle_increment"))
    lo, hi = float(_get(msg, "range_min") or 0.0), float(_get(msg, "range_max") or math.inf)
    if not ranges or inc == 0 or not math.isfinite(inc):
        raise ObservationError("the scan has no beams (empty ranges or a zero angle_increment)")
    out = []
    for b in bearings:
        rad = math.radians(b)
        i = round(((rad - a0) % (2 * math.pi)) / inc) if inc > 0 else round(((rad - a0) % (-2 * math.pi)) / inc)
        if (
            not 0 <= i < len(ranges)
            or abs(((a0 + i * inc - rad + math.pi) % (2 * math.pi)) - math.pi) > abs(inc) / 2 + 1e-9
        ):
            raise ObservationError(
                f"the scan has no beam at the case's bearing {b:g}° (its beams span "
                f"{math.degrees(a0):g}° in steps of {math.degrees(inc):g}°)"
            )
        z = float(ranges[i])
        out.append(z * feed.length_unit if math.isfinite(z) and lo <= z <= hi else math.inf)
    return tuple(out)
