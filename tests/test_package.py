import subprocess
import sys
from pathlib import Path

import pytest

from fusion import SAFETY_NOTICE
from fusion.cli import main


def test_import_is_light_and_never_pulls_torch_or_numba():
    code = (
        "import sys, fusion; fusion.MassFunction; fusion.Posterior; fusion.combine;"
        "heavy = [m for m in ('torch', 'pyro', 'matplotlib', 'pandas', 'rich', 'numba') if m in sys.modules];"
        "print(','.join(heavy))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_the_safety_notice_is_stated():
    assert "not a certified safety function" in SAFETY_NOTICE
    assert "safety case" in SAFETY_NOTICE


def test_no_command_prints_help_and_fails(capsys):
    assert main([]) == 2
    assert "demo" in capsys.readouterr().out


def test_bench_reports_ratios_as_json(capsys):
    import json

    assert main(["bench", "--quick", "--repeats", "1", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    rows = out["cost"]
    assert {(r["backend"], r["operation"]) for r in rows} == {
        ("bayes", "update"),
        ("bayes", "update + region size"),
        ("bayes", "predict"),
        ("mass functions", "Dempster's rule"),
        ("evidential", "update"),
        ("evidential", "predict (probabilistic)"),
        ("evidential", "predict (bounded)"),
        ("evidential, focal sets", "update"),
        ("evidential, focal sets", "update as run"),
        ("evidential, focal sets", "predict"),
        ("evidential, focal sets", "step"),
        ("all", "import fusion"),
        ("all", "from fusion import Localizer, load_case"),
        ("all", "fusion --help"),
    }
    # Fidelity rows: the plausibility transform with probabilistic motion equals the Bayes posterior
    # (Shafer 1976); every other row is a measured distance in [0, 1].
    fidelity = {r["output"]: r["distance"] for r in out["fidelity"]}
    assert fidelity["plausibility transform = Bayes posterior"] < 1e-12
    assert all(0.0 <= d <= 1.0 for d in fidelity.values()) and len(fidelity) == 6
    for r in rows:  # ratios are computed from the two times of the same run, never hard-coded
        assert abs(r["ratio"] - r["best_ms"] / r["floor_ms"]) < 1e-9 * r["ratio"]
    in_turn = [r for r in rows if r["slowest_ratio"] is not None]  # the grid and frame rows take inputs in turn
    assert {r["backend"] for r in in_turn} == {"bayes", "evidential", "evidential, focal sets", "mass functions"}
    assert all(r["slowest_ratio"] >= r["ratio"] for r in in_turn)  # the slowest input is no faster than the median


@pytest.mark.slow
def test_the_sweep_benchmark_reports_its_speed_up_beside_the_machines_ceiling():
    from fusion.bench_sweep import bench_sweep

    sweep, busy, ceiling = bench_sweep(Path(__file__).parent / "data" / "tiny.toml", seeds=1, workers=2)
    assert sweep.operation == "compare sweep, 2 workers" and ceiling.operation == "2 copies at once"
    # Busy share: the runs' own wall times over 2 × elapsed; it cannot exceed 1.
    assert busy.operation == "workers busy, 2 workers" and 0 < busy.ratio <= 1
    assert abs(busy.ratio - busy.best_ms / busy.floor_ms) < 1e-9 and "× their one-worker time" in busy.note
    assert abs(sweep.ratio - sweep.floor_ms / sweep.best_ms) < 1e-9 * sweep.ratio  # one worker over two
    assert abs(ceiling.ratio - 2 * ceiling.floor_ms / ceiling.best_ms) < 1e-9 * ceiling.ratio
    assert f"{sweep.ratio / ceiling.ratio:.0%} of this machine's ceiling" in sweep.note


def test_the_back_end_step_benchmark_times_every_family_on_the_same_ticks():
    from fusion.backends import BACKENDS
    from fusion.bench_steps import bench_backend_steps

    rows = bench_backend_steps(Path(__file__).parent / "data" / "tiny.toml", ticks=12)
    assert [r.backend for r in rows] == list(BACKENDS)
    for r in rows:
        assert r.operation == "back-end step" and r.best_ms >= 0 and "11 ticks after the first" in r.note
        assert abs(r.ratio - r.best_ms / r.floor_ms) < 1e-9 * max(r.ratio, 1e-12)
    assert "particles at the end" in next(r for r in rows if r.backend == "particles").note


def test_bench_measures_the_stream_rate_of_every_back_end():
    # The rows behind the stream-rate target (docs/benchmark.md); a short run here, the bench itself runs 3,000 lines.
    from fusion.backends import BACKENDS
    from fusion.bench_stream import bench_stream
    from fusion.cli.opening import builtin_case

    rows = bench_stream(builtin_case("depot.toml"), lines=60)
    assert [r.backend for r in rows] == list(BACKENDS)
    assert all(r.best_ms > 0 and "lines per CPU second over 60 lines" in r.note for r in rows)
