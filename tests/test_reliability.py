"""Reliability: total conflict and zero evidence through the policy, long runs, the stream under
corruption, the last-resort error handler, and the data-only guarantee of our inputs."""

from __future__ import annotations

import ast
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest

from fusion import cli
from fusion.io.case import load_case, parse_case
from fusion.io.observations import from_record
from fusion.localizer import Localizer
from fusion.monitor import RELOCALIZE
from fusion.soak import CORRUPTIONS, soak_steps, soak_stream

TINY = Path(__file__).parent / "data" / "tiny.toml"
PACKAGE = Path(cli.__file__).parent


def _certain_contact_case():
    """The test bay with a door contact that is never wrong: its reading is a certain set."""
    text = TINY.read_text().replace(
        'door = "bay door"\n', 'door = "bay door"\nhit_rate = 1.0\nfalse_alarm_rate = 0.0\nreliability = 1.0\n'
    )
    return parse_case(text, "certain-contact.toml")


@pytest.mark.parametrize("backend", ["bayes", "evidential"])
def test_total_conflict_and_zero_evidence_are_reported_then_relocalized_never_nan(backend):
    # A certain "door open" far from the door: on the evidential side every focal set of the belief
    # is disjoint from the reading's, so Dempster's normalisation 1/(1−K) is undefined at K = 1
    # (Shafer 1976, A Mathematical Theory of Evidence, ch. 3), and the weight of conflict −log(1−K)
    # is infinite; on the Bayesian side p(z | past) = 0.  Both must reach the policy, not NaN.
    loc = Localizer.from_case(_certain_contact_case(), backend)
    loc.start_at(8.5, 1.5, 0.0)
    actions = []
    for i in range(loc.policy.relocalize_after + 2):
        d = loc.step(None, [from_record({"t": 0.25 * i, "sensor": "contact", "kind": "door", "active": True})])
        actions.append(d.action)
        record = json.loads(json.dumps(d.to_record(), allow_nan=False))  # no NaN or infinity reaches a consumer
        p = loc.filter.distribution()
        assert np.isfinite(p).all() and (p >= 0).all() and math.isclose(p.sum(), 1.0, abs_tol=1e-9)
        if RELOCALIZE not in actions:
            assert d.figures.conflict == pytest.approx(1.0)
            assert record["figures"]["weight_of_conflict"] is None  # infinite, written as null
    assert RELOCALIZE in actions
    i = actions.index(RELOCALIZE)
    assert i + 1 == loc.policy.relocalize_after
    # after the reset the belief sits at the door, where the certain reading put it
    est = loc.filter.pose_estimate()
    assert math.hypot(est.x_m - 0.75, est.y_m - 3.0) <= 1.0 + 0.5


@pytest.mark.parametrize("backend", ["bayes", "evidential"])
def test_a_soak_of_the_test_bay_keeps_the_belief_a_distribution(backend):
    report = soak_steps(load_case(TINY), backend, 2500)
    assert report.ok, report.first_violation
    assert report.steps == 2500 and report.nan_decisions == 0
    assert report.worst_sum_error <= 1e-9 and report.lowest_value >= 0
    if report.focal_bound:  # a back end that keeps focal sets (the contour filter keeps none)
        assert 1 <= report.most_focal_sets <= report.focal_bound + 1


def test_a_soak_is_reproducible_from_its_seed():
    case = load_case(TINY)
    a, b = soak_steps(case, "bayes", 800, seed=5), soak_steps(case, "bayes", 800, seed=5)
    assert a.actions == b.actions and a.worst_sum_error == b.worst_sum_error


def test_the_stream_survives_every_kind_of_corruption_in_bounded_memory():
    report, tally = soak_stream(load_case(TINY), "bayes", 6000, corrupt_share=0.3)
    assert report.ok, report.first_violation
    assert set(tally) == set(CORRUPTIONS)  # every kind was tried
    assert report.rejected >= sum(tally.values()) * 0.9  # a corrupted line may still parse (e.g. cut at a brace)
    assert report.actions["decisions"] + report.rejected == report.steps
    samples = [mb for step, mb in report.memory_mb if step >= 1000]
    assert max(samples) - min(samples) < 16  # MiB: the stream holds no line it has answered


def test_the_soak_command_writes_its_figures_and_says_so(tmp_path, capsys):
    code = cli.main(["soak", str(TINY), "--steps", "300", "--backend", "bayes", "--out", str(tmp_path), "--quiet"])
    assert code == 0
    saved = json.loads((tmp_path / "soak.json").read_text())
    assert saved["runs"][0]["steps"] == 300 and saved["runs"][0]["ok"]
    assert "not a certified safety function" in capsys.readouterr().out


def test_an_unexpected_error_reaches_the_user_as_a_message_and_a_kept_trace(monkeypatch, capsys):
    def broken(args):
        raise RuntimeError("a defect planted by the test")

    from fusion.cli import simulating

    monkeypatch.setattr(simulating, "check_command", broken)
    code = cli.main(["check", str(TINY)])
    err = capsys.readouterr().err
    assert code == cli.EXIT_DEFECT
    assert "Traceback" not in err and "internal error (RuntimeError: a defect planted by the test)" in err
    trace = Path(err.split("The trace is in ")[1].split(";")[0])
    assert "RuntimeError" in trace.read_text()
    trace.unlink()


def test_a_missing_or_unwritable_output_is_an_error_not_a_traceback(tmp_path, capsys):
    blocker = tmp_path / "taken"
    blocker.write_text("a file where the output folder should go")
    code = cli.main(["soak", str(TINY), "--steps", "10", "--out", str(blocker), "--quiet"])
    assert code == cli.EXIT_BAD_INPUT
    assert "Traceback" not in capsys.readouterr().err


# ----------------------------------------------------------------------------- data only
FORBIDDEN_MODULES = {"pickle", "cPickle", "dill", "marshal", "shelve", "yaml", "joblib"}
FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__"}


def test_the_package_never_unpickles_evaluates_or_executes_what_it_reads():
    # Case, log, calibration and index files are data only: nothing in the package can turn their
    # content into code.  A static check of every module: no pickle-family import, no eval/exec,
    # no numpy load that allows pickles, no shell.
    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                names = [a.name for a in node.names] if isinstance(node, ast.Import) else [node.module or ""]
                found += [f"{path.name}: import {n}" for n in names if n.split(".")[0] in FORBIDDEN_MODULES]
            elif isinstance(node, ast.Call):
                f = node.func
                name = f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else ""
                if name in FORBIDDEN_CALLS and isinstance(f, ast.Name):  # the builtins, not re.compile
                    found.append(f"{path.name}:{node.lineno}: {name}()")
                for kw in node.keywords:
                    if kw.arg in ("allow_pickle", "shell") and not (
                        isinstance(kw.value, ast.Constant) and kw.value.value is False
                    ):
                        found.append(f"{path.name}:{node.lineno}: {kw.arg}=")
                if name == "load" and isinstance(f, ast.Attribute) and getattr(f.value, "id", "") == "torch":
                    found.append(f"{path.name}:{node.lineno}: torch.load")
    assert found == []


def test_a_calibration_file_over_the_size_bound_is_refused(tmp_path):
    from fusion.errors import InputFileError
    from fusion.io.case import MAX_CASE_BYTES, apply_calibration

    big = tmp_path / "calibrated.toml"
    big.write_bytes(b"#" * (MAX_CASE_BYTES + 1))
    with pytest.raises(InputFileError, match="limit"):
        apply_calibration(load_case(TINY), big)


def test_the_stream_refuses_an_endless_line_without_holding_it():
    # A producer that never sends a newline: the stream reads it in bounded blocks and refuses it.
    from fusion.stream import MAX_LINE_BYTES, stream

    class Endless(io.RawIOBase):
        sent, ended = 0, False

        def readline(self, limit=-1):
            if self.ended:
                return b""
            if self.sent > 50 * MAX_LINE_BYTES:
                self.ended = True
                return b"\n"
            self.sent += limit
            return b"x" * limit

    out, err = io.StringIO(), io.StringIO()
    written, rejected = stream(Localizer.from_case(load_case(TINY), "bayes"), Endless(), out, err)
    assert (written, rejected) == (0, 1) and "longer than" in out.getvalue()


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads process states from /proc")
def test_compare_workers_end_when_their_parent_is_killed(tmp_path):
    """A sweep killed with SIGKILL runs no clean-up; its workers must still end (not run on for hours)."""
    import signal
    import subprocess
    import sys
    import time

    code = (
        "import os, sys\n"
        "from fusion.compare import run_in_processes\n"
        f"job = ('echo $PPID > {tmp_path}/worker.pid; exec sleep 120',)\n"
        "run_in_processes([job], 1, None, lambda r: None, lambda j, e: None, target=os.system)\n"
    )
    parent = subprocess.Popen([sys.executable, "-c", code])
    pid_file = tmp_path / "worker.pid"
    deadline = time.time() + 60
    while not (pid_file.exists() and pid_file.read_text().strip()) and time.time() < deadline:
        time.sleep(0.1)
    worker = int(pid_file.read_text())
    assert _alive(worker)
    parent.send_signal(signal.SIGKILL)
    parent.wait()
    deadline = time.time() + 10
    while _alive(worker) and time.time() < deadline:
        time.sleep(0.1)
    assert not _alive(worker)


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return False
    return "\nState:\tZ" not in state and "\nState:\tX" not in state
