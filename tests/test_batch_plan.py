"""Which files a batch takes and where their archives go (tsarchive.batch.plan), and the command's refusals."""

from __future__ import annotations

import os

import pytest

from batch_kit import write_logger
from tsarchive.batch import is_batch, plan_batch
from tsarchive.cli import main
from tsarchive.errors import BadInput


def _rels(plan) -> list[str]:
    return [j.rel for j in plan.jobs]


def test_folder_is_walked_below_skipping_hidden_archives_unsupported_and_the_output(tmp_path):
    lab = tmp_path / "lab"
    write_logger(lab / "a.csv")
    write_logger(lab / "2024" / "03" / "b.csv")
    write_logger(lab / ".cache.csv")                       # hidden file
    write_logger(lab / ".git" / "c.csv")                   # hidden folder
    write_logger(lab / "old.tsarchive" / "d.csv")          # inside an archive folder
    (lab / "notes.md").write_text("not a recording")       # unsupported extension
    (lab / "unnamed.tsx").mkdir()
    (lab / "unnamed.tsx" / "manifest.json").write_text("{}")   # an archive folder by its manifest
    write_logger(lab / "unnamed.tsx" / "e.csv")
    write_logger(lab / "archives" / "old" / "f.csv")       # inside the output folder
    plan = plan_batch([str(lab)], lab / "archives")
    # expected by construction of the folder above (common practice (no source): dot files are hidden)
    assert _rels(plan) == ["a.csv.tsarchive", "2024/03/b.csv.tsarchive"]
    assert [j.archive for j in plan.jobs] == [lab / "archives" / "a.csv.tsarchive",
                                             lab / "archives" / "2024" / "03" / "b.csv.tsarchive"]


def test_globs_and_lists_mirror_paths_below_their_common_folder(tmp_path):
    for name in ("lab1/run.csv", "lab1/run.parquet.csv", "lab2/run.csv", "lab2/deep/x.csv"):
        write_logger(tmp_path / name)
    out = tmp_path / "out"
    # two folders: paths below their common parent, so lab1/run.csv and lab2/run.csv stay apart
    assert sorted(_rels(plan_batch([str(tmp_path / "lab1"), str(tmp_path / "lab2")], out))) == [
        "lab1/run.csv.tsarchive", "lab1/run.parquet.csv.tsarchive", "lab2/deep/x.csv.tsarchive",
        "lab2/run.csv.tsarchive"]
    # a pattern: paths below its fixed part; ** reaches into folders (Python's glob, recursive=True)
    assert _rels(plan_batch([str(tmp_path / "lab2" / "*.csv")], out)) == ["run.csv.tsarchive"]
    assert _rels(plan_batch([str(tmp_path / "lab2" / "**" / "*.csv")], out)) == [
        "deep/x.csv.tsarchive", "run.csv.tsarchive"]
    # a list of files, one named twice: once
    one = str(tmp_path / "lab1" / "run.csv")
    assert _rels(plan_batch([one, one, str(tmp_path / "lab2" / "run.csv")], out)) == [
        "lab1/run.csv.tsarchive", "lab2/run.csv.tsarchive"]


def test_is_batch_by_arguments(tmp_path):
    f = write_logger(tmp_path / "a.csv")
    assert not is_batch([str(f)], None)
    assert is_batch([str(f)], "out")
    assert is_batch([str(f), str(f)], None)
    assert is_batch([str(tmp_path)], None)
    assert is_batch([str(tmp_path / "*.csv")], None)
    assert not is_batch([str(tmp_path / "missing.csv")], None)   # a missing file stays a single pack's error


@pytest.mark.parametrize("argv, words", [
    (["{lab}", "--into", "{lab}"], "beside the source"),                  # never next to a source
    (["{lab}", "--into", "{lab}/sub"], "beside the source"),              # sub holds a source too
    (["{lab}", "-o", "{tmp}/x.tsarchive"], "--into FOLDER instead of -o"),
    (["{lab}"], "add --into FOLDER"),
    (["{lab}", "--into", "{tmp}/out.tsarchive"], "archive's name"),
    (["{tmp}/nothing", "--into", "{tmp}/out"], "no recordings found"),
    (["{tmp}/*.wav", "--into", "{tmp}/out"], "no file matches"),
    (["{lab}/a.csv", "--jobs", "2"], "add --into FOLDER"),
    (["{lab}", "--into", "{tmp}/out", "--jobs", "0"], "at least 1"),
    (["{lab}", "--into", "{tmp}/out", "--budget", "abc"], "cannot read budget 'abc'"),   # once, not per file
])
def test_bad_batch_arguments_exit_2_with_one_line_and_write_nothing(tmp_path, capsys, argv, words):
    lab = tmp_path / "lab"
    write_logger(lab / "a.csv")
    write_logger(lab / "sub" / "b.csv")
    (tmp_path / "nothing").mkdir()
    before = sorted(os.walk(tmp_path))
    code = main(["pack", *(a.format(lab=lab, tmp=tmp_path) for a in argv)])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and words in err
    assert sorted(os.walk(tmp_path)) == before


def test_a_catalog_is_never_taken_for_a_recording(tmp_path, capsys):
    lab = tmp_path / "lab"
    write_logger(lab / "a.csv")
    assert main(["pack", str(lab), "--into", str(tmp_path / "first")]) == 0
    capsys.readouterr()
    # the first batch's output folder (holding catalog.parquet) packed again elsewhere: nothing to pack there
    with pytest.raises(BadInput, match="no recordings found"):
        plan_batch([str(tmp_path / "first")], tmp_path / "second")
