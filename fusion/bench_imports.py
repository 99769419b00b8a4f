"""Start-up cost: ``import fusion`` and ``fusion --help`` in a fresh interpreter, beside the interpreter's own
start (``python -c pass``) measured in the same run; the fastest wall time of several starts each (a start-up
is waited for by a person, so wall time is the figure; the file cache is warm after the first start)."""

from __future__ import annotations

import subprocess
import sys
import time

from fusion.bench import BenchRow

__all__ = ["bench_imports", "START_TARGET_S"]

START_TARGET_S = 0.3
"""What a person should wait for ``import fusion`` or ``fusion --help`` (our target)."""

_PROGRAMS = {
    "import fusion": "import fusion",
    "from fusion import Localizer, load_case": "from fusion import Localizer, load_case",
    "fusion --help": "import sys\nfrom fusion.cli import main\ntry:\n    main(['--help'])\nexcept SystemExit:\n    pass",
}


def bench_imports(repeats: int = 7) -> list[BenchRow]:
    floor_s = _fastest("pass", repeats)
    rows = []
    for label, program in _PROGRAMS.items():
        best = _fastest(program, repeats)
        verdict = "under" if best < START_TARGET_S else "NOT under"
        rows.append(
            BenchRow(
                "start-up",
                "all",
                label,
                best * 1e3,
                floor_s * 1e3,
                best / floor_s,
                None,
                f"fastest of {repeats} fresh interpreters; {verdict} the {START_TARGET_S:g} s target",
            )
        )
    return rows


def _fastest(program: str, repeats: int) -> float:
    times = []
    for _ in range(repeats + 1):  # the first start warms the file cache and is dropped
        start = time.perf_counter()
        subprocess.run([sys.executable, "-c", program], check=True, capture_output=True)
        times.append(time.perf_counter() - start)
    return min(times[1:])
