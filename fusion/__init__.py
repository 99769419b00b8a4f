"""Evidence fusion for mobile-robot localization.

Two families of belief over the same pose cells: a Bayesian posterior
(``fusion.belief.posterior``) and Dempster–Shafer mass functions
(``fusion.belief.mass``, ``fusion.belief.rules``).  ``import fusion`` stays
light: the names below are loaded on first use, and no optional heavy library
(torch, pyro, matplotlib) is ever imported here.

Decision support and monitoring only, not a certified safety function.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

SAFETY_NOTICE = (
    "Decision-support and monitoring tool, not a certified safety function: do not rely on it to keep "
    "people safe near a moving robot. The applicable machine-safety standards and the site's own safety "
    "case govern."
)

_LAZY = {
    "MassFunction": "fusion.belief.mass",
    "combine": "fusion.belief.rules",
    "RULES": "fusion.belief.rules",
    "discount": "fusion.belief.rules",
    "reduce_focal_sets": "fusion.belief.rules",
    "Posterior": "fusion.belief.posterior",
    "FusionError": "fusion.errors",
    "Localizer": "fusion.localizer",
    "Decision": "fusion.localizer",
    "SensorSet": "fusion.sensors.sensor_set",
    "load_case": "fusion.io.case",
    "apply_calibration": "fusion.io.case",
    "Observation": "fusion.io.observations",
    "from_record": "fusion.io.observations",
    "read_observations": "fusion.io.logs",
}

__all__ = ["SAFETY_NOTICE", "__version__", *_LAZY]


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'fusion' has no attribute {name!r}")
