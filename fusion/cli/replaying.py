"""The commands that replay recorded logs: inspect, scrub, stream, calibrate."""

from __future__ import annotations

import argparse
import sys

from fusion import SAFETY_NOTICE
from fusion.cli.opening import notice, open_case, progress_bar
from fusion.cli.outputs import calibration_name, claim_output, where
from fusion.errors import FusionError, InputFileError
from fusion.text import literal, plain
from fusion.words import plural

__all__ = ["calibrate_command", "stream_command", "inspect_command", "scrub_command"]


def calibrate_command(args: argparse.Namespace) -> int:

    from rich.console import Console

    from fusion.calibration.models import FitSettings
    from fusion.calibration.output import calibration_toml
    from fusion.calibration.pipeline import calibrate
    from fusion.io.outdir import atomic_write, writable_file
    from fusion.view.tables import calibration_tables

    case = open_case(args.site)
    layout = _layout_of(args, case)
    if args.truth is None and (layout is None or layout.truth is None):
        raise InputFileError(
            args.log, None, None, "calibration needs true poses: --truth FILE, or a log layout with [truth]"
        )
    out = writable_file(args.out or calibration_name(args.log), args.replace, "calibration file")  # before the fit
    settings = FitSettings(
        method=args.method,
        samples=args.samples,
        warmup=args.warmup,
        chains=args.chains,
        svi_steps=args.svi_steps,
        seed=args.seed,
    )
    console = Console()
    notice(console)
    result = _fitted(
        console, lambda step: calibrate(case, args.log, args.truth, settings, progress=step, layout=layout), case
    )
    console.print(
        f"[bold]Calibrated sensor parameters[/] ({plural(result.observations, 'reading')}, {plural(result.poses, 'true pose')})"
    )
    for part in calibration_tables(result, case):
        console.print(part)
    if result.no_model:
        console.print(
            f"no calibration model for the kind of: {literal(', '.join(result.no_model))} (their parameters are unchanged)"
        )
    if result.skipped:
        console.print(
            f"no readings in the log for: {literal(', '.join(result.skipped))} (their parameters are unchanged)"
        )
    if result.set_aside:
        console.print(f"{len(result.set_aside):,} rows set aside, first ones:")
        for path, s in result.set_aside[:5]:
            console.print(f"  {literal(s.file or path)}:{s.line}: {literal(s.reason)}")
    truth_name = str(args.truth) if args.truth else f"{args.log} ([truth] of the layout)"
    atomic_write(out, calibration_toml(result.summary, case.site.name, str(args.log), truth_name))
    console.print(
        f"written to [bold]{literal(out)}[/]; use it with --calibration {literal(out)} (run, compare, stream)"
    )
    return 0


def _fitted(console, fit, case):
    """Run ``fit(step)`` under a bar that counts the sensors fitted and names the one being fitted."""
    progress = progress_bar(console, "fitting", False, "{task.completed}/{task.total} sensors {task.fields[now]}")
    task = progress.add_task("fit", total=len(case.sensors), now="")
    fitted: list[str] = []

    def step(name: str) -> None:
        if fitted:
            progress.advance(task)
        fitted.append(name)
        progress.update(task, now=f"(now: {literal(name)}; NUTS draws take longest, --method svi is faster)")

    with progress:
        result = fit(step)
        progress.update(task, completed=len(case.sensors), now="")
    return result


def _layout_of(args: argparse.Namespace, case):
    """The log layout of ``--layout``, or of the log itself when it is a layout (a ``.toml`` naming its tables)."""
    if args.layout is None and str(args.log).lower().endswith(".toml"):
        args.layout = args.log
    if not args.layout:
        return None
    from fusion.io.layout import load_layout

    return load_layout(args.layout, case)


def stream_command(args: argparse.Namespace) -> int:
    from fusion.localizer import Localizer
    from fusion.place_cases.case import is_place_case
    from fusion.stream import stream

    if is_place_case(args.site):
        return _stream_on_graph(args)
    case = open_case(args.site, args.calibration)
    loc = Localizer.from_case(case, args.backend)
    if args.start:
        from fusion.io.start_pose import ANYWHERE, parse_start

        start = parse_start(args.start)
        loc.start_anywhere() if start == ANYWHERE else loc.start_at(*start)
    print(f"fusion stream: {args.backend} back end on {plain(case.site.name)}; {SAFETY_NOTICE}", file=sys.stderr)
    written, rejected = stream(loc)
    print(f"fusion stream: {plural(written, 'decision')}, {plural(rejected, 'line')} rejected", file=sys.stderr)
    return 0


def _stream_on_graph(args: argparse.Namespace) -> int:
    """``fusion stream`` on a place-graph site: ``--start`` is "anywhere" (the default), a place, or "PLACE,TOWARD"."""
    from fusion.io.start_pose import ANYWHERE
    from fusion.place_cases.case import load_place_case
    from fusion.place_cases.run import place_localizer
    from fusion.stream import stream

    if args.calibration:
        raise FusionError("--calibration is not read for place-graph sites yet; stream without it")
    case = load_place_case(args.site)
    loc = place_localizer(case, args.backend)
    if args.start and args.start.strip().lower() != ANYWHERE:
        loc.start_with(case.frame.start_prior(args.start))
    print(
        f"fusion stream: {args.backend} back end on the place graph of {plain(case.name)}; {SAFETY_NOTICE}",
        file=sys.stderr,
    )
    written, rejected = stream(loc)
    print(f"fusion stream: {plural(written, 'decision')}, {plural(rejected, 'line')} rejected", file=sys.stderr)
    return 0


def inspect_command(args: argparse.Namespace) -> int:
    from fusion.place_cases.case import is_place_case

    if is_place_case(args.site):
        return _inspect_on_graph(args)
    return _inspect_metric(args)


def _inspect_on_graph(args: argparse.Namespace) -> int:
    """``fusion inspect`` of a log on a place-graph site (``fusion.place_cases.inspect``)."""
    from rich.console import Console

    from fusion.place_cases.case import load_place_case
    from fusion.place_cases.inspect import inspect_graph
    from fusion.view.place_inspect import graph_inspection_table

    for option in ("layout", "calibration"):
        if getattr(args, option, None):
            raise FusionError(f"--{option} is not read for place-graph sites yet; inspect a JSON-lines log without it")
    case = load_place_case(args.site)
    start = None if not args.start or args.start.strip().lower() == "anywhere" else args.start
    if start:
        case.frame.start_prior(start)  # an unknown place is refused before anything is written
    settings = {"log": where(args.log), "site": where(args.site), "truth": where(args.truth), "start": start}
    folder = claim_output(args, "inspect", args.log, settings, [case.run.rule])
    console = Console()
    notice(console)
    with console.status("replaying the log on the graph…"):
        found = inspect_graph(case, args.log, folder.path, truth_path=args.truth, start=start)
    folder.finish(found.files)
    console.print(graph_inspection_table(found))
    console.print(f"written to [bold]{literal(folder.path)}[/]: {', '.join(found.files)}")
    return 0


def _inspect_metric(args: argparse.Namespace) -> int:
    from rich.console import Console

    from fusion.inspect import inspect_log
    from fusion.io.line_count import count_lines
    from fusion.io.start_pose import parse_start
    from fusion.view.inspect_report import write_report
    from fusion.view.inspect_summary import summary_renderables

    case = open_case(args.site, args.calibration)
    layout = _layout_of(args, case)
    start = parse_start(args.start) if args.start else None
    settings = {
        "log": where(args.log),
        "site": where(args.site),
        "layout": where(args.layout),
        "truth": where(args.truth),
        "start": start if isinstance(start, str) or start is None else list(start),
        "calibration": where(args.calibration),
        "frames": not args.no_frames,
        "rule": case.run.rule,
        "motion": case.run.motion,
    }
    folder = claim_output(args, "inspect", args.log, settings, [case.run.rule])
    out_dir = folder.path
    console = Console()  # the summary opens with the safety notice
    total = count_lines(args.log) if layout is None else None  # None for a pipe: it is read once, by the replay
    counter = "line {task.completed:,.0f}" + ("/{task.total:,.0f}" if total is not None else "")
    progress = progress_bar(console, "replaying", args.quiet, counter)
    task = progress.add_task("replay", total=total)
    with progress:
        found = inspect_log(
            case,
            args.log,
            out_dir,
            truth_path=args.truth,
            start=start,
            frames=not args.no_frames,
            progress=lambda line, lines: progress.update(task, completed=line, total=lines if total else None),
            layout=layout,
            report=write_report,
        )
    folder.finish(found.files)
    console.print(*summary_renderables(found))
    console.print(f"written to [bold]{literal(out_dir)}[/]: {', '.join(found.files)}")
    if args.scrub and not args.no_frames:
        from fusion.view.scrub import scrub

        scrub(out_dir, console)
    elif not args.no_frames:
        console.print(f"step through the replay with: fusion scrub {literal(out_dir)}")
    return 130 if found.interrupted else 0


def scrub_command(args: argparse.Namespace) -> int:
    from rich.console import Console

    from fusion.view.scrub import scrub

    scrub(args.folder, Console())
    return 0
