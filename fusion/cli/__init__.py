"""Command line: parses arguments, calls one library function per command and renders its result with a view.

Every error becomes a message and an exit code, never a traceback: ``EXIT_BAD_INPUT`` for what was wrong
with the input, ``EXIT_DEFECT`` for a defect of ours (its trace kept in a temporary file), 130 after Ctrl-C;
results already written stay complete.  The commands live in ``simulating``, ``measuring`` and
``replaying``; their shared opening steps in ``opening``."""

from __future__ import annotations

import argparse
import sys

from fusion import compiled
from fusion.allocator import keep_freed_memory
from fusion.cli.args import joined_values
from fusion.cli.parser import build_parser
from fusion.errors import FusionError
from fusion.io.outdir import release_unfinished, shorten
from fusion.text import plain

__all__ = ["main", "EXIT_BAD_INPUT", "EXIT_DEFECT"]

EXIT_BAD_INPUT = 2
EXIT_DEFECT = 70  # an error of ours, not of the input (sysexits' EX_SOFTWARE)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
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
        compiled.setting()  # a wrong FUSION_KERNELS is refused before any work, not at the first compiled loop
        keep_freed_memory()  # this process is the tool's: freed arrays are kept for the next step (fusion.allocator)
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
