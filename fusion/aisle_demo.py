"""A small end-to-end run on one aisle of our cold-store depot, on both kinds of belief.

The robot is parked somewhere in aisle C (60 slots of 0.5 m) after a power cycle
and must find its slot from a wall-ranging sensor, two rack-end markers seen by
a camera and the contact sensor of the insulated door at the aisle mouth.  One
marker report is a ghost (injected fault).  Each observation becomes a contour
over slots; the Bayesian side multiplies the posterior by it, the evidential
side combines its consonant mass function by Dempster's rule.  Sensor
reliability enters both the same way: discounting on the mass side, whose
contour r·c + (1 − r) is exactly the outlier-mixture likelihood the Bayesian
side uses.

This is the smallest real computation of the package; the full depot demo
(``fusion demo`` on a case file) supersedes it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from fusion.belief import rules
from fusion.belief.mass import MassFunction
from fusion.belief.posterior import Posterior

__all__ = ["AisleReading", "AisleStep", "AisleRun", "run_aisle_demo"]

SLOTS = 60
SLOT_M = 0.5
DOOR_SLOT = 0
MARKERS = {"rack-end C1": 20, "rack-end C2": 45}
TRUE_SLOT = 37
CONTOUR_LEVELS = 16  # nested focal sets per observation (quantised contour, rounded up)


@dataclass(frozen=True)
class AisleReading:
    sensor: str
    text: str
    contour: np.ndarray  # plausibility of each slot given the reading, max 1
    reliability: float
    injected_fault: bool = False


@dataclass(frozen=True)
class AisleStep:
    reading: AisleReading
    bayes_map_slot: int
    bayes_surprise: float  # −log p(z | past), nats
    bayes_p_true: float  # posterior probability of the true slot ± 1
    ds_conflict: float  # Dempster's K of this update
    ds_best_slot: int
    ds_bel_true: float
    ds_pl_true: float
    focal_sets: int


@dataclass
class AisleRun:
    seed: int
    steps: list[AisleStep] = field(default_factory=list)

    def __rich__(self):
        from rich.table import Table

        table = Table(title=f"Aisle C, robot parked at slot {TRUE_SLOT} (seed {self.seed})", show_lines=False)
        for col in (
            "step",
            "sensor",
            "reading",
            "Bayes MAP",
            "surprise",
            "P(true±1)",
            "DS best",
            "K",
            "Bel/Pl(true±1)",
            "focal",
        ):
            table.add_column(col, justify="right" if col not in ("sensor", "reading") else "left")
        for i, s in enumerate(self.steps, start=1):
            flag = " [red](injected fault)[/]" if s.reading.injected_fault else ""
            k_style = "bold red" if s.ds_conflict > 0.5 else ""
            table.add_row(
                str(i),
                s.reading.sensor,
                s.reading.text + flag,
                str(s.bayes_map_slot),
                f"{s.bayes_surprise:.2f}",
                f"{s.bayes_p_true:.3f}",
                str(s.ds_best_slot),
                f"[{k_style}]{s.ds_conflict:.3f}[/]" if k_style else f"{s.ds_conflict:.3f}",
                f"{s.ds_bel_true:.3f} / {s.ds_pl_true:.3f}",
                str(s.focal_sets),
            )
        table.caption = (
            "surprise = −log of the reading's expected plausibility under the posterior (0 = fully expected); K = mass on the empty set before "
            "Dempster normalisation; Bel/Pl = belief and plausibility that the robot is within one slot of the truth."
        )
        return table


def _gauss_contour(expected_m: np.ndarray, measured_m: float, sigma_m: float) -> np.ndarray:
    return np.exp(-0.5 * ((expected_m - measured_m) / sigma_m) ** 2)


def _readings(rng: np.random.Generator) -> list[AisleReading]:
    slots_m = np.arange(SLOTS) * SLOT_M
    wall_m = SLOTS * SLOT_M
    out = []

    def ranging(sigma=0.4):
        z = (SLOTS - TRUE_SLOT) * SLOT_M + rng.normal(0.0, sigma)
        return AisleReading("wall ranger", f"end wall at {z:.2f} m", _gauss_contour(wall_m - slots_m, z, sigma), 0.95)

    def marker(name, slot, sigma=0.25, fault=False):
        z = (slot - TRUE_SLOT) * SLOT_M + rng.normal(0.0, sigma)
        return AisleReading(
            "marker camera",
            f"{name} {z:+.2f} m ahead",
            _gauss_contour(MARKERS[name] * SLOT_M - slots_m, z, sigma),
            0.9,
            fault,
        )

    out.append(ranging())
    out.append(marker("rack-end C2", MARKERS["rack-end C2"]))
    # The door contact reads "closed, robot not at the door": rules out the slots at the mouth,
    # up to the sensor's miss rate of 0.1.
    door = np.where(np.abs(np.arange(SLOTS) - DOOR_SLOT) <= 2, 0.1, 1.0)
    out.append(AisleReading("door contact D1", "closed, no robot", door, 0.98))
    # A ghost: a reflection read as rack-end C1 two metres ahead, where it cannot be.
    out.append(marker("rack-end C1", TRUE_SLOT + 4, fault=True))
    out.append(ranging())
    return out


def run_aisle_demo(seed: int = 7) -> AisleRun:
    """Run both beliefs over the same readings; every figure is computed, reproducible from ``seed``."""
    rng = np.random.default_rng(seed)
    posterior = Posterior.uniform(SLOTS)
    belief = MassFunction.vacuous(SLOTS)
    near_truth = [TRUE_SLOT - 1, TRUE_SLOT, TRUE_SLOT + 1]
    run = AisleRun(seed)
    for reading in _readings(rng):
        r = reading.reliability
        evidence = rules.discount(MassFunction.from_contour(reading.contour, levels=CONTOUR_LEVELS), r)
        # The discounted mass function's contour is r·c + (1 − r): the Bayesian side's likelihood.
        log_z = posterior.update(evidence.contour())
        joint = rules.conjunctive(belief, evidence)
        belief = rules.reduce_focal_sets(joint.normalised(), 32).mass_function
        run.steps.append(
            AisleStep(
                reading=reading,
                bayes_map_slot=posterior.map_cell(),
                bayes_surprise=-log_z,
                bayes_p_true=float(posterior.probabilities[near_truth].sum()),
                ds_conflict=joint.conflict,
                ds_best_slot=int(np.argmax(belief.pignistic())),
                ds_bel_true=belief.bel(near_truth),
                ds_pl_true=belief.pl(near_truth),
                focal_sets=len(belief),
            )
        )
    return run
