"""Command line: parses arguments and calls the library; no computation lives here."""

from __future__ import annotations

import argparse
import sys

from fusion import SAFETY_NOTICE, __version__
from fusion.cli_args import (
    count_up_to,
    joined_values,
    number,
    replace_option,
    seed_value,
)
from fusion.cli_outputs import calibration_name, claim_output, known_rule, runs_in, where
from fusion.errors import FusionError, InputFileError
from fusion.io.outdir import release_unfinished, shorten
from fusion.text import literal, plain

EXIT_BAD_INPUT = 2
EXIT_DEFECT = 70  # an error of ours, not of the input (sysexits' EX_SOFTWARE)
MAX_SWEEP_RUNS = 100_000
"""Most runs one compare command may start (settings × seeds; the case's [compare] seeds are at most 10,000)."""


def _builtin_case(name: str):
    from importlib import resources

    return resources.files("fusion") / "cases" / name


def _demo(args: argparse.Namespace) -> int:
    args.case = str(_builtin_case("depot.toml"))
    args.backend, args.rule = None, None
    return _run(args)


def _run(args: argparse.Namespace) -> int:

    from rich.console import Console
    from rich.live import Live

    from fusion.io.case import load_case
    from fusion.runner import RESULT_FILES, run_case, write_results
    from fusion.simulate import simulate
    from fusion.view.live import RunView, actions_timeline, summary_table

    case = load_case(args.case)  # validated before anything is written
    if getattr(args, "calibration", None):
        from fusion.io.case import apply_calibration

        case = apply_calibration(case, args.calibration)
    if args.seed is not None:
        import dataclasses

        case = dataclasses.replace(case, run=dataclasses.replace(case.run, seed=args.seed))
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
    console.print(f"[dim]{SAFETY_NOTICE}[/]")
    if live:
        view = RunView(case, backends, len(simulate(case)))
        with Live(view, console=console, refresh_per_second=8, transient=False):
            result = run_case(case, backends=backends, rule=rule, on_tick=view.on_tick)
    else:
        result = run_case(case, backends=backends, rule=rule)
    write_results(result, folder.path)
    folder.finish(RESULT_FILES)
    console.print(summary_table(result.summary()))
    if result.events:
        console.print(actions_timeline(result))
    console.print(f"results written to [bold]{literal(folder.path)}[/] ({', '.join(RESULT_FILES)})")
    return 0


def _check(args: argparse.Namespace) -> int:
    from fusion.io.case import load_case
    from fusion.site_check import describe

    case = load_case(args.case)  # the same validation as every command: what passes here can run
    print(describe(case, args.case))
    if not args.no_preview:
        from fusion.view.site_preview import preview_path, write_preview

        path = write_preview(case, args.preview or preview_path(args.case), args.replace)
        print(f"site drawn in {literal(path)} (walls, doors, markers{', route' if case.route else ''}; metres)")
    return 0


def _bench(args: argparse.Namespace) -> int:
    import json

    from rich.console import Console

    from fusion.bench import SIZES, bench_localizer, run_bench
    from fusion.bench_sweep import bench_sweep
    from fusion.fidelity import measure_fidelity
    from fusion.view.tables import bench_table, fidelity_table

    console = Console(stderr=args.json)
    sizes = SIZES[:1] if args.quick else SIZES
    with console.status("measuring… (each figure is the fastest of several runs)"):
        rows = run_bench(sizes=sizes, repeats=args.repeats, seed=args.seed)
        if not args.quick:
            rows += bench_localizer(_builtin_case("depot.toml"))
    if args.sweep:
        with console.status(f"timing the demo case's compare sweep on {args.sweep} seeds, 1 worker then 2…"):
            rows += bench_sweep(_builtin_case("depot.toml"), seeds=args.sweep, workers=2)
    with console.status("measuring the evidential outputs' distance from the exact mass function…"):
        fidelity = measure_fidelity(seed=args.seed)
    if args.json:
        print(json.dumps({"cost": [r.as_dict() for r in rows], "fidelity": [r.as_dict() for r in fidelity]}, indent=2))
    else:
        console.print(bench_table(rows))
        console.print(fidelity_table(fidelity))
    return 0


def _targets(args: argparse.Namespace) -> int:
    import json

    from rich.console import Console

    from fusion.targets import ATTRIBUTION_CASES, FAULT_CASES, measure_attribution, measure_targets
    from fusion.view.tables import targets_table

    console = Console(stderr=args.json)
    known = ATTRIBUTION_CASES if args.attribution else FAULT_CASES
    cases = args.case or list(known)
    unknown = [c for c in cases if c not in known]
    if unknown:
        raise FusionError(f"unknown fault case {unknown[0]!r}; choose among: {', '.join(known)}")

    def landed(case: str, seed: int, verdicts) -> None:
        # Each verdict is printed as it lands, so a run stopped part-way keeps what it measured.
        said = "; ".join(f"{r.backend} {'met' if r.success else 'missed'} ({r.detail})" for r in verdicts)
        console.print(f"[dim]{case} seed {seed}: {said}[/]")

    rows: list = []
    interrupted = False
    try:
        (measure_attribution if args.attribution else measure_targets)(
            _builtin_case(""),
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


def _compare(args: argparse.Namespace) -> int:
    import dataclasses
    from pathlib import Path

    from rich.console import Console

    from fusion.budget import estimate
    from fusion.compare import (
        SweepInterrupted,
        bayes_dempster_identity,
        run_sweep,
        settings_of,
        summarise,
        sweep_digest,
    )
    from fusion.compare import verdicts as verdicts_of
    from fusion.io.case import apply_calibration, load_case
    from fusion.view.compare_report import identity_words, tables, write_report

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
    per_run = estimate(case).total_seconds / max(len(case.run.backends), 1)  # a setting runs one back end
    # Runs of the same case (and calibration) file are reused: the folder resumes the same work.
    identity_of_work = {"case_sha256": sweep_digest(args.case, args.calibration)}
    folder = claim_output(args, "compare", args.case, identity_of_work, [], folders=("runs",))
    out_dir = folder.path
    console = Console()
    console.print(f"[dim]{SAFETY_NOTICE}[/]")
    console.print(
        f"{literal(case.name)}: {len(settings)} settings × {spec.seeds} seeds = {runs:,} runs "
        f"on the {args.engine} engine (roughly {runs * per_run / 3600:,.1f} h of processor time by the case's "
        f"estimate, shared by the workers); results go to {literal(out_dir)}"
    )
    progress = _progress(console, "runs", args.quiet, "{task.completed}/{task.total}")
    task = progress.add_task("runs", total=None)
    try:
        with progress:
            records = run_sweep(
                args.case,
                settings,
                seeds,
                out_dir,
                workers=args.workers,
                engine=args.engine,
                address=args.scheduler,
                calibration=args.calibration,
                on_start=lambda total, done: progress.update(task, total=total, completed=done),
                on_done=lambda rec: progress.advance(task),
            )
    except SweepInterrupted as err:
        folder.finish(["sweep.json", *runs_in(out_dir)])
        console.print(f"[yellow]{literal(err)}[/]")
        return 130
    summary = summarise(records, settings)
    verdict_list = verdicts_of(records, settings)
    identity = bayes_dempster_identity(case)
    files = write_report(out_dir, records, settings, summary, verdict_list, identity, args.rank_by, case.name)
    folder.finish(["sweep.json", *files, *runs_in(out_dir)])
    for t in tables(summary, settings, args.rank_by, f"{literal(case.name)}, {len(records)} runs"):
        console.print(t)
    for v in verdict_list:
        console.print(f"• {v['sentence']}")
    console.print(
        f"Sanity row (Shafer 1976: Dempster's rule on Bayesian masses is Bayes' rule): {identity_words(identity)}"
    )
    console.print(f"written to [bold]{literal(out_dir)}[/]: {', '.join(files)}, and runs/ (one file per run)")
    return 0


def _calibrate(args: argparse.Namespace) -> int:

    from rich.console import Console

    from fusion.calibration.models import FitSettings
    from fusion.calibration.output import calibration_toml
    from fusion.calibration.pipeline import calibrate
    from fusion.io.case import load_case
    from fusion.io.outdir import atomic_write, writable_file
    from fusion.view.tables import calibration_tables

    case = load_case(args.site)
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
    console.print(f"[dim]{SAFETY_NOTICE}[/]")
    with console.status("fitting…") as status:
        result = calibrate(
            case, args.log, args.truth, settings, progress=lambda s: status.update(f"fitting {s}…"), layout=layout
        )
    console.print(
        f"[bold]Calibrated sensor parameters[/] ({result.observations:,} readings, {result.poses:,} true poses)"
    )
    console.print(*calibration_tables(result, case))
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


def _layout_of(args: argparse.Namespace, case):
    """The log layout of ``--layout``, or of the log itself when it is a layout (a ``.toml`` naming its tables)."""
    if args.layout is None and str(args.log).lower().endswith(".toml"):
        args.layout = args.log
    if not args.layout:
        return None
    from fusion.io.layout import load_layout

    return load_layout(args.layout, case)


def _stream(args: argparse.Namespace) -> int:
    from fusion.io.case import load_case
    from fusion.localizer import Localizer
    from fusion.stream import stream

    case = load_case(args.site)
    if args.calibration:
        from fusion.io.case import apply_calibration

        case = apply_calibration(case, args.calibration)
    loc = Localizer.from_case(case, args.backend)
    if args.start:
        from fusion.io.start_pose import ANYWHERE, parse_start

        start = parse_start(args.start)
        loc.start_anywhere() if start == ANYWHERE else loc.start_at(*start)
    print(f"fusion stream: {args.backend} back end on {plain(case.site.name)}; {SAFETY_NOTICE}", file=sys.stderr)
    written, rejected = stream(loc)
    print(f"fusion stream: {written} decisions, {rejected} lines rejected", file=sys.stderr)
    return 0


def _inspect(args: argparse.Namespace) -> int:

    from rich.console import Console

    from fusion.inspect import inspect_log
    from fusion.io.case import apply_calibration, load_case
    from fusion.io.logs import count_lines
    from fusion.io.start_pose import parse_start
    from fusion.view.inspect_report import write_report
    from fusion.view.inspect_summary import summary_renderables

    case = load_case(args.site)
    if args.calibration:
        case = apply_calibration(case, args.calibration)
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
    progress = _progress(console, "replaying", args.quiet, counter)
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


def _scrub(args: argparse.Namespace) -> int:
    from rich.console import Console

    from fusion.view.scrub import scrub

    scrub(args.folder, Console())
    return 0


def _soak(args: argparse.Namespace) -> int:
    import functools
    import json

    from rich.console import Console

    from fusion.io.case import load_case
    from fusion.io.outdir import atomic_write
    from fusion.soak import soak_steps, soak_stream
    from fusion.view.tables import soak_table

    case = load_case(args.case)
    if not 0 <= args.corrupt <= 1:
        raise FusionError(f"--corrupt is a share of lines in [0, 1], got {args.corrupt}")
    backends = args.backend or list(case.run.backends)
    lines = args.stream_lines
    total = lines or args.steps
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
    console.print(f"[dim]{SAFETY_NOTICE}[/]")
    records, corruptions = [], {}
    for backend in backends:
        progress = _progress(console, f"{backend} {'lines' if lines else 'steps'}", args.quiet)
        task = progress.add_task(backend, total=total)
        with progress:
            tick = functools.partial(_advance_to, progress, task)
            if lines:
                report, tally = soak_stream(case, backend, lines, args.corrupt, args.seed, tick)
                corruptions[backend] = dict(tally)
            else:
                report = soak_steps(case, backend, args.steps, args.seed, tick)
            progress.update(task, completed=report.steps)
        records.append(report)
        atomic_write(  # after each back end, so an interrupted soak keeps what it finished
            out_dir / "soak.json",
            json.dumps(
                {"case": args.case, "runs": [r.to_record() for r in records], "corruptions": corruptions}, indent=1
            ),
        )
        folder.finish(["soak.json"])
        if report.interrupted:
            break
    console.print(*soak_table(records, case.name, lines, out_dir))
    bad = [r for r in records if not r.ok]
    for r in bad:
        console.print(f"[red]{r.backend}: {r.violations} violations; first at {r.first_violation}[/]")
    return 1 if bad else 0


def _advance_to(progress, task, n: int) -> None:
    progress.update(task, completed=n)


def _progress(console, label: str, quiet: bool, counter: str = "{task.completed:,.0f}/{task.total:,.0f}"):
    """The progress bar of every long command: label, bar, count, elapsed time and ETA."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

    return Progress(
        TextColumn(label),
        BarColumn(),
        TextColumn(counter),
        TimeElapsedColumn(),
        TextColumn("ETA"),
        TimeRemainingColumn(),
        console=console,
        disable=quiet,
    )


def _parser() -> argparse.ArgumentParser:
    from fusion.backends import BACKENDS

    first = next(iter(BACKENDS))
    parser = argparse.ArgumentParser(
        prog="fusion",
        description="Evidence fusion for mobile-robot localization (Bayesian and Dempster–Shafer).",
        epilog=SAFETY_NOTICE,
    )
    parser.add_argument("--version", action="version", version=f"fusion {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    demo = commands.add_parser("demo", help="run the built-in cold-store depot case on both back ends, live")
    _run_options(demo)
    demo.set_defaults(run=_demo)
    run = commands.add_parser("run", help="simulate a case file and run the back ends on it")
    run.add_argument("case", help="case file (TOML); see cases/README.md")
    run.add_argument(
        "--backend",
        action="append",
        choices=tuple(BACKENDS),
        help="back end to run (repeat for both; default: the case's [run] backends)",
    )
    run.add_argument("--rule", help="combination rule of the evidential back end (default: the case's)")
    _run_options(run)
    run.set_defaults(run=_run)
    check = commands.add_parser("check", help="validate a case file and say what it describes")
    check.add_argument("case", help="case file (TOML)")
    check.add_argument("--preview", help="where to draw the site (PNG; default <case>-site.png in this folder)")
    check.add_argument("--no-preview", action="store_true", help="only validate; draw nothing")
    replace_option(check)
    check.set_defaults(run=_check)
    bench = commands.add_parser("bench", help="time each back end's steps as ratios to floors measured in the same run")
    bench.add_argument("--repeats", type=count_up_to(1000), default=9, help="runs per figure, fastest kept (default 9)")
    bench.add_argument(
        "--seed", type=seed_value, default=0, help="seed of the synthetic beliefs and evidence (default 0)"
    )
    bench.add_argument("--quick", action="store_true", help="only the smaller grid (100×100×36)")
    bench.add_argument("--json", action="store_true", help="print the figures as JSON on standard output")
    bench.add_argument(
        "--sweep",
        type=count_up_to(1000),
        metavar="SEEDS",
        help="also time the demo case's default compare sweep on SEEDS seeds, 1 worker vs 2 (minutes)",
    )
    bench.set_defaults(run=_bench)
    st = commands.add_parser("stream", help="read observations as JSON lines on stdin, write one decision per line")
    st.add_argument("--site", required=True, help="case file whose site and sensors to use")
    st.add_argument("--backend", choices=tuple(BACKENDS), default=first, help=f"back end (default {first})")
    st.add_argument("--calibration", help="calibration file (from fusion calibrate) for the sensors' parameters")
    st.add_argument("--start", help="known start pose x,y,heading_deg (default: anywhere in free space)")
    st.set_defaults(run=_stream)
    cmp = commands.add_parser("compare", help="run a grid of fusion settings over many seeds and rank them")
    cmp.add_argument("case", help="case file (TOML); its [compare] table sets the default sweep")
    cmp.add_argument("--seeds", type=count_up_to(10_000), help="seeds per setting (default: the case's, else 50)")
    cmp.add_argument("--backend", action="append", help="back end to include (repeatable): bayes, evidential")
    cmp.add_argument("--rule", action="append", help="evidential combination rule to include (repeatable)")
    cmp.add_argument("--reliability", action="append", type=number, help="discount factor in [0, 1] (repeatable)")
    cmp.add_argument("--fault-rate", action="append", type=number, help="fault rate in [0, 1] (repeatable)")
    cmp.add_argument("--rank-by", default="median_error_m", choices=_figure_names(), help="figure to rank by")
    cmp.add_argument("--workers", type=count_up_to(64), help="parallel workers (default: one per core; at most 64)")
    cmp.add_argument("--engine", choices=("local", "dask"), default="local", help="where runs execute (default local)")
    cmp.add_argument("--scheduler", help="address of a running Dask scheduler (engine dask; default: a local cluster)")
    cmp.add_argument(
        "--out", help="output folder (default: fusion-out/<case>-compare-…); one holding this case's sweep resumes"
    )
    replace_option(cmp)
    cmp.add_argument("--quiet", action="store_true", help="no progress bar")
    cmp.add_argument("--calibration", help="calibration file: also run every setting with its sensor parameters")
    cmp.set_defaults(run=_compare)
    cal = commands.add_parser("calibrate", help="fit the sensor models' parameters to a log with known poses (pyro)")
    cal.add_argument(
        "log",
        help="observations: JSON lines or CSV, or a robot's tables or MCAP file with --layout (docs/recordings.md)",
    )
    cal.add_argument("--layout", help="log layout (TOML): which tables or MCAP topics feed which sensor")
    cal.add_argument(
        "--truth", help="true poses, JSON lines (t, x_m, y_m, heading_deg); optional when the layout names them"
    )
    cal.add_argument("--site", required=True, help="case file whose site and sensors to calibrate")
    cal.add_argument("--out", help="calibration file to write (default: <log>-calibrated.toml beside the log)")
    cal.add_argument("--replace", action="store_true", help="overwrite the calibration file if it exists")
    cal.add_argument("--method", choices=("auto", "nuts", "svi"), default="auto", help="inference (default auto)")
    cal.add_argument(
        "--samples",
        type=count_up_to(100_000),
        default=500,
        help="posterior draws per chain (default 500, at most 100,000)",
    )
    cal.add_argument("--warmup", type=count_up_to(100_000), default=300, help="NUTS warm-up steps (default 300)")
    cal.add_argument(
        "--chains", type=count_up_to(16), default=2, help="NUTS chains; R-hat needs ≥ 2 (default 2, at most 16)"
    )
    cal.add_argument(
        "--svi-steps", type=count_up_to(1_000_000), default=2000, help="SVI optimisation steps (default 2000)"
    )
    cal.add_argument("--seed", type=seed_value, default=0, help="seed of the inference (default 0)")
    cal.set_defaults(run=_calibrate)
    ins = commands.add_parser("inspect", help="replay a recorded log on both back ends and explain its conflict")
    ins.add_argument(
        "log", help="observations: JSON lines or CSV (docs/inspect.md), or a robot's tables or MCAP file with --layout"
    )
    ins.add_argument("--site", required=True, help="case file whose site map and sensors the log was recorded with")
    ins.add_argument(
        "--layout", help="log layout (TOML, docs/recordings.md): which tables or MCAP topics feed which sensor"
    )
    ins.add_argument("--truth", help="true poses, JSON lines (optional; adds the true error; a layout may name them)")
    ins.add_argument(
        "--start",
        help="start pose x,y,heading_deg, or 'anywhere' to score a start from ignorance (default: the first true "
        "pose, else anywhere)",
    )
    ins.add_argument("--calibration", help="calibration file (from fusion calibrate) for the sensors' parameters")
    ins.add_argument("--out", help="output folder (default: fusion-out/<log>-inspect-…, one per log and rule)")
    replace_option(ins)
    ins.add_argument("--no-frames", action="store_true", help="do not store the per-tick maps (no scrubbing)")
    ins.add_argument("--scrub", action="store_true", help="step through the replay in the terminal when it ends")
    ins.add_argument("--quiet", action="store_true", help="no progress bar")
    ins.set_defaults(run=_inspect)
    scr = commands.add_parser("scrub", help="step through a replay written by fusion inspect (keyboard)")
    scr.add_argument("folder", help="output folder of fusion inspect")
    scr.set_defaults(run=_scrub)
    soak = commands.add_parser("soak", help="run many steps (or stream lines) and check the belief's invariants")
    soak.add_argument("case", help="case file whose site, sensors and faults to run")
    soak.add_argument(
        "--steps", type=count_up_to(10**9), default=100_000, help="localizer steps per back end (default 100,000)"
    )
    soak.add_argument("--stream-lines", type=count_up_to(10**9), help="instead push this many lines through the stream")
    soak.add_argument("--corrupt", type=number, default=0.1, help="share of stream lines corrupted (default 0.1)")
    soak.add_argument("--backend", action="append", choices=tuple(BACKENDS), help="back end (repeatable)")
    soak.add_argument("--seed", type=seed_value, help="first seed of the simulated runs (default: the case's)")
    soak.add_argument("--out", help="folder for soak.json (default: fusion-out/<case>-soak-…)")
    replace_option(soak)
    soak.add_argument("--quiet", action="store_true", help="no progress bar")
    soak.set_defaults(run=_soak)
    targets = commands.add_parser("targets", help="measure the monitor's recovery and fault targets over seeds")
    targets.add_argument("--seeds", type=count_up_to(10_000), default=50, help="seeds per case (default 50)")
    targets.add_argument("--first-seed", type=seed_value, default=1, help="first seed (default 1)")
    targets.add_argument("--case", action="append", help="fault case to run (repeatable; default: all)")
    targets.add_argument(
        "--backend", action="append", choices=tuple(BACKENDS), help="back end (repeatable; default: both)"
    )
    targets.add_argument("--json", action="store_true", help="print every run's verdict as JSON")
    targets.add_argument(
        "--attribution",
        action="store_true",
        help="measure instead whether fusion inspect ranks the faulty sensor first",
    )
    targets.set_defaults(run=_targets)
    return parser


def _run_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--seed", type=seed_value, help="seed of the simulation (default: the case's)")
    p.add_argument("--out", help="output folder (default: fusion-out/<case>-run-seed<seed>-<back ends>-<rule>-…)")
    replace_option(p)
    p.add_argument("--quiet", action="store_true", help="no live view; print the summary only")
    p.add_argument("--calibration", help="calibration file (from fusion calibrate) replacing the sensors' parameters")


def _figure_names() -> tuple[str, ...]:
    from fusion.compare import FIGURES

    return tuple(FIGURES)


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(joined_values(sys.argv[1:] if argv is None else list(argv)))
    if not getattr(args, "run", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    try:
        return _outcome(args)
    finally:
        release_unfinished()  # a folder claimed for results that never came is left as it was found


def _outcome(args: argparse.Namespace) -> int:
    """Run the command; every error becomes a message and an exit code, never a traceback."""
    try:
        return args.run(args)
    except FusionError as err:
        print(f"fusion: error: {plain(err)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("fusion: interrupted; results already written are complete", file=sys.stderr)
        return 130
    except OSError as err:  # disk full, permission denied, a folder where a file should be ...
        where = f" ({shorten(err.filename)})" if err.filename else ""
        print(
            f"fusion: error: {plain(err.strerror or err)}{plain(where)}; results already written are complete",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    except Exception as err:  # noqa: BLE001 - last resort: a defect must not reach the user as a traceback
        trace = _keep_trace()
        print(
            f"fusion: internal error ({type(err).__name__}: {plain(str(err)[:200])}). This is a defect in fusion, "
            f"not in your input; results already written are complete. The trace is in {trace}; "
            "please send it with the command line.",
            file=sys.stderr,
        )
        return EXIT_DEFECT


def _keep_trace() -> str:
    """Write the current exception's trace to a temporary file; its path (or 'standard error' if that fails)."""
    import tempfile
    import traceback

    try:
        with tempfile.NamedTemporaryFile("w", prefix="fusion-trace-", suffix=".txt", delete=False) as fh:
            traceback.print_exc(file=fh)
            return fh.name
    except OSError:
        traceback.print_exc()
        return "standard error above"


if __name__ == "__main__":
    sys.exit(main())
