"""Test-run settings: hypothesis without wall-time deadlines (machines are noisy) and with a fixed
derandomised search, so CI replays the same inputs; and the fuzz tally at the end of a run."""

from __future__ import annotations

from fuzz_count import tally
from hypothesis import HealthCheck, settings

settings.register_profile(
    "fusion", deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow], print_blob=True
)
settings.load_profile("fusion")


def pytest_terminal_summary(terminalreporter):
    counts = tally()
    if counts:
        total = sum(counts.values())
        parts = ", ".join(f"{surface} {n:,}" for surface, n in counts.items())
        terminalreporter.write_line(f"fuzz: {total:,} distinct malformed inputs tried ({parts})")
