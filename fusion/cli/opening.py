"""The opening steps every command shares: find a shipped case, load a case (with a calibration file and a
seed when given), print the safety notice, and draw a progress bar."""

from __future__ import annotations

import contextlib

from fusion import SAFETY_NOTICE

__all__ = ["builtin_case", "builtin_cases", "case_file", "open_case", "notice", "progress_bar", "progress_for"]


def builtin_case(name: str):
    """A case shipped with the package (``fusion/cases``)."""
    from importlib import resources

    return resources.files("fusion") / "cases" / name


def builtin_cases() -> list[str]:
    """The names of the shipped cases (``fusion cases`` lists them with what each stresses)."""
    return sorted(p.name.removesuffix(".toml") for p in builtin_case("").iterdir() if p.name.endswith(".toml"))


def case_file(text: str) -> str:
    """A case argument: a file, or the name of a shipped case (``depot``, ``depot.toml``) when no such file is
    here.  argparse's type: an argument that is neither is refused at once, with the names it could have been."""
    import argparse
    from pathlib import Path

    if Path(text).exists():
        return text
    name = text.removesuffix(".toml")
    if "/" not in text and "\\" not in text and name in builtin_cases():
        return str(builtin_case(f"{name}.toml"))
    import difflib

    close = difflib.get_close_matches(name, builtin_cases(), n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise argparse.ArgumentTypeError(
        f"no case file {text!r}{hint} (shipped cases, usable by name: {', '.join(builtin_cases())}; "
        "fusion cases lists them)"
    )


def open_case(path, calibration=None, seed=None):
    """The case of ``path``, validated before anything is written, with the sensor parameters of
    ``calibration`` and the ``seed`` when given."""
    from fusion.io.case import apply_calibration, load_case

    case = load_case(path)
    if calibration:
        case = apply_calibration(case, calibration)
    if seed is not None:
        import dataclasses

        case = dataclasses.replace(case, run=dataclasses.replace(case.run, seed=seed))
    return case


def notice(console) -> None:
    console.print(f"[dim]{SAFETY_NOTICE}[/]")


def progress_bar(
    console, label: str, quiet: bool, counter: str = "{task.completed:,.0f}/{task.total:,.0f}", eta_field: bool = False
):
    """The progress bar of every long command: label, bar, count, elapsed time and the time left.  With
    ``eta_field`` the time left is the task's ``eta`` field, set by the job from what it measured (a sweep's runs
    differ in cost, so the rate of finished runs says little); otherwise rich's estimate from the rate."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

    left = [TextColumn("{task.fields[eta]}")] if eta_field else [TextColumn("ETA"), TimeRemainingColumn()]
    return Progress(
        TextColumn(label),
        BarColumn(bar_width=None if console.width >= 100 else 20),
        TextColumn(counter),
        TimeElapsedColumn(),
        *left,
        console=console,
        disable=quiet,
    )


def progress_for(console, quiet: bool, what: str):
    """A factory of ``(name, total) -> context manager giving tick(n)``: one bar per back end of a long job."""

    @contextlib.contextmanager
    def bar(name: str, total: int):
        progress = progress_bar(console, f"{name} {what}", quiet)
        task = progress.add_task(name, total=total)
        with progress:
            yield lambda n: progress.update(task, completed=n)

    return bar
