"""The commands that simulate a case: demo, run, check, compare."""

from __future__ import annotations

import argparse
from collections import Counter

from fusion import SAFETY_NOTICE
from fusion.cli.opening import builtin_case, notice, open_case
from fusion.cli.outputs import claim_output, known_rule, runs_in, where
from fusion.errors import FusionError
from fusion.text import literal, plain
from fusion.words import plural

__all__ = ["demo_command", "cases_command", "run_command", "check_command", "compare_command", "MAX_SWEEP_RUNS"]

MAX_SWEEP_RUNS = 100_000
"""Most runs one compare command may start (settings × seeds; the case's [compare] seeds are at most 10,000)."""


def demo_command(args: argparse.Namespace) -> int:
    args.case = args.case or str(builtin_case("depot.toml"))
    args.backend, args.rule = None, None
    return run_command(args)


def cases_command(args: argparse.Namespace) -> int:
    """The shipped cases: name, what each stresses (its description), and the folder that holds them."""
    from fusion.cli.opening import builtin_cases
    from fusion.io.case import load_case
    from fusion.place_cases.case import is_place_case, load_place_case
    from fusion.view.tables import cases_table

    rows = []
    for name in builtin_cases():
        path = builtin_case(f"{name}.toml")
        case = load_place_case(path) if is_place_case(path) else load_case(path)
        rows.append((name, case.description or case.name))
    print_table = cases_table(rows, str(builtin_case("")))
    from rich.console import Console

    Console().print(*print_table)
    return 0


def run_command(args: argparse.Namespace) -> int:

    from rich.console import Console
    from rich.live import Live

    from fusion.place_cases.case import is_place_case
    from fusion.runner import RESULT_FILES, run_case, write_results
    from fusion.simulate import simulate
    from fusion.view.live import RunView, actions_timeline, summary_table

    if is_place_case(args.case):
        return _run_on_graph(args)
    case = open_case(args.case, getattr(args, "calibration", None), args.seed)  # validated before anything is written
    backends = list(dict.fromkeys(args.backend or case.run.backends))
    rule = known_rule(args.rule or case.run.rule)
    settings = {
        "case": where(args.case),
        "seed": case.run.seed,
        "backends": backends,
        "rule": rule,
        "motion": case.run.motion,
        "calibration": where(args.calibration),
    }
    folder = claim_output(args, "run", args.case, settings, [f"seed{case.run.seed}", "+".join(backends), rule])
    console = Console()
    live = console.is_terminal and not args.quiet
    notice(console)
    if live:
        view = RunView(case, backends, len(simulate(case)))
        with Live(view, console=console, refresh_per_second=8, transient=False):
            result = run_case(case, backends=backends, rule=rule, on_tick=view.on_tick)
    else:
        result = run_case(case, backends=backends, rule=rule)
    write_results(result, folder.path)
    from fusion.io.outdir import atomic_write
    from fusion.view.run_report import run_report

    atomic_write(folder.path / "report.html", run_report(result))
    folder.finish([*RESULT_FILES, "report.html"])
    console.print(summary_table(result.summary()))
    if result.events:
        console.print(actions_timeline(result))
    console.print(f"results written to [bold]{literal(folder.path)}[/] ({', '.join(RESULT_FILES)}, report.html)")
    return 0


def _run_on_graph(args: argparse.Namespace) -> int:
    """``fusion run`` on a place-graph case: both back ends side by side, a table, the files of
    ``fusion.place_cases.outputs``."""
    import dataclasses

    from rich.console import Console

    from fusion.place_cases.case import load_place_case
    from fusion.place_cases.outputs import PLACE_FILES, write_place_results
    from fusion.place_cases.run import run_places
    from fusion.view.place_graph import place_run_table

    case = load_place_case(args.case)
    if getattr(args, "calibration", None):
        raise FusionError("--calibration is not read for place-graph cases yet; run without it")
    if args.seed is not None:
        case = dataclasses.replace(case, run=dataclasses.replace(case.run, seed=args.seed))
    backends = list(dict.fromkeys(args.backend or case.run.backends))
    if args.rule:
        case = dataclasses.replace(case, run=dataclasses.replace(case.run, rule=known_rule(args.rule)))
    from fusion.places.filters import build_on

    for b in backends:
        build_on(b, case.frame, rule=case.run.rule)  # refuses a back end or rule not built on graphs, before any work
    settings = {"case": where(args.case), "seed": case.run.seed, "backends": backends, "rule": case.run.rule}
    folder = claim_output(args, "run", args.case, settings, [f"seed{case.run.seed}", "+".join(backends), case.run.rule])
    console = Console()
    notice(console)
    for w in case.warnings:
        console.print(f"[yellow]warning:[/] {literal(w)}")
    if console.is_terminal and not args.quiet:
        from rich.live import Live

        from fusion.place_cases.simulate import simulate_places
        from fusion.view.place_live import GraphRunView

        view = GraphRunView(case, backends, len(simulate_places(case)))
        with Live(view, console=console, refresh_per_second=8, transient=False):
            result = run_places(case, backends=backends, on_tick=view.on_tick)
    else:
        result = run_places(case, backends=backends)
    write_place_results(result, folder.path)
    folder.finish(list(PLACE_FILES))
    console.print(place_run_table(result))
    console.print(f"results written to [bold]{literal(folder.path)}[/] ({', '.join(PLACE_FILES)})")
    return 0


def check_command(args: argparse.Namespace) -> int:
    from fusion.io.case import load_case
    from fusion.place_cases.case import is_place_case
    from fusion.site_check import describe

    if is_place_case(args.case):
        return _check_graph(args)

    case = load_case(args.case)  # the same validation as every command: what passes here can run
    print(SAFETY_NOTICE)
    print(describe(case, args.case))
    if not args.no_preview:
        from fusion.view.site_preview import preview_path, write_preview

        path = write_preview(case, args.preview or preview_path(args.case), args.replace)
        print(f"site drawn in {literal(path)} (walls, doors, markers{', route' if case.route else ''}; metres)")
    return 0


def _check_graph(args: argparse.Namespace) -> int:
    from fusion.place_cases.case import load_place_case
    from fusion.view.place_graph import describe_graph, draw_graph
    from fusion.view.site_preview import preview_path, write_picture

    case = load_place_case(args.case)
    print(SAFETY_NOTICE)
    print(describe_graph(case, args.case))
    if not args.no_preview:
        path = write_picture(draw_graph(case), args.preview or preview_path(args.case), args.replace)
        print(f"graph drawn in {literal(path)} (places, passages with their lengths, markers, route)")
    return 0


def compare_command(args: argparse.Namespace) -> int:
    from rich.console import Console

    from fusion.cli.sweep_progress import SweepProgress
    from fusion.compare import SweepInterrupted, run_sweep, sweep_digest
    from fusion.compare.conclusion import conclude
    from fusion.place_cases.case import is_place_case
    from fusion.view.compare_report import write_report
    from fusion.view.compare_tables import comparison_text

    if is_place_case(args.case):
        return _compare_on_graph(args)
    _known_figure(args.rank_by)
    case, settings, spec, seeds = _sweep_plan(args)
    runs = len(settings) * spec.seeds
    eta = _sweep_eta(case, settings, args.workers)
    # Runs of the same case (and calibration) file are reused: the folder resumes the same work.
    identity_of_work = {"case_sha256": sweep_digest(args.case, args.calibration)}
    folder = claim_output(args, "compare", args.case, identity_of_work, [], folders=("runs",))
    out_dir = folder.path
    console = Console()
    notice(console)
    console.print(
        f"{literal(case.name)}: {plural(len(settings), 'setting')} × {plural(spec.seeds, 'seed')} = {plural(runs, 'run')} "
        f"on the {args.engine} engine with {plural(eta.workers, 'worker')}; results go to {literal(out_dir)}"
    )
    try:
        with SweepProgress(console, args.quiet, eta) as shown:
            records = run_sweep(
                args.case,
                settings,
                seeds,
                out_dir,
                workers=args.workers,
                engine=args.engine,
                address=args.scheduler,
                calibration=args.calibration,
                on_plan=shown.planned,
                on_start=shown.started,
                on_done=shown.landed,
            )
    except SweepInterrupted as err:
        folder.finish(["sweep.json", *runs_in(out_dir)])
        console.print(f"[yellow]{literal(err)}[/]")
        return 130
    with console.status("summarising: bootstrap intervals, paired tests, the sanity row, plots…"):
        found = conclude(case, records, settings, args.rank_by)
        files = write_report(out_dir, found)
    folder.finish(["sweep.json", *files, *runs_in(out_dir)])
    for part in comparison_text(found, console.width):
        console.print(part)
    console.print(f"written to [bold]{literal(out_dir)}[/]: {', '.join(files)}, and runs/ (one file per run)")
    return 0


def _compare_on_graph(args: argparse.Namespace) -> int:
    """``fusion compare`` on a place-graph case (``fusion.place_cases.compare``): one process, the settings of
    --backend and --rule (default: the case's back ends and rule), --seeds (default 20)."""
    from rich.console import Console

    from fusion.place_cases.case import load_place_case
    from fusion.place_cases.compare import compare_graph, graph_settings
    from fusion.place_cases.outputs import write_comparison
    from fusion.places.filters import build_on
    from fusion.view.place_graph import graph_compare_table

    case = load_place_case(args.case)
    for option in ("reliability", "fault_rate", "calibration", "scheduler"):
        if getattr(args, option, None):
            raise FusionError(f"--{option.replace('_', '-')} is not read for place-graph cases yet; compare without it")
    settings = graph_settings(case, args.backend, args.rule)
    for s in settings:
        build_on(s.backend, case.frame, rule=s.rule or case.run.rule)  # refuses what graphs do not run, before any work
    seeds = list(range(case.run.seed, case.run.seed + (args.seeds or 20)))
    work = {"case": where(args.case), "settings": [s.key for s in settings], "seeds": [seeds[0], len(seeds)]}
    folder = claim_output(args, "compare", args.case, work, ["+".join(s.key for s in settings)])
    console = Console()
    notice(console)
    with console.status(f"{len(settings)} settings × {len(seeds)} seeds on the graph…"):
        found = compare_graph(case, seeds, settings)
    files = write_comparison(found, folder.path)
    folder.finish(files)
    console.print(graph_compare_table(found))
    for v in found.verdicts:
        console.print(f"• {literal(v.sentence)}")
    console.print(f"written to [bold]{literal(folder.path)}[/]: {', '.join(files)}")
    return 0


def _known_figure(name: str) -> None:
    import difflib

    from fusion.compare import FIGURES

    if name not in FIGURES:
        close = difflib.get_close_matches(name, FIGURES, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise FusionError(f"--rank-by: no figure {name!r}; {hint}the figures: {', '.join(FIGURES)}")


def _sweep_eta(case, settings, workers: int | None):
    """The sweep's clock: each setting's run priced by the case's estimate for its back end and rule, until runs
    of it have been measured (``fusion.compare.eta``)."""
    import os

    from fusion.budget import estimate
    from fusion.compare.eta import SweepEta

    prior = {}
    for s in settings:
        prior[s.key] = estimate(case, backends=[s.backend], rule=s.rule or case.run.rule).total_seconds
    return SweepEta(prior, Counter(), workers or os.cpu_count() or 1)


def _sweep_plan(args: argparse.Namespace):
    """The case, the settings and seeds of the sweep the command line asks for; refused before any run."""
    import dataclasses
    from pathlib import Path

    from fusion.compare import settings_of
    from fusion.io.case import apply_calibration, load_case

    for path in (args.case, args.calibration):
        if path is not None and Path(path).exists() and not Path(path).is_file():
            raise FusionError(
                f"{plain(path)}: compare's workers each read this file, so it must be a regular file, not a pipe; "
                "save it to a file first"
            )
    case = load_case(args.case)
    overrides = {
        "seeds": args.seeds,
        "backends": tuple(args.backend) if args.backend else None,
        "rules": tuple(args.rule) if args.rule else None,
        "reliabilities": tuple(args.reliability) if args.reliability else None,
        "fault_rates": tuple(args.fault_rate) if args.fault_rate else None,
    }
    spec = dataclasses.replace(case.sweep, **{k: v for k, v in overrides.items() if v is not None})
    if args.calibration:
        apply_calibration(case, args.calibration)  # a bad calibration file is refused before any run
    settings = settings_of(spec, calibrated=bool(args.calibration))  # refuses unknown rules, out-of-range values
    seeds = range(case.run.seed, case.run.seed + spec.seeds)
    runs = len(settings) * spec.seeds
    if runs > MAX_SWEEP_RUNS:
        raise FusionError(
            f"{len(settings)} settings × {spec.seeds:,} seeds = {runs:,} runs; a sweep is limited to "
            f"{MAX_SWEEP_RUNS:,}: fewer seeds or settings"
        )
    return case, settings, spec, seeds
