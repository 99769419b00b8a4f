"""What a person meets at the command line: suggestions for typos, help with examples, shipped cases by name,
one safety notice per command, counts in words.  Checked against the words themselves (no outside source: these
are our own conventions, stated here)."""

from __future__ import annotations

import pytest

from fusion import SAFETY_NOTICE
from fusion.cli import main
from fusion.cli.help_text import COMMANDS
from tests.test_case import TINY


def _refused(argv, capsys) -> str:
    with pytest.raises(SystemExit) as done:
        main(argv)
    assert done.value.code == 2
    return capsys.readouterr().err


@pytest.mark.parametrize(
    "argv, hint",
    [
        (["run", str(TINY), "--seeed", "3"], "--seeed: did you mean --seed?"),
        (["compare", str(TINY), "--seeed", "3"], "did you mean --seeds?"),
        (["rnu", str(TINY)], "did you mean run"),
        (["run", str(TINY), "--backend", "bayse"], "did you mean bayes?"),
        (["run", "depto"], "did you mean 'depot'?"),
    ],
)
def test_a_mistyped_option_command_or_case_gets_the_nearest_name(argv, hint, capsys):
    assert hint in _refused(argv, capsys)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_every_command_has_a_description_and_examples(name, capsys):
    with pytest.raises(SystemExit):
        main([name, "--help"])
    out = capsys.readouterr().out
    assert "examples:" in out and all(f"  {e}" in out for e in COMMANDS[name].examples)
    assert len(COMMANDS[name].examples) >= 1 and COMMANDS[name].description.split()[0] in out


def test_run_help_lists_the_rules_and_scrub_help_lists_its_keys(capsys):
    from fusion.backends import rule_names
    from fusion.view.scrub import _HELP

    for argv in (["run", "--help"], ["scrub", "--help"]):
        with pytest.raises(SystemExit):
            main(argv)
    out = " ".join(capsys.readouterr().out.split())
    assert all(rule in out for rule in rule_names())
    assert _HELP in out  # the keys the scrub view shows are the keys its help gives


def test_shipped_cases_are_listed_and_usable_by_name(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)  # no file called "calm" here: the name means the shipped case
    assert main(["cases"]) == 0
    listed = capsys.readouterr().out
    assert all(name in listed for name in ("calm", "depot", "ghost", "stuck_door"))
    assert main(["check", "calm", "--no-preview"]) == 0
    assert "valid" in capsys.readouterr().out


def test_one_safety_notice_per_command_and_none_before_an_input_error(tmp_path, capsys):
    head = SAFETY_NOTICE.split(":")[0]
    runs = [
        ["run", str(TINY), "--backend", "bayes", "--quiet", "--out", str(tmp_path / "r")],
        ["check", str(TINY), "--no-preview"],
    ]
    for argv in runs:
        assert main(argv) == 0
        captured = capsys.readouterr()
        said = " ".join((captured.out + captured.err).split())
        assert said.count(head) == 1, (argv, said.count(head))
    broken = tmp_path / "broken.toml"
    broken.write_text(TINY.read_text().replace("wall_spread_m = 0.15", "wall_spread_m = -1"))
    assert main(["run", str(broken), "--quiet", "--out", str(tmp_path / "b")]) == 2
    captured = capsys.readouterr()
    assert head not in captured.out + captured.err and "wall_spread_m" in captured.err


def test_targets_judge_any_case_by_what_it_holds():
    from fusion.errors import FusionError
    from fusion.io.case import load_case
    from fusion.targets import target_of

    tiny = load_case(TINY)
    assert target_of(tiny) == ("calm", None)
    assert target_of(load_case(TINY.parents[1].parent / "cases" / "ghost.toml")) == ("fault", "rack camera")
    assert target_of(load_case(TINY.parents[1].parent / "cases" / "carried.toml")) == ("recovery", None)
    with pytest.raises(FusionError, match="only faults are on the odometry"):
        target_of(load_case(TINY.parents[1].parent / "cases" / "slip.toml"))


def test_counts_are_in_words():
    from fusion.words import plural

    assert [plural(1, "fault"), plural(2, "fault"), plural(0, "run"), plural(1200, "reading")] == [
        "1 fault",
        "2 faults",
        "0 runs",
        "1,200 readings",
    ]


def test_run_writes_a_single_file_html_report(tmp_path):
    import json
    import re

    out = tmp_path / "r"
    assert main(["run", str(TINY), "--quiet", "--out", str(out)]) == 0
    page = (out / "report.html").read_text()
    summary = json.loads((out / "summary.json").read_text())
    assert page.count("data:image/png;base64,") == 2 and SAFETY_NOTICE.split(":")[0] in page
    assert f"Monitor actions ({len(summary['events'])})" in page
    median = summary["backends"]["bayes"]["median_error_m"]
    assert re.search(rf"<td>{median:.2f} m</td>", page)  # the report shows the summary's own figures


def test_targets_on_a_case_file_count_its_runs_down_to_the_end(capsys):
    # The time left is priced per case label; a case given as a file must count down like a shipped name.
    assert main(["targets", "--case", str(TINY), "--seeds", "2", "--backend", "bayes"]) == 0
    out = capsys.readouterr().out
    assert "2/2" in out and "finishing" in out
