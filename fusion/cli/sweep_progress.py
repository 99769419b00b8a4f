"""The progress of a comparison sweep in the terminal: a bar whose time left comes from the runs measured so far
(``fusion.compare.eta``), and a warning with how to shrink a sweep expected to take long."""

from __future__ import annotations

from collections import Counter

from fusion.cli.opening import progress_bar
from fusion.words import plural

__all__ = ["SweepProgress"]


class SweepProgress:
    def __init__(self, console, quiet: bool, eta):
        self.console, self.eta = console, eta
        self.bar = progress_bar(console, "runs", quiet, "{task.completed}/{task.total}", eta_field=True)
        self.task = self.bar.add_task("runs", total=None, eta="")

    def __enter__(self):
        self.bar.__enter__()
        return self

    def __exit__(self, *exc):
        return self.bar.__exit__(*exc)

    def planned(self, todo) -> None:
        """The (setting, seed) pairs still to run: price them, and warn before a long sweep starts."""
        from fusion.compare.eta import LONG_SWEEP_S, duration_words

        self.eta.todo = Counter(s.key for s, _ in todo)
        left = self.eta.remaining_s()
        self.bar.update(self.task, eta=self.eta.words())
        if left > LONG_SWEEP_S:
            self.console.print(
                f"[yellow]This sweep is expected to take about {duration_words(left)} ({len(todo):,} runs left, by "
                f"the case's estimate of each setting's run, {plural(self.eta.workers, 'worker')}).[/] To shrink it: "
                "fewer seeds (--seeds), fewer settings (--backend, --rule, --reliability, --fault-rate), or more "
                "workers (--workers, on more cores). Ctrl-C stops it; the same command resumes."
            )

    def started(self, total: int, done: int) -> None:
        self.bar.update(self.task, total=total, completed=done)

    def landed(self, rec) -> None:
        self.eta.landed(rec.key, rec.wall_s)
        self.bar.update(self.task, advance=1, eta=self.eta.words())
