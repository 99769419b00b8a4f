"""The replay's files, written as it goes under temporary names and renamed into place at the end."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

from fusion.inspect.findings import STEP_COLUMNS, Inspection
from fusion.io.csv_cells import number_cell
from fusion.io.outdir import PartialFile, atomic_write


class _Outputs:
    """The replay's files, written as it goes under temporary names and renamed into place by ``close``."""

    def __init__(self, out_dir: Path, frames: bool):
        self.dir = out_dir
        self._files: dict[str, PartialFile] = {}
        try:
            self.steps = self._open("steps.csv")
            self.steps_csv = csv.DictWriter(self.steps, fieldnames=STEP_COLUMNS)
            self.steps_csv.writeheader()
            self.aside = self._open("set_aside.jsonl")
            self.frames = self._open("frames.u8", binary=True) if frames else None
        except BaseException:
            self.abandon()
            raise

    def _open(self, name: str, binary: bool = False) -> PartialFile:
        self._files[name] = PartialFile(self.dir / name, binary=binary)
        return self._files[name]

    def abandon(self) -> None:
        """Remove the temporary files (the replay failed; nothing half-written is left)."""
        for f in self._files.values():
            f.abandon()

    def close(self) -> list[str]:
        try:
            for f in self._files.values():
                f.commit()
        except BaseException:
            self.abandon()
            raise
        return list(self._files)


def _write_summary(found: Inspection, out_dir: Path) -> None:
    atomic_write(out_dir / "episodes.json", json.dumps([e.to_record() for e in found.episodes], indent=1) + "\n")
    atomic_write(out_dir / "summary.json", json.dumps(found.summary(), indent=2, allow_nan=False) + "\n")
    found.files += ["episodes.json", "summary.json"]


def _fmt(key: str, v: float) -> str:
    return number_cell(key, v) if math.isfinite(v) else ""
