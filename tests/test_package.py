import subprocess
import sys

from fusion import SAFETY_NOTICE
from fusion.cli import main


def test_import_is_light_and_never_pulls_torch():
    code = (
        "import sys, fusion; fusion.MassFunction; fusion.Posterior; fusion.combine;"
        "heavy = [m for m in ('torch', 'pyro', 'matplotlib', 'pandas', 'rich') if m in sys.modules];"
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
    rows = json.loads(capsys.readouterr().out)
    assert {(r["backend"], r["operation"]) for r in rows} == {
        ("bayes", "update"),
        ("bayes", "predict"),
        ("evidential", "update"),
        ("evidential", "update as run"),
        ("evidential", "predict"),
        ("evidential", "step"),
    }
    for r in rows:  # ratios are computed from the two times of the same run, never hard-coded
        assert abs(r["ratio"] - r["best_ms"] / r["floor_ms"]) < 1e-9 * r["ratio"]
