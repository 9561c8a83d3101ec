"""One model for a batch (``--shared-model``): the same bytes whatever --jobs, stored in every archive that uses
it, and a file with other channels packs with its own."""

from __future__ import annotations

import json

import numpy as np
import pytest

import tsarchive
from batch_kit import archive_files, make_lab, write_logger
from tsarchive.archive import open_archive
from tsarchive.batch import BatchSettings, plan_batch
from tsarchive.batch.shared import learn_models
from tsarchive.cli import main
from tsarchive.index import build_index, member
from tsarchive.ingest import read_recording
from tsarchive.modelrun import GivenModel
from tsarchive.options import PackOptions


def _pack(capsys, *argv):
    code = main([str(a) for a in argv])
    return code, capsys.readouterr()


def test_jobs_1_and_2_give_the_same_bytes_with_a_shared_model(tmp_path, capsys):
    make_lab(tmp_path / "lab", 4)
    one, two = tmp_path / "one", tmp_path / "two"
    code, got = _pack(capsys, "pack", tmp_path / "lab", "--into", one, "--jobs", "1", "--shared-model")
    assert code == 0 and got.out.count("shared model\n") == 4 and "learned from 4 file(s)" in got.out
    code, got = _pack(capsys, "pack", tmp_path / "lab", "--into", two, "--jobs", "2", "--shared-model")
    assert code == 0 and got.out.count("shared model\n") == 4       # the workers got it (once each, at start)
    want = archive_files(one)
    assert len({k.rsplit("/", 1)[0] for k in want}) == 4 and archive_files(two) == want   # every archive, byte for byte


def test_a_file_with_other_channels_packs_with_its_own_model_and_says_so(tmp_path, capsys):
    make_lab(tmp_path / "lab", 3)
    other = tmp_path / "lab" / "other.csv"
    other.write_text("time,pressure [kPa]\n" + "".join(f"2031-04-02T06:00:{s:02d}Z,{101 + s / 100:.2f}\n"
                                                           for s in range(60)))
    code, got = _pack(capsys, "pack", tmp_path / "lab", "--into", tmp_path / "out", "--jobs", "1",
                      "--shared-model", "--json")
    assert code == 0
    models = {f["rel"]: f["model"] for f in json.loads(got.out)["files"]}
    assert models.pop("other.csv.tsarchive") == "own model (its channels match no shared model)"
    assert set(models.values()) == {"shared model"}
    line = next(l for l in got.err.splitlines() if "other.csv.tsarchive" in l)
    assert line.endswith("own model (its channels match no shared model)")
    # each archive stands alone: every sample compared with its source by verify, the batch's folder gone
    (tmp_path / "out" / ".tsarchive-catalog").rename(tmp_path / "elsewhere")
    for src in [*sorted((tmp_path / "lab").rglob("*.csv"))]:
        rel = src.relative_to(tmp_path / "lab").as_posix() + ".tsarchive"
        assert tsarchive.verify(tmp_path / "out" / rel, against=src).ok


def test_a_shared_model_run_does_not_skip_a_per_file_run_s_archives(tmp_path, capsys):
    make_lab(tmp_path / "lab", 2)
    assert _pack(capsys, "pack", tmp_path / "lab", "--into", tmp_path / "out")[0] == 0
    code, got = _pack(capsys, "pack", tmp_path / "lab", "--into", tmp_path / "out", "--shared-model")
    assert code == 1 and "packed with other settings; pass --force" in got.err
    assert BatchSettings(shared_model=True).fingerprint() != BatchSettings().fingerprint()
    # a per-file batch's settings digest is the one it had before the option existed (its archives still skip)
    assert "shared_model" not in BatchSettings().to_dict()


def test_learning_is_the_same_from_the_same_plan(tmp_path):
    for i in range(5):
        write_logger(tmp_path / "lab" / f"log{i}.csv", n=3000, seed=i)
    plan = plan_batch([str(tmp_path / "lab")], tmp_path / "out")
    a, b = learn_models(plan, BatchSettings(shared_model=True)), learn_models(plan, BatchSettings(shared_model=True))
    assert a.files == 5 and len(a.models) == 1 and a.models[0].channels == ("temp", "rh")
    for ca, cb in zip(a.models[0].index, b.models[0].index):
        assert np.array_equal(ca.basis, cb.basis) and ca.step == cb.step and "shared by a batch (5 files)" in ca.note


def _smooth_npy(path, n=12_000, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    x = np.stack([np.sin(t / 9.0) + 0.05 * rng.normal(size=n), np.cos(t / 13.0) + 0.05 * rng.normal(size=n)], 1)
    np.save(path, x.astype(np.float32))
    return path


def test_pack_uses_a_given_model_and_stores_it(tmp_path):
    """The hook itself: no training, the given decoder and index coders in the archive as given."""
    from tsarchive.model.train import train_autoencoder
    src = _smooth_npy(tmp_path / "a.npy")
    rec = read_recording(src, rate=100.0)
    W, K = 1024, 4
    windows = rec.rows(0, (rec.n_samples // W) * W)[:, 0].reshape(-1, W).astype(np.float64)
    ae = train_autoencoder(np.concatenate([windows, windows[::-1]]), K, hidden=8, work=2e7, seed=1)
    coders = tuple(ci.coder for ci in build_index(read_recording(_smooth_npy(tmp_path / "b.npy", seed=5),
                                                                 rate=100.0), segment=64))
    given = GivenModel(("ch0", "ch1"), W, ae, coders)
    tsarchive.pack(src, tmp_path / "a.tsarchive", "1%", rate=100.0, code_size=K, segment=64, model=given)
    arc = open_archive(tmp_path / "a.tsarchive")
    stored, want = arc.decoder.to_arrays(), ae.int_decoder.to_arrays()
    assert stored.keys() == want.keys() and all(np.array_equal(stored[k], want[k]) for k in want)
    for name, coder in zip(("ch0", "ch1"), coders):
        back = member.read(arc, name).coder
        assert back.kind == "linear" and np.array_equal(back.basis, coder.basis) and back.step == coder.step
    assert tsarchive.verify(arc, against=src).ok        # every sample within budget, checked against the source


def test_a_given_model_for_other_channels_is_not_used(tmp_path):
    src = _smooth_npy(tmp_path / "a.npy")
    rec = read_recording(src, rate=100.0)
    opts = PackOptions.parse("1%")
    given = GivenModel(("x", "y"), 1024)
    assert not given.fits([c.name for c in rec.channels], opts)
    assert GivenModel(("ch0", "ch1"), 1024).fits(["ch0", "ch1"], opts)
    assert not GivenModel(("ch0", "ch1"), 1024).fits(["ch0", "ch1"], PackOptions.parse("1%", window=2048))


@pytest.mark.parametrize("bad", ["--jobs", "--shared-model"])
def test_batch_options_need_into(tmp_path, capsys, bad):
    src = write_logger(tmp_path / "log.csv")
    code, got = _pack(capsys, "pack", src, "-o", tmp_path / "x.tsarchive", bad, *(["2"] if bad == "--jobs" else []))
    assert code == 2 and "add --into FOLDER" in got.err


def test_the_manifest_says_the_model_was_the_batch_s(tmp_path, capsys):
    make_lab(tmp_path / "lab", 2)
    assert _pack(capsys, "pack", tmp_path / "lab", "--into", tmp_path / "out", "--shared-model")[0] == 0
    for arc in sorted((tmp_path / "out").rglob("*.tsarchive")):
        assert open_archive(arc).manifest["model_note"] == "no autoencoder: the batch's shared model has none"
