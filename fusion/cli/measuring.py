"""The commands that measure: bench, targets, soak."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from fusion.cli.opening import builtin_case, case_file, notice, open_case, progress_bar, progress_for
from fusion.cli.outputs import claim_output, where
from fusion.errors import FusionError
from fusion.text import literal

__all__ = ["bench_command", "targets_command", "soak_command"]


def bench_command(args: argparse.Namespace) -> int:
    import json

    from rich.console import Console

    from fusion.bench_combination import FRAME_SIZES, bench_combination
    from fusion.bench_grid import SIZES, run_bench
    from fusion.bench_imports import bench_imports
    from fusion.bench_steps import bench_backend_steps, bench_localizer
    from fusion.bench_sweep import bench_sweep
    from fusion.fidelity import measure_fidelity
    from fusion.place_cases.bench import bench_graph_steps
    from fusion.view.tables import bench_table, fidelity_table

    console = Console(stderr=args.json)
    notice(console)
    sizes = SIZES[:1] if args.quick else SIZES
    with console.status("measuring… (each figure on several inputs taken in turn, the fastest run of each)"):
        rows = run_bench(sizes=sizes, repeats=args.repeats, seed=args.seed)
        frames = FRAME_SIZES[:-1] if args.quick else FRAME_SIZES
        rows += bench_combination(repeats=args.repeats, seed=args.seed, sizes=frames)
        if not args.quick:
            from fusion.bench_kernels import bench_kernels
            from fusion.io.case import load_case

            depot = load_case(builtin_case("depot.toml"))
            rows += bench_kernels(depot.site.grid(depot.headings), repeats=args.repeats, seed=args.seed)
            from fusion.bench_stream import bench_stream

            rows += bench_stream(builtin_case("depot.toml"))
            rows += bench_localizer(builtin_case("depot.toml"))
            rows += bench_backend_steps(builtin_case("depot.toml"))
            rows += bench_graph_steps()
        rows += bench_imports(repeats=3 if args.quick else 7)
    if args.sweep:
        with console.status(f"timing the demo case's compare sweep on {args.sweep} seeds, 1 worker then 2…"):
            rows += bench_sweep(builtin_case("depot.toml"), seeds=args.sweep, workers=2)
    with console.status("measuring the evidential outputs' distance from the exact mass function…"):
        fidelity = measure_fidelity(seed=args.seed)
    if args.json:
        print(json.dumps({"cost": [r.as_dict() for r in rows], "fidelity": [r.as_dict() for r in fidelity]}, indent=2))
    else:
        for part in [*bench_table(rows, console.width), *fidelity_table(fidelity, console.width)]:
            console.print(part)
    return 0


def case_file_or_error(text: str) -> str:
    """A case file for ``--case`` (argparse cannot type it: attribution takes names only)."""
    try:
        return case_file(text)
    except argparse.ArgumentTypeError as err:
        raise FusionError(str(err)) from None


def _targets_eta(cases, seeds: int, backends):
    """The clock of a targets sweep: one run per case and seed, priced by the case's estimate until measured."""
    from collections import Counter

    from fusion.budget import estimate
    from fusion.compare.eta import SweepEta
    from fusion.io.case import load_case

    prior, todo = {}, Counter()
    for c in cases:  # a shipped case by name, or any case file (``case_file``)
        label = Path(c).stem
        prior[label] = estimate(load_case(case_file_or_error(c)), backends=backends).total_seconds
        todo[label] = seeds
    return SweepEta(prior, todo, 1)


def targets_command(args: argparse.Namespace) -> int:
    import json

    from rich.console import Console

    from fusion.compare.eta import LONG_SWEEP_S, duration_words
    from fusion.targets import ATTRIBUTION_CASES, FAULT_CASES, measure_attribution, measure_targets
    from fusion.view.tables import targets_table

    console = Console(stderr=args.json)
    cases = _target_cases(args, ATTRIBUTION_CASES, FAULT_CASES)
    graphs = _place_cases(cases)
    if graphs:  # graphs measured on their own, then the metric cases
        return _graph_targets(args, graphs, console) or _targets_after(args, [c for c in cases if c not in graphs])
    notice(console)
    eta = _targets_eta(cases, args.seeds, args.backend)
    if eta.remaining_s() > LONG_SWEEP_S:
        console.print(
            f"[yellow]This is expected to take about {duration_words(eta.remaining_s())} on one core, by the "
            "cases' own estimates.[/] To shrink it: fewer seeds (--seeds), fewer cases (--case) or one back end "
            "(--backend). Ctrl-C stops it and keeps the verdicts printed so far."
        )
    progress = progress_bar(console, "runs", False, eta_field=True)
    task = progress.add_task("runs", total=len(cases) * args.seeds, eta=eta.words())
    clock = [time.perf_counter()]

    def landed(case: str, seed: int, verdicts) -> None:
        # Each verdict is printed as it lands, so a run stopped part-way keeps what it measured.
        said = "; ".join(f"{r.backend} {'met' if r.success else 'missed'} ({r.detail})" for r in verdicts)
        progress.console.print(f"[dim]{literal(case)} seed {seed}: {literal(said)}[/]")
        now = time.perf_counter()
        eta.landed(Path(case).stem, now - clock[0])  # the clock's keys are the cases' labels
        clock[0] = now
        progress.update(task, advance=1, eta=eta.words())

    rows: list = []
    interrupted = False
    try:
        with progress:
            (measure_attribution if args.attribution else measure_targets)(
                builtin_case(""),
                range(args.first_seed, args.first_seed + args.seeds),
                cases,
                progress=landed,
                out=rows,
                **({} if args.attribution else {"backends": args.backend}),
            )
    except KeyboardInterrupt:
        interrupted = True
    if args.json:
        print(json.dumps([r.__dict__ for r in rows], indent=1))
    else:
        console.print(targets_table(rows))
    if interrupted:
        console.print(f"interrupted: the {len(rows)} verdicts above are the runs that finished")
        return 130
    return 0


def _target_cases(args: argparse.Namespace, attribution_cases, fault_cases) -> list:
    """The cases a ``fusion targets`` call measures: for --attribution, names among ``attribution_cases``;
    otherwise shipped cases by name or any case file (its target follows from what it holds)."""
    if not args.attribution:
        return [case_file_or_error(c) for c in (args.case or fault_cases)]
    cases = args.case or list(attribution_cases)
    unknown = [c for c in cases if c not in attribution_cases]
    if unknown:
        raise FusionError(f"unknown attribution case {unknown[0]!r}; choose among: {', '.join(attribution_cases)}")
    return cases


def _place_cases(cases) -> list:
    from fusion.place_cases.case import is_place_case

    return [c for c in cases if is_place_case(c)]


def _targets_after(args: argparse.Namespace, rest) -> int:
    """The metric cases (``rest``) of a ``fusion targets`` call that also named place-graph cases."""
    if not rest:
        return 0
    args.case = [str(c) for c in rest]
    return targets_command(args)


def _graph_targets(args: argparse.Namespace, cases, console) -> int:
    """``fusion targets`` on place-graph cases (``fusion.place_cases.targets``); 0 when every case finished."""
    from fusion.place_cases.case import load_place_case
    from fusion.place_cases.targets import measure_graph
    from fusion.view.place_graph import graph_targets_table

    notice(console)
    for path in cases:
        case = load_place_case(path)
        backends = args.backend or list(case.run.backends)
        seeds = range(args.first_seed, args.first_seed + args.seeds)

        def landed(seed, result, name=case.name):
            said = "; ".join(
                f"{b}: "
                + ", ".join(
                    "lost" if e.places_needed is None else f"{e.places_needed} places" for e in result.episodes(b)
                )
                for b in result.backends
            )
            console.print(f"[dim]{literal(name)} seed {seed}: {literal(said)}[/]")

        try:
            rows = measure_graph(case, seeds, backends, landed)
        except KeyboardInterrupt:
            console.print("interrupted: the runs above finished")
            return 130
        console.print(graph_targets_table(case.name, rows))
    return 0


def soak_command(args: argparse.Namespace) -> int:
    from rich.console import Console

    from fusion.soak import soak_backends
    from fusion.view.tables import soak_table

    case = open_case(args.case)
    if not 0 <= args.corrupt <= 1:
        raise FusionError(f"--corrupt is a share of lines in [0, 1], got {args.corrupt}")
    backends = args.backend or list(case.run.backends)
    lines = args.stream_lines
    settings = {
        "case": where(args.case),
        "backends": backends,
        "steps": None if lines else args.steps,
        "stream_lines": lines,
        "corrupt": args.corrupt,
        "seed": args.seed,
    }
    folder = claim_output(args, "soak", args.case, settings, ["+".join(backends)])
    out_dir = folder.path
    console = Console()
    notice(console)
    records = soak_backends(
        case,
        backends,
        steps=args.steps,
        lines=lines,
        corrupt=args.corrupt,
        seed=args.seed,
        out_dir=out_dir,
        progress_for=progress_for(console, args.quiet, "lines" if lines else "steps"),
        on_written=lambda: folder.finish(["soak.json"]),
    )
    console.print(*soak_table(records, case.name, lines, out_dir))
    bad = [r for r in records if not r.ok]
    for r in bad:
        console.print(f"[red]{r.backend}: {r.violations} violations; first at {r.first_violation}[/]")
    return 1 if bad else 0
