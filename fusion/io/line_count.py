"""How many lines a log holds, counted in blocks before a replay so its progress bar knows the total; None for
a pipe or device, which can be read only once (by the replay itself)."""

from __future__ import annotations

import os

from fusion.errors import InputFileError

__all__ = ["count_lines"]


def count_lines(path) -> int | None:
    """Lines in a regular file, read in binary blocks (fast enough for a progress bar's total); None for a
    pipe or device, which can be read only once (the reader then counts as it goes)."""
    import stat

    try:
        if not stat.S_ISREG(os.stat(path).st_mode):
            return None
        with open(path, "rb") as fh:
            lines, last = 0, b"\n"
            for block in iter(lambda: fh.read(1 << 20), b""):
                lines, last = lines + block.count(b"\n"), block[-1:]
            return lines + (last != b"\n")
    except OSError as err:
        raise InputFileError(path, None, None, f"cannot read the log: {err.strerror}") from None
