"""The allocator setting: freed grid-sized arrays are reused without new page faults (``fusion.allocator``).

What glibc does with ``M_MMAP_THRESHOLD`` and ``M_TRIM_THRESHOLD`` is documented in mallopt(3) (Linux man-pages
project, "mallopt - set memory allocation parameters"): blocks at or above the first are mapped afresh and unmapped
when freed; free memory at the top of the heap beyond the second is handed back to the system.  A fresh mapping's
pages each fault on first touch, which ``getrusage``'s minor-fault count shows.  Each check runs in a process of
its own: the setting is process-wide, and the command-line tests in this process have made it already.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

PROBE = """
import resource, sys
import numpy as np
from fusion.allocator import keep_freed_memory
kept = keep_freed_memory() if sys.argv[1] == "keep" else None
n = 1_382_400  # the bench's 240 x 160 x 36 belief: 11 MB
def faults():
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(3):  # the heap grows to the working set once
    arrays = [np.ones(n) for _ in range(4)]
    del arrays
before = faults()
for _ in range(20):  # a step's arrays made and dropped, as every back end does
    arrays = [np.ones(n) for _ in range(4)]
    del arrays
print(kept, (faults() - before) / 80)
"""

GLIBC = sys.platform.startswith("linux") and os.confstr("CS_GNU_LIBC_VERSION").startswith("glibc")


def _faults_per_array(mode: str) -> tuple[str, float]:
    done = subprocess.run([sys.executable, "-c", PROBE, mode], capture_output=True, text=True, check=True)
    kept, per_array = done.stdout.split()
    return kept, float(per_array)


@pytest.mark.skipif(not GLIBC, reason="the thresholds are glibc's")
def test_freed_arrays_are_reused_without_page_faults_once_kept():
    kept, with_setting = _faults_per_array("keep")
    _, without = _faults_per_array("default")
    assert kept == "True"
    assert with_setting < 1.0  # 2,700 pages each: reused, not mapped again
    # The default hands them back and maps them again: a fault per page touched (520 per array measured here; at
    # least 5 even where the kernel backs them with 2 MiB pages), so the probe does see faults when they happen.
    assert without >= 5


def test_the_setting_is_made_once_and_refused_quietly_elsewhere(monkeypatch):
    import fusion.allocator as allocator

    monkeypatch.setattr(allocator, "_done", None)
    monkeypatch.setattr(allocator.os, "confstr", lambda name: "musl")  # not glibc: nothing is set
    assert allocator.keep_freed_memory() is False
    monkeypatch.setattr(allocator.os, "confstr", lambda name: "glibc 2.36")
    assert allocator.keep_freed_memory() is False  # decided once per process
