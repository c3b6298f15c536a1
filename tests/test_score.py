"""`harmtrack score`: label files against reference f0 files, per file and pooled."""

from __future__ import annotations

import json

import numpy as np
import pytest

import harmtrack
from harmtrack import cli, scoring, synth
from harmtrack.io import write_labels

HOP = 0.01


def _write_plain(path, times, f0):
    path.write_text("".join(f"{t:.3f} {f:.4f}\n" for t, f in zip(times, np.nan_to_num(f0))))
    return path


def _pair(seed, n=300):
    rng = np.random.default_rng(seed)
    times = np.arange(n) * HOP
    ref = 100.0 * 2.0 ** rng.uniform(0, 2, n)
    ref[rng.random(n) < 0.3] = 0.0
    est = np.where(ref > 0, ref, 150.0) * 2.0 ** (rng.normal(0, 40, n) / 1200.0)
    est[rng.random(n) < 0.05] *= 2.0
    est[rng.random(n) < 0.2] = 0.0
    return times, ref, est


def _mir_eval(times, ref, est):
    # Source: mir_eval.melody, the standard melody-extraction evaluation.
    mel = pytest.importorskip("mir_eval.melody")
    rv, rc, ev, ec = mel.to_cent_voicing(times, ref, times, est)
    return {"raw_pitch_accuracy": mel.raw_pitch_accuracy(rv, rc, ev, ec),
            "raw_chroma_accuracy": mel.raw_chroma_accuracy(rv, rc, ev, ec),
            "voicing_recall": mel.voicing_recall(rv, ev),
            "voicing_false_alarm": mel.voicing_false_alarm(rv, ev)}


def test_folders_scored_per_file_and_pooled_like_mir_eval(tmp_path, capsys):
    est_dir, ref_dir = tmp_path / "est", tmp_path / "ref"
    (est_dir / "sub").mkdir(parents=True)
    (ref_dir / "sub").mkdir(parents=True)
    all_t, all_r, all_e = [], [], []
    for i, name in enumerate(["a", "sub/b", "c"]):
        t, r, e = _pair(i)
        _write_plain(ref_dir / f"{name}.f0.txt", t, r)
        _write_plain(est_dir / f"{name}.txt", t, e)
        all_t.append(t + 1000.0 * i)
        all_r.append(r)
        all_e.append(e)
    _write_plain(est_dir / "extra.txt", *_pair(9)[:2])  # no reference: reported, not scored
    out_csv, out_json = tmp_path / "s.csv", tmp_path / "s.json"
    assert cli.main(["score", str(est_dir), str(ref_dir), "--csv", str(out_csv),
                     "--json", str(out_json)]) == 0
    captured = capsys.readouterr()
    assert "pooled" in captured.out and "extra" in captured.err
    doc = json.loads(out_json.read_text())
    assert [f["file"] for f in doc["files"]] == ["a", "c", "sub/b"]
    pooled_ref = _mir_eval(np.concatenate(all_t), np.concatenate(all_r), np.concatenate(all_e))
    for key, want in pooled_ref.items():
        assert doc["pooled"][key] == pytest.approx(want, abs=1e-9)
    # each file on its own, against mir_eval
    t, r, e = _pair(0)
    for key, want in _mir_eval(t, r, e).items():
        assert doc["files"][0][key] == pytest.approx(want, abs=1e-9)
    lines = out_csv.read_text().splitlines()
    assert lines[0].startswith("file,frames,raw_pitch_accuracy") and len(lines) == 5


def test_gross_fine_and_voicing_errors_on_a_hand_worked_case(tmp_path):
    # 6 frames: ref voiced on 4; est: one octave error (gross), one +10 cents, one exact,
    # one unvoiced miss; one false alarm on an unvoiced ref frame.
    # GPE = 1/3 of the 3 frames voiced in both; fine = (10 + 0) / 2 = 5 cents;
    # VDE = 2/6 (the miss and the false alarm).
    t = np.arange(6) * HOP
    ref = np.array([100.0, 200.0, 300.0, 400.0, 0.0, 0.0])
    est = np.array([200.0, 200.0 * 2 ** (10 / 1200), 300.0, 0.0, 150.0, 0.0])
    rows = scoring.score_pairs([("x", _write_plain(tmp_path / "e.txt", t, est),
                                 _write_plain(tmp_path / "r.txt", t, ref))])
    s = rows[0].scores
    assert s["gross_pitch_error"] == pytest.approx(1 / 3)
    assert s["fine_pitch_error_cents"] == pytest.approx(5.0, abs=0.01)  # 4-decimal file values
    assert s["voicing_decision_error"] == pytest.approx(2 / 6)
    assert s["voicing_recall"] == pytest.approx(3 / 4)
    assert s["voicing_false_alarm"] == pytest.approx(1 / 2)


def test_our_label_files_are_read_in_every_format(tmp_path):
    y, sr, times, f0 = synth.demo_voice()
    tr = harmtrack.track(y, sr)
    ref = _write_plain(tmp_path / "truth.txt", times, np.nan_to_num(f0))
    scores = []
    for ext in ("csv", "npz", "json"):
        lab = write_labels(tr, tmp_path / f"demo.{ext}")
        scores.append(scoring.score_pairs([("demo", lab, ref)])[0].scores)
    assert scores[0]["raw_pitch_accuracy"] > 0.9
    for s in scores[1:]:
        for k in scoring.SCORE_COLUMNS:
            # CSV holds f0 to 4 decimals: the fine error may move by a thousandth of a cent
            tol = 1e-3 if k == "fine_pitch_error_cents" else 1e-9
            assert s[k] == pytest.approx(scores[0][k], abs=tol, nan_ok=True)


@pytest.mark.parametrize("content, message", [
    ("time,pitch\n0.0,100\n", "no f0 column"),
    ("0.00 100\n0.02 110\n0.01 120\n", "strictly increasing"),
    ("0.00 100\n0.01 110 5\n", "fields"),
    ("0.00 100\n0.01 abc\n", "not numbers"),
])
def test_bad_reference_files_give_one_line(tmp_path, capsys, content, message):
    ref = tmp_path / "ref.txt"
    ref.write_text(content)
    est = _write_plain(tmp_path / "est.txt", np.arange(3) * HOP, np.full(3, 100.0))
    assert cli.main(["score", str(est), str(ref)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and str(ref) in err[0]


def test_mismatched_label_columns_and_unmatched_folders(tmp_path, capsys):
    bad = tmp_path / "bad.npz"
    np.savez(bad, time_s=np.arange(3) * HOP, f0_hz=np.ones(4))
    ref = _write_plain(tmp_path / "ref.txt", np.arange(3) * HOP, np.full(3, 100.0))
    assert cli.main(["score", str(bad), str(ref)]) == 2
    assert str(bad) in capsys.readouterr().err
    (tmp_path / "e").mkdir()
    (tmp_path / "r").mkdir()
    _write_plain(tmp_path / "e" / "one.txt", np.arange(3) * HOP, np.full(3, 100.0))
    _write_plain(tmp_path / "r" / "two.txt", np.arange(3) * HOP, np.full(3, 100.0))
    assert cli.main(["score", str(tmp_path / "e"), str(tmp_path / "r")]) == 2
    assert "no file name in common" in capsys.readouterr().err
    assert cli.main(["score", str(ref), str(tmp_path / "r")]) == 2
    assert "two files or two folders" in capsys.readouterr().err
