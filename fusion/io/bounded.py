"""Reading a whole small file with a size limit that holds for every kind of input: a regular file, a
pipe, a device such as ``/dev/zero`` (which has no size and no end).  At most ``limit + 1`` bytes are
ever read, so an endless or huge input costs that much and no more."""

from __future__ import annotations

from fusion.errors import InputFileError

__all__ = ["read_text"]


def read_text(path, limit: int, what: str, regular: bool = False) -> str:
    """The UTF-8 text of ``path``; ``InputFileError`` naming ``what`` when it cannot be read, is over
    ``limit`` bytes, or is not UTF-8.  ``regular``: refuse anything but a regular file (a file we wrote
    ourselves, such as a frame index: a pipe planted in its place would block the reader for ever)."""
    import os
    import stat

    try:
        if regular and not stat.S_ISREG(os.stat(path).st_mode):
            raise InputFileError(
                path, None, None, f"the {what} is not a regular file; re-run the command that wrote it"
            )
        with open(path, "rb") as fh:
            data = fh.read(limit + 1)
    except OSError as err:
        raise InputFileError(path, None, None, f"cannot read the {what}: {err.strerror}") from None
    if len(data) > limit:
        raise InputFileError(
            path,
            None,
            None,
            f"the {what} is over {limit:,} bytes; it is limited to {limit:,} bytes (is it the right file?)",
        )
    try:
        return data.decode("utf-8").removeprefix("\ufeff")
    except UnicodeDecodeError as err:
        raise InputFileError(path, None, None, f"not UTF-8 text (byte {err.start}); save the {what} as UTF-8") from None
