"""What each command's ``--help`` says beyond its options: a description of the job and a few examples."""

from __future__ import annotations

__all__ = ["COMMANDS", "Help"]

from dataclasses import dataclass


@dataclass(frozen=True)
class Help:
    summary: str  # one line, in the list of commands
    description: str  # what the command does and what it writes
    examples: tuple[str, ...]


COMMANDS = {
    "demo": Help(
        "run a shipped case (the cold-store depot by default) on its back ends, live",
        "Simulate a shipped case and run its back ends (the depot: the Bayesian and the Dempster–Shafer ones; "
        "the fault cases: all four families) side by side on identical readings, with a live map; writes the log, the truth, per-tick rows, a summary and an HTML "
        "report.",
        ("fusion demo", "fusion demo --case ghost", "fusion demo --seed 7 --quiet"),
    ),
    "run": Help(
        "simulate a case file and run the back ends on it",
        "Simulate the case's route with its sensors and faults, run each back end on the same readings, and "
        "write observations.jsonl, truth.jsonl, steps.csv, summary.json, timing.json and report.html.",
        (
            "fusion run depot",
            "fusion run my_site.toml --backend evidential --rule yager",
            "fusion run cases/slip.toml --seed 4 --out slip-4",
        ),
    ),
    "cases": Help(
        "list the shipped cases and where they are",
        "List the cases shipped with fusion, what each stresses, and the folder that holds them (copy one "
        "to start a case of your own).",
        ("fusion cases",),
    ),
    "check": Help(
        "validate a case file and say what it describes",
        "Read a case file with every check a run makes, say what it describes and what a run would cost, and "
        "draw the site (PNG).",
        ("fusion check my_site.toml", "fusion check depot --preview depot.png", "fusion check site.toml --no-preview"),
    ),
    "compare": Help(
        "run a grid of fusion settings over many seeds and rank them",
        "Run every setting (back end, combination rule, discount factor, fault rate) on every seed with "
        "identical readings per seed, then rank the settings with intervals over seeds and paired tests, "
        "and end with a recommendation. Each run is saved as it finishes; the same command resumes.",
        (
            "fusion compare depot --seeds 10",
            "fusion compare my_site.toml --backend bayes --backend evidential --rule dempster --rule yager",
            "fusion compare ghost --seeds 20 --rank-by alert_recall",
        ),
    ),
    "bench": Help(
        "time each back end's steps as ratios to floors measured in the same run",
        "Time predict, update and combination on synthetic beliefs at several grid sizes, each as a ratio "
        "to a floor (a memory copy, a multiply-and-normalise) measured in the same run, each on several "
        "inputs taken in turn (the median input, and the slowest); pin to one core for stable figures.",
        ("fusion bench --quick", "taskset -c 0 fusion bench --repeats 9", "fusion bench --json > bench.json"),
    ),
    "soak": Help(
        "run many steps (or stream lines) and check the belief's invariants",
        "Drive the localizer for many steps (or push many lines, some corrupted, through the stream) and "
        "check after each that the belief stays a valid distribution or mass function and memory stays flat.",
        ("fusion soak depot --steps 20000", "fusion soak depot --stream-lines 50000 --corrupt 0.2"),
    ),
    "targets": Help(
        "measure the monitor's recovery and fault targets over seeds",
        "Run fault cases over many seeds and say, per run, whether the monitor met its target: recovery "
        "within 10 ticks after a carry, the faulty sensor named and quarantined, or no action on a healthy "
        "run. Any case file may be given; its target follows from what it holds.",
        ("fusion targets --seeds 5", "fusion targets --case carried --backend bayes", "fusion targets --case my.toml"),
    ),
    "stream": Help(
        "read observations as JSON lines on stdin, write one decision per line",
        "For a robot stack without Python: one observation per input line, one decision (or error record) "
        "per output line, each carrying the input's line number; bad lines never stop the stream.",
        (
            "robot_feed | fusion stream --site depot --start 2,2,72",
            "fusion stream --site site.toml --backend evidential < log.jsonl > decisions.jsonl",
        ),
    ),
    "inspect": Help(
        "replay a recorded log on the site's back ends and explain its conflict",
        "Replay a recorded log, find the episodes where beliefs and readings conflicted, blame sensors and "
        "readings, and write tables, plots and an HTML report; with --truth, score the estimate too.",
        (
            "fusion inspect observations.jsonl --site depot",
            "fusion inspect robot.mcap --site site.toml --layout layout.toml --truth truth.jsonl",
            "fusion inspect log.csv --site site.toml --start anywhere --scrub",
        ),
    ),
    "scrub": Help(
        "step through a replay written by fusion inspect (keyboard)",
        "Step through the belief maps of a replay written by fusion inspect (it needs a terminal). Keys: "
        "→/l/space next · ←/h back · ]/[ ±10 · n/p next/previous episode · g/G first/last · q quit",
        ("fusion scrub fusion-out/log-inspect-dempster",),
    ),
    "calibrate": Help(
        "fit the sensor models' parameters to a log with known poses (pyro)",
        "Fit each sensor model's parameters to a log with true poses (Bayesian inference with pyro) and "
        "write a calibration file that run, compare, inspect and stream take with --calibration.",
        (
            "fusion calibrate log.jsonl --truth truth.jsonl --site depot",
            "fusion calibrate robot.mcap --layout layout.toml --site site.toml --method svi",
        ),
    ),
}


def epilog(name: str) -> str:
    return "examples:\n" + "\n".join(f"  {e}" for e in COMMANDS[name].examples)
