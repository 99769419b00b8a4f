"""Replay a recorded log through the localizer, as a robot would feed it, and print what the monitor says.

    python examples/replay_log.py CASE.toml LOG.jsonl [bayes|evidential]

The log is our JSON-lines (or CSV) observation format, e.g. the ``observations.jsonl`` that ``fusion run``
writes.  Decision support and monitoring only, not a certified safety function.
"""

import sys

from fusion import Localizer, load_case, read_observations


def replay(case_path: str, log_path: str, backend: str = "bayes") -> list:
    localizer = Localizer.from_case(load_case(case_path), backend)
    localizer.start_anywhere()  # or localizer.start_at(x_m, y_m, heading_deg) from a known dock pose
    decisions = []
    for line, obs in read_observations(log_path).records:
        decision = localizer.step(obs, []) if obs.moves else localizer.step(None, [obs])
        if decision.action != "carry on":
            print(f"line {line}, t = {obs.t:.2f} s: {decision.action}: {'; '.join(decision.reasons)}")
        decisions.append(decision)
    last = decisions[-1]
    print(f"{len(decisions)} steps; last estimate ({last.x_m:.2f} m, {last.y_m:.2f} m, {last.heading_deg:.0f}°)")
    return decisions


if __name__ == "__main__":
    replay(*sys.argv[1:4])
