"""The same batch on a Dask LocalCluster (two worker processes): byte-identical archives, one shared output folder."""

from __future__ import annotations

import pytest

from batch_kit import archive_files, make_lab
from tsarchive.batch import read_catalog
from tsarchive.cli import main

distributed = pytest.importorskip("distributed")

#: What a catalog row says about the archive and its source (not when it was checked or where it was packed).
_SAME = ["archive", "source_sha256", "channels", "units", "n_samples", "budgets", "eps", "worst_errors", "ratio",
         "archive_bytes", "manifest_sha256", "settings_sha256"]


def test_dask_batch_matches_the_local_one_byte_for_byte(tmp_path, capsys):
    make_lab(tmp_path / "lab", 4)
    local, remote = tmp_path / "local", tmp_path / "dask"
    assert main(["pack", str(tmp_path / "lab"), "--into", str(local), "--jobs", "1"]) == 0
    capsys.readouterr()
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None) as c:
        code = main(["pack", str(tmp_path / "lab"), "--into", str(remote), "--scheduler", c.scheduler_address])
    text = capsys.readouterr().out
    assert code == 0 and text.count("] packed ") == 4 and c.scheduler_address in text
    got, want = archive_files(remote), archive_files(local)
    assert len(want) >= 4 and got == want                # every file of every archive, byte for byte
    rows = lambda out: read_catalog(out).select(_SAME).to_pylist()
    assert rows(remote) == rows(local)


def test_unreachable_scheduler_is_one_line(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr("tsarchive.batch.dask_run.CONNECT_TIMEOUT_S", 2)
    make_lab(tmp_path / "lab", 1)
    code = main(["pack", str(tmp_path / "lab"), "--into", str(tmp_path / "out"), "--scheduler", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1 and "cannot reach the Dask scheduler" in err


def test_dask_batch_with_a_shared_model_matches_the_local_one(tmp_path, capsys):
    make_lab(tmp_path / "lab", 3)
    local, remote = tmp_path / "local", tmp_path / "dask"
    assert main(["pack", str(tmp_path / "lab"), "--into", str(local), "--jobs", "1", "--shared-model"]) == 0
    capsys.readouterr()
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None) as c:
        code = main(["pack", str(tmp_path / "lab"), "--into", str(remote), "--scheduler", c.scheduler_address,
                     "--shared-model"])
    text = capsys.readouterr().out
    assert code == 0 and text.count("shared model\n") == 3
    want = archive_files(local)
    assert len({k.rsplit("/", 1)[0] for k in want}) == 3 and archive_files(remote) == want   # every archive, byte for byte
