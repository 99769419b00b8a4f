"""Calibrate a case's sensors from a labelled log: read, pair with the truth, fit, summarise."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from fusion.calibration.data import datasets
from fusion.calibration.models import FitSettings, fit_sensor, require_pyro
from fusion.calibration.output import SensorCalibration, summarise_fits
from fusion.case_model import Case
from fusion.io.logs import LogRead, ReadPosition, SetAside, held, read_observations, require_records
from fusion.io.truth_file import read_truth

__all__ = ["Calibration", "calibrate"]


def _read_recording(log_path, truth_path, layout) -> tuple[LogRead, LogRead]:
    """Observations and true poses of a recording read through a layout, held in memory as a log's are."""
    from fusion.io import recording

    aside: list[SetAside] = []
    position = ReadPosition()
    records = held(recording.observations(log_path, layout, aside.append, position), log_path, "observations")
    log = LogRead(str(log_path), records, aside, position.lines)
    if truth_path is not None:
        return log, read_truth(truth_path)
    truth_aside: list[SetAside] = []
    poses = held(recording.truth(None, layout, truth_aside), layout.path, "true poses")
    return log, LogRead(str(layout.truth.file), poses, truth_aside, len(poses) + len(truth_aside))


@dataclass
class Calibration:
    summary: list[SensorCalibration]  # per sensor
    set_aside: list[tuple[str, SetAside]]  # (file, row) of every row not used
    observations: int
    poses: int
    skipped: list[str]  # sensors with no reading in the log
    no_model: list[str] = dataclasses.field(default_factory=list)  # sensors of a kind calibration cannot fit


def calibrate(
    case: Case, log_path, truth_path, settings: FitSettings | None = None, progress=None, layout=None
) -> Calibration:
    """Fit the sensors of ``case`` on the log (our format, or a robot's recording through ``layout``) against
    true poses (``truth_path``, or the layout's ``[truth]`` table when it is None)."""
    settings = settings or FitSettings()
    require_pyro()  # fail before reading a large log
    if layout is None:
        log, truth = read_observations(log_path), read_truth(truth_path)
    else:
        log, truth = _read_recording(log_path, truth_path, layout)
    require_records(log, "observations")
    require_records(truth, "true poses")
    data = datasets(case, log.records, truth.records)
    fits = []
    for spec in case.sensors:
        if spec.name not in data.by_sensor:
            continue
        if progress:
            progress(spec.name)
        fits += fit_sensor(spec.name, spec.kind, data.by_sensor[spec.name], settings)
    aside = [(log.path, s) for s in log.set_aside + data.set_aside] + [(truth.path, s) for s in truth.set_aside]
    skipped = [s.name for s in case.sensors if s.name not in data.by_sensor and s.name not in data.no_model]
    return Calibration(summarise_fits(fits), aside, len(log.records), len(truth.records), skipped, data.no_model)
