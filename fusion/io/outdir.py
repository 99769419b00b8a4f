"""Output folders a command owns, and writes that never follow a planted link or leave half a file.

Every command that writes results claims its folder first (``claim``), before any work:

- a new or empty folder is taken;
- a folder holding the results of the *same work* (same command, same settings and inputs) is
  taken again: the new results replace the old ones, and any old file the new run does not write
  is removed at the end (``OutputFolder.finish``), so no stale map or frame survives beside a new
  report;
- a folder holding the results of other work is refused, unless the user asks to replace it
  (``--replace``): then the old results are removed first — but never an input of the new run;
- a folder holding files we did not write is always refused (we never delete what is not ours).

Ownership is recorded in a small JSON file in the folder (``MARK``): the command, its settings,
and the files it wrote.  Writing the mark is also the test that the folder can be written, so an
unwritable ``--out`` is refused before the work starts.

``atomic_write`` creates a temporary file exclusively (``O_EXCL``, and ``O_NOFOLLOW`` so a link
planted at that name is never followed), with the permissions the user's umask gives, writes it
and renames it into place; on any failure the temporary file is removed.  ``PartialFile`` does
the same for a file written bit by bit (the rows of a long replay).
"""

from __future__ import annotations

import json
import os
import secrets
from dataclasses import dataclass, field
from pathlib import Path

from fusion.errors import FusionError
from fusion.io.bounded import read_text

__all__ = [
    "default_folder",
    "release_unfinished",
    "OutputFolder",
    "PartialFile",
    "atomic_write",
    "claim",
    "writable_file",
    "MARK",
    "TEMP_PREFIX",
]

MARK = ".fusion-results.json"
"""The ownership record of an output folder."""
TEMP_PREFIX = ".fusion-partial-"
"""Temporary files are named with this prefix and a random part; leftovers of a killed run are ours to remove."""
_MAX_MARK_BYTES = 4 * 1024 * 1024


def default_folder(input_path, *settings: str) -> Path:
    """``fusion-out/<input>-<settings…>-<digest>``: one folder per input file and settings, so a run with
    another back end or rule never lands on an earlier one.  The digest tells apart inputs of the same name
    in different folders."""
    import hashlib

    given = Path(str(input_path))
    try:
        where = str(given.resolve())
    except OSError:
        where = str(given)
    digest = hashlib.sha256(where.encode("utf-8", "surrogateescape")).hexdigest()[:6]
    stem = "".join(c if c.isalnum() or c in "-_." else "_" for c in given.stem)[:60] or "input"
    parts = ["".join(c if c.isalnum() or c in "-_+." else "_" for c in s)[:40] for s in settings if s]
    return Path("fusion-out") / "-".join([stem, *parts, digest])


class FolderError(FusionError, ValueError):
    """An output folder cannot be used: it holds other results or files that are not ours, or cannot be written."""


def _create_exclusive(folder: Path, binary: bool):
    """A new temporary file in ``folder`` (never an existing one, never through a link) and its path."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)
    for _ in range(16):
        tmp = folder / f"{TEMP_PREFIX}{secrets.token_hex(8)}"
        try:
            fd = os.open(tmp, flags, 0o666)  # the umask applies, as for any file the user creates
        except FileExistsError:
            continue
        mode = "wb" if binary else "w"
        extra = {} if binary else {"encoding": "utf-8", "newline": ""}
        return os.fdopen(fd, mode, **extra), tmp
    raise FolderError(f"cannot create a temporary file in {folder}: every name tried exists")


class PartialFile:
    """A file written under a temporary name and renamed to ``path`` by ``commit`` (removed by ``abandon``)."""

    def __init__(self, path, binary: bool = False):
        self.path = Path(path)
        self.handle, self._tmp = _create_exclusive(self.path.parent, binary)

    def write(self, data) -> int:
        return self.handle.write(data)

    def commit(self) -> None:
        self.handle.close()
        try:
            os.replace(self._tmp, self.path)
        except BaseException:
            self.abandon()
            raise

    def abandon(self) -> None:
        try:
            self.handle.close()
        except OSError:
            pass  # a full disk can fail the final flush; the file goes anyway
        try:
            os.unlink(self._tmp)
        except FileNotFoundError:
            pass


def atomic_write(path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` all at once: readers see the old file or the new one, never half."""
    out = PartialFile(path, binary=isinstance(data, bytes))
    try:
        out.write(data)
    except BaseException:
        out.abandon()
        raise
    out.commit()


def writable_file(path, replace: bool = False, what: str = "output file") -> Path:
    """Refuse, before any work, a single output file that exists (unless ``replace``) or cannot be written."""
    path = Path(path)
    if path.is_dir():
        raise FolderError(f"{path} is a folder; give a file name for the {what}")
    if path.exists() and not replace:
        raise FolderError(f"{path} exists; choose another name, or pass --replace to overwrite it")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise FolderError(f"the folder {folder} of the {what} does not exist")
    try:
        probe = PartialFile(path)
    except OSError as err:
        raise FolderError(f"cannot write the {what} in {folder}: {err.strerror}") from None
    probe.abandon()
    return path


@dataclass
class OutputFolder:
    """A claimed output folder: write into ``path``, then ``finish(files)`` records what was written."""

    path: Path
    job: str
    settings: dict
    previous: list[str] = field(default_factory=list)  # files of the same work's earlier results
    folders: tuple[str, ...] = ()  # sub-folders wholly ours (a sweep's one file per run)
    created: bool = False  # the folder did not exist before the claim
    finished: bool = False

    def file(self, name: str) -> Path:
        return self.path / name

    def finish(self, files) -> list[str]:
        """Record ``files`` as this folder's results and remove the earlier results' other files."""
        files = sorted(set(files))
        for old in self.previous:
            if old not in files:
                _remove_ours(self.path, old)
        self.previous = files
        _write_mark(self.path, self.job, self.settings, files, self.folders, complete=True)
        self.finished = True
        return files


_CLAIMED: list[OutputFolder] = []


def release_unfinished() -> None:
    """After a command failed: a folder it claimed but never wrote a result into is left as it was found
    (the ownership record removed, the folder too if the claim made it), so a refused input leaves no trace."""
    while _CLAIMED:
        folder = _CLAIMED.pop()
        if folder.finished or folder.previous:
            continue
        try:
            rest = [e for e in os.listdir(folder.path) if e != MARK]
            if not rest:
                (folder.path / MARK).unlink(missing_ok=True)
                if folder.created:
                    folder.path.rmdir()
        except OSError:
            pass


def claim(path, job: str, settings: dict, *, replace: bool = False, inputs=(), folders=()) -> OutputFolder:
    """Take ``path`` for ``job`` with ``settings`` (JSON values), by the rules of this module's docstring.

    ``inputs``: files the job reads (never deleted by a replace); ``folders``: sub-folders the job fills
    file by file (wholly ours, so a run killed before ``finish`` leaves nothing that looks foreign)."""
    folder = Path(path)
    try:
        exists = folder.exists()
    except OSError as err:  # a name too long for the file system, a loop of links, …
        raise FolderError(f"cannot use {shorten(folder)} as the output folder: {err.strerror}") from None
    if exists and not folder.is_dir():
        raise FolderError(f"{shorten(folder)} exists and is not a folder; choose another --out")
    created = not exists
    try:
        folder.mkdir(parents=True, exist_ok=True)
        entries = [e for e in os.listdir(folder) if e != MARK]
    except OSError as err:
        raise FolderError(f"cannot create or read the output folder {shorten(folder)}: {err.strerror}") from None
    settings = json.loads(json.dumps(settings))  # as it will read back from the mark
    mark = _read_mark(folder)
    ours = set(mark.get("files", [])) | {d + "/" for d in mark.get("folders", [])} if mark else set()
    foreign = [e for e in entries if not e.startswith(TEMP_PREFIX) and not _listed(e, ours)]
    if foreign:
        shown = ", ".join(sorted(foreign)[:3]) + (" …" if len(foreign) > 3 else "")
        raise FolderError(
            f"{folder} holds files fusion did not write there ({shown}); choose an empty or new folder with --out"
        )
    previous: list[str] = []
    if mark:
        same = mark.get("job") == job and mark.get("settings") == settings
        if not same and not replace:
            what = (
                f"with other settings ({_difference(mark.get('settings') or {}, settings)})"
                if mark.get("job") == job
                else f"(this is 'fusion {job}')"
            )
            raise FolderError(
                f"{folder} holds the results of 'fusion {mark.get('job')}' {what}; choose another --out, "
                "or pass --replace to delete those results and write these"
            )
        previous = sorted(mark.get("files", []))
        if not same:
            held = previous + [f"{d}/{e.name}" for d in mark.get("folders", []) for e in _entries(folder / d)]
            _refuse_deleting_inputs(folder, held, inputs)
            for old in held:
                _remove_ours(folder, old)
            previous = []
    for e in entries:
        if e.startswith(TEMP_PREFIX):
            _remove_ours(folder, e)  # left by a run that was killed
    try:
        _write_mark(folder, job, settings, previous, tuple(folders), complete=False)
    except OSError as err:
        raise FolderError(f"cannot write in the output folder {folder}: {err.strerror}") from None
    claimed = OutputFolder(folder, job, settings, previous, tuple(folders), created)
    _CLAIMED.append(claimed)
    return claimed


def _entries(folder: Path) -> list[Path]:
    try:
        return [e for e in folder.iterdir() if e.is_symlink() or e.is_file()]
    except OSError:
        return []


def shorten(path, most: int = 160) -> str:
    """A path for a message, its middle cut out when it is very long."""
    text = str(path)
    return text if len(text) <= most else f"{text[: most // 2]}…{text[-most // 2 :]}"


def _listed(entry: str, ours: set[str]) -> bool:
    return entry in ours or entry + "/" in ours or any(o.startswith(entry + "/") for o in ours)


def _refuse_deleting_inputs(folder: Path, files, inputs) -> None:
    targets = {(folder / f).resolve() for f in files}
    for given in inputs:
        if given is not None and Path(given).resolve() in targets:
            raise FolderError(
                f"{given} is an input of this command and one of the results in {folder}; --replace would "
                "delete it: write the new results elsewhere with --out"
            )


def _remove_ours(folder: Path, name: str) -> None:
    """Remove one of our files (a link is removed, never followed), then its sub-folder if that is now empty."""
    target = folder / name
    try:
        if target.is_symlink() or target.is_file():
            target.unlink()
        parent = target.parent
        if parent != folder and parent.is_dir() and not any(parent.iterdir()):
            parent.rmdir()
    except OSError:
        pass  # a file we cannot remove stays; the mark no longer lists it as a result


def _read_mark(folder: Path) -> dict | None:
    path = folder / MARK
    if path.is_symlink():
        return None
    try:
        data = json.loads(read_text(path, _MAX_MARK_BYTES, "ownership record", regular=True))
    except (FileNotFoundError, FusionError, ValueError, RecursionError):
        return None
    if not isinstance(data, dict) or not isinstance(data.get("files", []), list):
        return None
    data["files"] = [f for f in data.get("files", []) if _safe_name(f)]
    data["folders"] = [f for f in data.get("folders", []) if _safe_name(f)]
    return data


def _safe_name(name) -> bool:
    """A relative path inside the folder (a hand-edited mark must not make us delete anything else)."""
    return isinstance(name, str) and name and not name.startswith("/") and ".." not in Path(name).parts


def _write_mark(folder: Path, job: str, settings: dict, files, folders, complete: bool) -> None:
    from fusion import __version__

    folders = sorted(set(folders) | {f.split("/", 1)[0] for f in files if "/" in f})
    record = {
        "tool": f"fusion {__version__}",
        "job": job,
        "settings": settings,
        "complete": complete,
        "files": sorted(files),
        "folders": folders,
    }
    atomic_write(folder / MARK, json.dumps(record, indent=1) + "\n")


def _difference(old: dict, new: dict) -> str:
    keys = [k for k in sorted(set(old) | set(new)) if old.get(k) != new.get(k)]
    return "; ".join(f"{k}: {old.get(k)!r} there, {new.get(k)!r} now" for k in keys[:3]) or "another command"
