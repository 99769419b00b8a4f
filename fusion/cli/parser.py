"""The command line's parser: one sub-command per job, each calling its handler (``simulating``,
``measuring``, ``replaying``)."""

from __future__ import annotations

import argparse

from fusion import SAFETY_NOTICE, __version__
from fusion.cli.args import count_up_to, number, replace_option, seed_value
from fusion.cli.opening import case_file

__all__ = ["build_parser"]


class _Parser(argparse.ArgumentParser):
    """argparse, with the nearest names suggested for a mistyped option or command."""

    _command: str | None = None  # the command of the arguments last parsed: its options are suggested

    def parse_known_args(self, args=None, namespace=None):
        found, extras = super().parse_known_args(args, namespace)
        self._command = getattr(found, "command", None)
        return found, extras

    def error(self, message: str):
        import difflib
        import re

        hints = []
        unknown = re.match(r"unrecognized arguments: (.*)", message)
        if unknown:
            known = _option_strings(_command_parser(self, self._command) or self)  # without a command: its own
            for token in unknown[1].split():
                name = token.split("=", 1)[0]
                if name.startswith("-"):
                    close = difflib.get_close_matches(name, known, n=2, cutoff=0.6)
                    if close:
                        hints.append(f"{name}: did you mean {' or '.join(close)}?")
        choice = re.search(r"invalid choice: '([^']*)' \(choose from (.*)\)", message)
        if choice:
            options = re.findall(r"'([^']*)'", choice[2])
            close = difflib.get_close_matches(choice[1], options, n=2, cutoff=0.5)
            if close:
                hints.append(f"did you mean {' or '.join(close)}?")
        super().error(message + "".join(f"\n  {h}" for h in hints))


def _command_parser(parser: argparse.ArgumentParser, command: str | None):
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction) and command in action.choices:
            return action.choices[command]
    return None


def _option_strings(parser: argparse.ArgumentParser) -> list[str]:
    """The long options of the parser (not of its commands)."""
    return sorted({o for action in parser._actions for o in action.option_strings if o.startswith("--")})


def _command(commands, name: str) -> argparse.ArgumentParser:
    """A command's parser with its description and examples (``help_text.COMMANDS``)."""
    import textwrap

    from fusion.cli.help_text import COMMANDS, epilog

    text = COMMANDS[name]
    return commands.add_parser(
        name,
        help=text.summary,
        description=textwrap.fill(text.description, 78),
        epilog=epilog(name),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
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
    from fusion.cli.simulating import cases_command, check_command, compare_command, demo_command, run_command

    demo = _command(commands, "demo")
    demo.add_argument("--case", type=case_file, help="shipped case name or case file (default: depot)")
    _run_options(demo)
    demo.set_defaults(run=demo_command)
    _command(commands, "cases").set_defaults(run=cases_command)
    run = _command(commands, "run")
    run.add_argument("case", type=case_file, help="case file (TOML), or a shipped case by name (fusion cases)")
    run.add_argument(
        "--backend",
        action="append",
        choices=tuple(BACKENDS),
        help="back end to run (repeatable; default: the case's [run] backends)",
    )
    run.add_argument(
        "--rule", help=f"combination rule of the evidential back end: {_rule_names()} (default: the case's)"
    )
    _run_options(run)
    run.set_defaults(run=run_command)
    check = _command(commands, "check")
    check.add_argument("case", type=case_file, help="case file (TOML), or a shipped case by name")
    check.add_argument("--preview", help="where to draw the site (PNG; default <case>-site.png in this folder)")
    check.add_argument("--no-preview", action="store_true", help="only validate; draw nothing")
    replace_option(check)
    check.set_defaults(run=check_command)
    cmp = _command(commands, "compare")
    cmp.add_argument(
        "case", type=case_file, help="case file (TOML) or shipped case name; its [compare] table sets the sweep"
    )
    cmp.add_argument("--seeds", type=count_up_to(10_000), help="seeds per setting (default: the case's, else 50)")
    cmp.add_argument("--backend", action="append", help=f"back end to include (repeatable): {', '.join(BACKENDS)}")
    cmp.add_argument("--rule", action="append", help="evidential combination rule to include (repeatable)")
    cmp.add_argument("--reliability", action="append", type=number, help="discount factor in [0, 1] (repeatable)")
    cmp.add_argument("--fault-rate", action="append", type=number, help="fault rate in [0, 1] (repeatable)")
    cmp.add_argument(
        "--rank-by",
        default="median_error_m",
        help="figure to rank by and to recommend on (default median_error_m; the figures: docs/compare.md)",
    )
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

    bench = _command(commands, "bench")
    bench.add_argument(
        "--repeats",
        type=count_up_to(1000),
        default=5,
        help="rounds over each figure's inputs, each input's fastest run kept (default 5)",
    )
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
    soak = _command(commands, "soak")
    soak.add_argument(
        "case", type=case_file, help="case file (or shipped case name) whose site, sensors, faults to run"
    )
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
    targets = _command(commands, "targets")
    targets.add_argument("--seeds", type=count_up_to(10_000), default=50, help="seeds per case (default 50)")
    targets.add_argument("--first-seed", type=seed_value, default=1, help="first seed (default 1)")
    targets.add_argument(
        "--case",
        action="append",
        help="shipped case name or case file (repeatable; default: carried, carried_blind, stuck_door, ghost, calm)",
    )
    targets.add_argument(
        "--backend",
        action="append",
        choices=tuple(BACKENDS),
        help="back end (repeatable; default: the case's [run] backends)",
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
    st = _command(commands, "stream")
    st.add_argument("--site", type=case_file, required=True, help="case file whose site and sensors to use")
    st.add_argument("--backend", choices=tuple(BACKENDS), default=first, help=f"back end (default {first})")
    st.add_argument("--calibration", help="calibration file (from fusion calibrate) for the sensors' parameters")
    st.add_argument("--start", help="known start pose x,y,heading_deg (default: anywhere in free space)")
    st.set_defaults(run=stream_command)
    ins = _command(commands, "inspect")
    ins.add_argument(
        "log", help="observations: JSON lines or CSV (docs/inspect.md), or a robot's tables or MCAP file with --layout"
    )
    ins.add_argument(
        "--site", type=case_file, required=True, help="case file whose site map and sensors the log was recorded with"
    )
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
    scr = _command(commands, "scrub")
    scr.add_argument("folder", help="output folder of fusion inspect")
    scr.set_defaults(run=scrub_command)


def _run_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--seed", type=seed_value, help="seed of the simulation (default: the case's)")
    p.add_argument("--out", help="output folder (default: fusion-out/<case>-run-seed<seed>-<back ends>-<rule>-…)")
    replace_option(p)
    p.add_argument("--quiet", action="store_true", help="no live view; print the summary only")
    p.add_argument("--calibration", help="calibration file (from fusion calibrate) replacing the sensors' parameters")


def _rule_names() -> str:
    from fusion.backends import rule_names

    return ", ".join(rule_names())


def _add_calibrate(commands) -> None:
    from fusion.cli.replaying import calibrate_command

    cal = _command(commands, "calibrate")
    cal.add_argument(
        "log",
        help="observations: JSON lines or CSV, or a robot's tables or MCAP file with --layout (docs/recordings.md)",
    )
    cal.add_argument("--layout", help="log layout (TOML): which tables or MCAP topics feed which sensor")
    cal.add_argument(
        "--truth", help="true poses, JSON lines (t, x_m, y_m, heading_deg); optional when the layout names them"
    )
    cal.add_argument("--site", type=case_file, required=True, help="case file whose site and sensors to calibrate")
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
