"""The command line's output folders and input paths: the default folder of a command, its claim before
any work (``fusion.io.outdir``), and the checks that a named input can be read."""

from __future__ import annotations

from fusion.errors import FusionError

__all__ = ["claim_output", "where", "calibration_name", "runs_in", "known_rule", "INPUTS"]


def where(path) -> str | None:
    """A file's absolute path, as recorded in an output folder's settings."""
    from pathlib import Path

    return None if path is None else str(Path(str(path)).absolute())


def known_rule(rule: str) -> str:
    from fusion.backends.evidential import FILTER_RULES

    if rule not in FILTER_RULES:
        raise FusionError(f"unknown combination rule {rule!r}; choose one of: {', '.join(FILTER_RULES)}")
    return rule


INPUTS = {
    "case": "case file",
    "site": "case file",
    "log": "log",
    "truth": "truth file",
    "calibration": "calibration file",
}


def claim_output(args, job: str, input_path, settings: dict, name_parts, folders=()):
    """The command's output folder (``--out`` or a default unique per input and settings), claimed before any work."""
    from fusion.io.logs import require_readable
    from fusion.io.outdir import claim, default_folder

    out = args.out or default_folder(input_path, job, *name_parts)
    given = {k: v for k, v in vars(args).items() if k in INPUTS and v}
    for key, path in given.items():
        require_readable(path, INPUTS[key])  # a missing input is refused before the folder is made
    inputs = list(given.values())
    return claim(out, job, settings, replace=args.replace, inputs=inputs, folders=folders)


def runs_in(out_dir) -> list[str]:
    """The run files of a sweep folder, as names relative to it."""
    runs = out_dir / "runs"
    return [f"runs/{p.name}" for p in sorted(runs.glob("*.json"))] if runs.is_dir() else []


def calibration_name(log):
    """``<log>-calibrated.toml`` beside a log file (one per log), or in the current folder for a pipe."""
    from pathlib import Path

    log = Path(str(log))
    stem = "".join(c if c.isalnum() or c in "-_." else "_" for c in log.stem) or "log"
    return (log.parent if log.is_file() else Path(".")) / f"{stem}-calibrated.toml"
