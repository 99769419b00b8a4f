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
    return parser


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
