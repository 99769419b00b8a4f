"""Output folders: every command owns its folder, never loses earlier results unasked, never follows a
planted link, leaves no temporary file behind and writes files as the user's umask says.

The permission checks use the POSIX rule that a file created with mode 0666 gets 0666 & ~umask
(IEEE Std 1003.1-2017, open()).  Everything else is checked against what was on disk before.
"""

from __future__ import annotations

import errno
import json
import os
from pathlib import Path

import pytest

from fusion.cli import main
from fusion.io import outdir
from fusion.io.outdir import MARK, TEMP_PREFIX, atomic_write, claim, default_folder

TINY = Path(__file__).parent / "data" / "tiny.toml"


def _run(*argv) -> int:
    return main(["run", str(TINY), "--quiet", *map(str, argv)])


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("owned") / "A"
    assert _run("--out", folder) == 0
    return folder


def test_inspect_into_a_run_folder_is_refused_and_the_run_survives(run_folder, capsys, tmp_path):
    before = _snapshot(run_folder)
    log = run_folder / "observations.jsonl"
    code = main(["inspect", str(log), "--site", str(TINY), "--out", str(run_folder), "--quiet", "--no-frames"])
    err = capsys.readouterr().err
    assert code == 2 and "holds the results of 'fusion run'" in err and "--replace" in err
    assert _snapshot(run_folder) == before
    # --replace would delete the very log it reads: refused too, and nothing is touched.
    code = main(["inspect", str(log), "--site", str(TINY), "--out", str(run_folder), "--replace", "--quiet"])
    assert code == 2 and "is an input of this command" in capsys.readouterr().err
    assert _snapshot(run_folder) == before


def test_another_rule_needs_another_folder_and_the_summary_records_the_settings(run_folder, capsys):
    before = _snapshot(run_folder)
    assert _run("--out", run_folder, "--rule", "yager") == 2
    assert "rule: 'dempster' there, 'yager' now" in capsys.readouterr().err
    assert _snapshot(run_folder) == before
    settings = json.loads((run_folder / "summary.json").read_text())["settings"]
    from fusion.backends import BACKENDS  # the test bay names no back ends: every family runs

    assert settings["rule"] == "dempster" and settings["backends"] == list(BACKENDS)


def test_default_folders_differ_by_input_back_end_and_rule(tmp_path):
    a = default_folder(tmp_path / "x" / "log.jsonl", "inspect", "dempster")
    assert a != default_folder(tmp_path / "y" / "log.jsonl", "inspect", "dempster")  # same name, other folder
    assert a != default_folder(tmp_path / "x" / "log.jsonl", "inspect", "yager")
    assert default_folder("c.toml", "run", "bayes") != default_folder("c.toml", "run", "bayes+evidential")


def test_the_same_work_again_replaces_its_results_and_leaves_no_stale_file(tmp_path):
    folder = claim(tmp_path / "o", "job", {"k": 1})
    atomic_write(folder.file("a.txt"), "old")
    atomic_write(folder.file("episode-3.png"), b"old map")
    folder.finish(["a.txt", "episode-3.png"])
    again = claim(tmp_path / "o", "job", {"k": 1})  # same work: allowed
    atomic_write(again.file("a.txt"), "new")
    again.finish(["a.txt"])
    assert sorted(p.name for p in (tmp_path / "o").iterdir()) == sorted([MARK, "a.txt"])
    assert (tmp_path / "o" / "a.txt").read_text() == "new"


def test_replace_removes_only_our_files_and_foreign_folders_are_refused(tmp_path):
    folder = claim(tmp_path / "o", "job", {"k": 1}, folders=("runs",))
    (tmp_path / "o" / "runs").mkdir()
    atomic_write(tmp_path / "o" / "runs" / "r1.json", "{}")  # a killed sweep: written, not yet recorded
    atomic_write(folder.file("a.txt"), "old")
    folder.finish(["a.txt"])
    with pytest.raises(outdir.FolderError, match="other settings"):
        claim(tmp_path / "o", "job", {"k": 2})
    claim(tmp_path / "o", "job", {"k": 2}, replace=True)
    assert [p.name for p in (tmp_path / "o").iterdir()] == [MARK]
    (tmp_path / "f").mkdir()
    (tmp_path / "f" / "thesis.tex").write_text("mine")
    for replace in (False, True):
        with pytest.raises(outdir.FolderError, match="did not write"):
            claim(tmp_path / "f", "job", {}, replace=replace)
    assert (tmp_path / "f" / "thesis.tex").read_text() == "mine"


def test_a_hand_edited_mark_cannot_make_us_delete_outside_the_folder(tmp_path):
    victim = tmp_path / "victim.txt"
    victim.write_text("keep")
    (tmp_path / "o").mkdir()
    (tmp_path / "o" / MARK).write_text(json.dumps({"job": "x", "settings": {}, "files": ["../victim.txt"]}))
    claim(tmp_path / "o", "job", {}, replace=True)
    assert victim.read_text() == "keep"


def test_a_planted_link_is_never_followed(tmp_path):
    target = tmp_path / "precious.txt"
    target.write_text("precious")
    out = tmp_path / "o"
    out.mkdir()
    (out / "steps.csv").symlink_to(target)  # a link where a result goes
    (out / ".steps.csv.partial").symlink_to(target)  # and where older versions put the temporary file
    atomic_write(out / "steps.csv", "rows")
    assert target.read_text() == "precious"
    assert not (out / "steps.csv").is_symlink() and (out / "steps.csv").read_text() == "rows"


@pytest.mark.parametrize("mask, mode", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_files_follow_the_umask(tmp_path, mask, mode):
    old = os.umask(mask)
    try:
        atomic_write(tmp_path / "f.txt", "x")
    finally:
        os.umask(old)
    assert (tmp_path / "f.txt").stat().st_mode & 0o777 == mode


def test_a_full_disk_leaves_no_temporary_file(tmp_path, monkeypatch):
    def full(self, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(outdir.PartialFile, "write", full)
    with pytest.raises(OSError):
        atomic_write(tmp_path / "f.txt", "x")
    assert list(tmp_path.iterdir()) == []


def test_a_full_disk_during_a_replay_leaves_no_temporary_file(tmp_path, monkeypatch, run_folder, capsys):
    real = outdir.PartialFile.write
    calls = {"n": 0}

    def fills_up(self, data):
        calls["n"] += 1
        if calls["n"] > 40:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(self, data)

    monkeypatch.setattr(outdir.PartialFile, "write", fills_up)
    out = tmp_path / "ins"
    code = main(["inspect", str(run_folder / "observations.jsonl"), "--site", str(TINY), "--out", str(out), "--quiet"])
    assert code == 2 and "No space left" in capsys.readouterr().err
    # no temporary file is left, and the folder the failed replay claimed is left as it was found (absent)
    assert not out.exists()


def test_a_refused_input_leaves_no_folder_behind(tmp_path, capsys):
    (tmp_path / "empty.jsonl").write_text("")
    (tmp_path / "noise.jsonl").write_bytes(bytes(range(256)) * 20_000)
    out = tmp_path / "o"
    code = main(
        [
            "inspect",
            str(tmp_path / "empty.jsonl"),
            "--site",
            str(TINY),
            "--truth",
            str(tmp_path / "noise.jsonl"),
            "--out",
            str(out),
        ]
    )
    assert code == 2 and "this is no log" in capsys.readouterr().err
    assert not out.exists()


def test_an_unwritable_out_is_refused_before_any_work(tmp_path, capsys, monkeypatch):
    (tmp_path / "file").write_text("")
    ran = []
    monkeypatch.setattr("fusion.runner.simulate", lambda *a, **k: ran.append(1) or [])
    assert _run("--out", tmp_path / "file" / "sub") == 2
    assert "output folder" in capsys.readouterr().err and not ran


def test_calibration_files_are_one_per_log_and_never_overwritten_unasked(tmp_path, capsys):
    from fusion.cli.outputs import calibration_name as _calibration_name

    assert _calibration_name(tmp_path / "a.jsonl") != _calibration_name(tmp_path / "b.jsonl")
    existing = tmp_path / "cal.toml"
    existing.write_text("mine")
    argv = ["calibrate", str(tmp_path / "log.jsonl"), "--truth", str(tmp_path / "t.jsonl"), "--site", str(TINY)]
    (tmp_path / "log.jsonl").write_text("")
    (tmp_path / "t.jsonl").write_text("")
    assert main([*argv, "--out", str(existing)]) == 2
    assert "exists" in capsys.readouterr().err and existing.read_text() == "mine"
    # a folder that does not exist is refused before the fit, naming the folder (not a temporary file)
    assert main([*argv, "--out", str(tmp_path / "nowhere" / "c.toml")]) == 2
    err = capsys.readouterr().err
    assert "nowhere" in err and TEMP_PREFIX not in err


def test_a_sweep_resumes_past_a_run_file_that_lacks_a_figure(tmp_path):
    from fusion.compare import FIGURES
    from fusion.compare.engine import _load_done

    runs = tmp_path / "runs"
    runs.mkdir()
    series = {"t": [0.0, 0.25], "error_m": [0.1, 0.2], "level": [0.5, 0.5]}
    whole = {"setting": {"backend": "bayes"}, "key": "bayes", "seed": 1, "ticks": 2, "series": series}
    whole |= dict.fromkeys(FIGURES, 0.5)
    lacking = {k: v for k, v in whole.items() if k != "p95_error_m"} | {"seed": 2}
    (runs / "a.json").write_text(json.dumps(whole))
    (runs / "b.json").write_text(json.dumps(lacking))
    (runs / "c.json").write_text("[" * 100_000)  # not a run file: skipped, not a crash
    done = _load_done(tmp_path, {("bayes", 1), ("bayes", 2)})
    assert list(done) == [("bayes", 1)]  # the incomplete run is run again


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
def test_a_pipe_planted_as_a_frame_index_is_refused_not_waited_on(tmp_path, capsys):
    os.mkfifo(tmp_path / "frames.json")
    assert main(["scrub", str(tmp_path)]) == 2
    assert "not a regular file" in capsys.readouterr().err
