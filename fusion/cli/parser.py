"""The command line's parser: one sub-command per job, each calling its handler (``simulating``,
``measuring``, ``replaying``)."""

from __future__ import annotations

import argparse

from fusion import SAFETY_NOTICE, __version__
from fusion.cli.args import count_up_to, number, replace_option, seed_value

__all__ = ["build_parser"]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="fusion",
        description="Evidence fusion for mobile-robot localization (Bayesian and Dempster–Shafer).",
        epilog=SAFETY_NOTICE,
    )
    parser.add_argument("--version", action="version", version=f"fusion {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    _add_simulating(commands)
    _add_measuring(commands)
    _add_replaying(commands)
    _add_calibrate(commands)
    return parser


def _add_simulating(commands) -> None:
    from fusion.backends import BACKENDS
    from fusion.cli.simulating import check_command, compare_command, demo_command, run_command

    demo = commands.add_parser("demo", help="run the built-in cold-store depot case on both back ends, live")
    _run_options(demo)
    demo.set_defaults(run=demo_command)
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
    run.set_defaults(run=run_command)
    check = commands.add_parser("check", help="validate a case file and say what it describes")
    check.add_argument("case", help="case file (TOML)")
    check.add_argument("--preview", help="where to draw the site (PNG; default <case>-site.png in this folder)")
    check.add_argument("--no-preview", action="store_true", help="only validate; draw nothing")
    replace_option(check)
    check.set_defaults(run=check_command)
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
    cmp.set_defaults(run=compare_command)


def _add_measuring(commands) -> None:
    from fusion.backends import BACKENDS
    from fusion.cli.measuring import bench_command, soak_command, targets_command

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
    bench.set_defaults(run=bench_command)
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
    soak.set_defaults(run=soak_command)
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
    targets.set_defaults(run=targets_command)


def _add_replaying(commands) -> None:
    from fusion.backends import BACKENDS
    from fusion.cli.replaying import inspect_command, scrub_command, stream_command

    first = next(iter(BACKENDS))
    st = commands.add_parser("stream", help="read observations as JSON lines on stdin, write one decision per line")
    st.add_argument("--site", required=True, help="case file whose site and sensors to use")
    st.add_argument("--backend", choices=tuple(BACKENDS), default=first, help=f"back end (default {first})")
    st.add_argument("--calibration", help="calibration file (from fusion calibrate) for the sensors' parameters")
    st.add_argument("--start", help="known start pose x,y,heading_deg (default: anywhere in free space)")
    st.set_defaults(run=stream_command)
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
    ins.set_defaults(run=inspect_command)
    scr = commands.add_parser("scrub", help="step through a replay written by fusion inspect (keyboard)")
    scr.add_argument("folder", help="output folder of fusion inspect")
    scr.set_defaults(run=scrub_command)


def _run_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--seed", type=seed_value, help="seed of the simulation (default: the case's)")
    p.add_argument("--out", help="output folder (default: fusion-out/<case>-run-seed<seed>-<back ends>-<rule>-…)")
    replace_option(p)
    p.add_argument("--quiet", action="store_true", help="no live view; print the summary only")
    p.add_argument("--calibration", help="calibration file (from fusion calibrate) replacing the sensors' parameters")


def _figure_names() -> tuple[str, ...]:
    from fusion.compare import FIGURES

    return tuple(FIGURES)


def _add_calibrate(commands) -> None:
    from fusion.cli.replaying import calibrate_command

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
    cal.set_defaults(run=calibrate_command)
