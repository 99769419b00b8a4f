"""Command line: parses arguments and calls the library; no computation lives here."""

from __future__ import annotations

import argparse
import sys

from fusion import SAFETY_NOTICE, __version__
from fusion.errors import FusionError

EXIT_BAD_INPUT = 2


def _demo(args: argparse.Namespace) -> int:
    from rich.console import Console

    from fusion.aisle_demo import run_aisle_demo

    console = Console()
    console.print(run_aisle_demo(seed=args.seed))
    console.print(f"[dim]{SAFETY_NOTICE}[/]")
    return 0


def _bench(args: argparse.Namespace) -> int:
    import json

    from rich.console import Console

    from fusion.bench import SIZES, render, run_bench

    console = Console(stderr=args.json)
    sizes = SIZES[:1] if args.quick else SIZES
    with console.status("measuring… (each figure is the fastest of several runs)"):
        rows = run_bench(sizes=sizes, repeats=args.repeats, seed=args.seed)
    if args.json:
        print(json.dumps([r.as_dict() for r in rows], indent=2))
    else:
        console.print(render(rows))
    return 0


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="fusion",
        description="Evidence fusion for mobile-robot localization (Bayesian and Dempster–Shafer).",
        epilog=SAFETY_NOTICE,
    )
    parser.add_argument("--version", action="version", version=f"fusion {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    demo = commands.add_parser("demo", help="run the built-in demo on both back ends and show the comparison")
    demo.add_argument("--seed", type=int, default=7, help="seed of the simulated sensor noise (default 7)")
    demo.set_defaults(run=_demo)
    bench = commands.add_parser("bench", help="time each back end's steps as ratios to floors measured in the same run")
    bench.add_argument("--repeats", type=_positive_int, default=9, help="runs per figure, fastest kept (default 9)")
    bench.add_argument("--seed", type=int, default=0, help="seed of the synthetic beliefs and evidence (default 0)")
    bench.add_argument("--quick", action="store_true", help="only the smaller grid (100×100×36)")
    bench.add_argument("--json", action="store_true", help="print the figures as JSON on standard output")
    bench.set_defaults(run=_bench)
    return parser


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number ≥ 1, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number ≥ 1, got {text!r}")
    return value


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    if not getattr(args, "run", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    try:
        return args.run(args)
    except FusionError as err:
        print(f"fusion: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("fusion: interrupted; results already written are complete", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
