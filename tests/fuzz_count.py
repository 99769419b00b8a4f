"""A tally of the distinct malformed inputs the fuzz suite fed to the tool, per input surface.

``conftest.py`` prints it at the end of a run (the figure the reliability note asks for)."""

from __future__ import annotations

import hashlib
from collections import defaultdict

_seen: dict[str, set[str]] = defaultdict(set)


def tried(surface: str, data) -> None:
    """Count ``data`` (text or bytes) once as a malformed input of ``surface``."""
    raw = data.encode("utf-8", "surrogatepass") if isinstance(data, str) else bytes(data)
    _seen[surface].add(hashlib.sha256(raw).hexdigest())


def tally() -> dict[str, int]:
    return {surface: len(digests) for surface, digests in sorted(_seen.items())}
