"""Long files: read in blocks, tracked by the stream, CSV labels written as produced."""

from __future__ import annotations

import numpy as np
import pytest

import harmtrack
from harmtrack import cli, file_stream, synth
from harmtrack.io import read_labels, write_labels

SR = 16000


@pytest.fixture(scope="module")
def long_wav(tmp_path_factory):
    path = tmp_path_factory.mktemp("long") / "talk.wav"
    synth.write_wav(path, synth.speakers_recording(20.0, seed=4, snr_db=20.0), SR)
    return path


@pytest.fixture
def small_threshold(monkeypatch):
    # anything above 1 MB of samples (30 s here is 2.6 MB) counts as long
    monkeypatch.setattr(file_stream, "BLOCKS_ABOVE_BYTES", 1e6)


def _agree(a, b):
    cents = np.abs(1200.0 * np.log2(a.f0_hz / b.f0_hz))
    return (~a.voiced & ~b.voiced) | (a.voiced & b.voiced & (cents <= 10.0))


def test_long_file_is_read_in_blocks_and_matches_the_whole_file(long_wav, monkeypatch):
    whole = harmtrack.track_file(long_wav)
    assert "read_in_blocks" not in whole.settings
    monkeypatch.setattr(file_stream, "BLOCKS_ABOVE_BYTES", 1e6)
    blocks = harmtrack.track_file(long_wav)
    assert blocks.settings["read_in_blocks"] == {"block_s": 1.0, "lag_s": 1.0}
    assert blocks.settings["input"]["sha256"] == whole.settings["input"]["sha256"]
    assert len(blocks) == len(whole)
    np.testing.assert_array_equal(blocks.times, whole.times)
    assert np.mean(_agree(blocks, whole)) >= 0.99


def test_cli_writes_long_csv_as_produced_with_the_usual_bytes(long_wav, tmp_path, small_threshold,
                                                              capsys):
    out = tmp_path / "talk.csv"
    assert cli.main(["track", str(long_wav), "-o", str(out)]) == 0
    assert "frames" in capsys.readouterr().out
    # the same frames and provenance through the whole-table writer give the same bytes
    ref = tmp_path / "ref.csv"
    write_labels(harmtrack.track_file(long_wav), ref)
    assert out.read_bytes() == ref.read_bytes()
    cols, prov = read_labels(out)
    assert prov["settings"]["read_in_blocks"]["lag_s"] == 1.0
    assert cols["time_s"].size == 2000


@pytest.mark.parametrize("fmt", ["npz", "json"])
def test_cli_spools_long_npz_and_json_with_the_usual_bytes(long_wav, tmp_path, small_threshold,
                                                           fmt):
    out = tmp_path / f"talk.{fmt}"
    assert cli.main(["track", str(long_wav), "-o", str(out), "-q"]) == 0
    ref = tmp_path / f"ref.{fmt}"
    write_labels(harmtrack.track_file(long_wav), ref)
    assert out.read_bytes() == ref.read_bytes()
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([out.name, ref.name])


def test_truncated_long_file_leaves_no_output(long_wav, tmp_path, small_threshold, capsys):
    data = long_wav.read_bytes()
    bad = tmp_path / "cut.wav"
    bad.write_bytes(data[: len(data) // 2])
    out = tmp_path / "cut.csv"
    assert cli.main(["track", str(bad), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "truncated" in err and str(bad) in err and len(err.strip().splitlines()) == 1
    assert not out.exists()
    assert not any(p.name.endswith(".tmp") for p in tmp_path.iterdir())
