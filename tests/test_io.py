"""Tests of harmtrack.io: label files, their provenance and atomic writes."""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import os
import zipfile

import numpy as np
import pytest
import soundfile as sf

import harmtrack
from harmtrack import io as hio
from harmtrack.errors import HarmtrackError
from harmtrack.io import labels as labels_mod
from harmtrack.result import Track

FORMATS = ("csv", "npz", "json")
SR = 16000


def _harmonic_signal(sr=SR, dur=1.0, f0=(120.0, 180.0), n_harm=10, amp=0.5, pad_s=0.2):
    """A gliding harmonic tone with silent padding at both ends (unvoiced frames)."""
    n = int(round(dur * sr))
    f = np.geomspace(f0[0], f0[1], n)
    phase = 2 * np.pi * np.cumsum(f) / sr
    y = sum(amp / k * np.sin(k * phase) for k in range(1, n_harm + 1)) / 2.0
    pad = np.zeros(int(pad_s * sr))
    return np.concatenate([pad, y, pad])


def _toy_track(settings=None) -> Track:
    """A small hand-made track with every kind of value (NaN, 0, integers)."""
    amps = np.array([
        [np.nan, np.nan, np.nan],
        [0.123456789, 0.0, 1.5e-7],
        [0.25, 0.0625, np.nan],
        [np.nan, np.nan, np.nan],
    ])
    return Track(
        times=np.array([0.0, 0.01, 0.02, 0.03]),
        f0_hz=np.array([np.nan, 151.123456, 149.5, np.nan]),
        voiced=np.array([False, True, True, False]),
        voicing_prob=np.array([0.01, 0.98765, 0.9, 0.2]),
        harmonic_amplitudes=amps,
        model_order=np.array([0, 3, 2, 0]),
        hnr_db=np.array([np.nan, 23.456, 18.0, np.nan]),
        sr=16000.0,
        frame_s=0.05,
        settings=dict(settings or {"preset": "voice", "hop_s": 0.01, "band_hz": None}),
    )


@pytest.fixture(scope="module")
def wav_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("io_audio") / "tone.wav"
    sf.write(path, _harmonic_signal(), SR, subtype="PCM_16")
    return path


@pytest.fixture(scope="module")
def file_track(wav_path):
    return harmtrack.track_file(wav_path, preset="voice", max_harmonics=12)


@pytest.fixture(scope="module")
def array_track():
    return harmtrack.track(_harmonic_signal(dur=0.6), SR, preset="voice", max_harmonics=8)


def _assert_matches_track(cols, tr: Track):
    """Columns read back equal the track within the precision of the CSV formats."""
    np.testing.assert_allclose(cols["time_s"], tr.times, atol=5e-7, rtol=0)
    np.testing.assert_allclose(cols["f0_hz"], tr.f0_hz, atol=5e-5, rtol=0)
    np.testing.assert_array_equal(cols["voiced"], tr.voiced)
    assert cols["voiced"].dtype == bool
    np.testing.assert_allclose(cols["voicing_prob"], tr.voicing_prob, atol=5e-5, rtol=0)
    np.testing.assert_array_equal(cols["model_order"], tr.model_order)
    assert cols["model_order"].dtype == np.int64
    np.testing.assert_allclose(cols["hnr_db"], tr.hnr_db, atol=5e-3, rtol=0)
    np.testing.assert_allclose(cols["harmonic_amplitudes"], tr.harmonic_amplitudes,
                               rtol=5e-6, atol=1e-300)
    for k in range(1, tr.harmonic_amplitudes.shape[1] + 1):
        np.testing.assert_array_equal(cols[f"amp_h{k}"], cols["harmonic_amplitudes"][:, k - 1])


# ---------------------------------------------------------------------------
# round trips
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", FORMATS)
def test_round_trip_of_a_file_track(tmp_path, file_track, wav_path, fmt):
    out = tmp_path / f"labels.{fmt}"
    assert hio.write_labels(file_track, out) == out
    cols, prov = hio.read_labels(out)
    _assert_matches_track(cols, file_track)
    assert prov["tool"] == "harmtrack"
    assert prov["version"] == harmtrack.__version__
    assert prov["input"]["sha256"] == hashlib.sha256(wav_path.read_bytes()).hexdigest()
    assert prov["input"]["path"] == os.fspath(wav_path)
    assert prov["input"]["sr"] == SR and prov["input"]["channels"] == 1
    assert prov["sr"] == file_track.sr and prov["frame_s"] == file_track.frame_s
    assert prov["settings"]["max_harmonics"] == 12
    assert "input" not in prov["settings"]


@pytest.mark.parametrize("fmt", FORMATS)
def test_round_trip_of_an_array_track(tmp_path, array_track, fmt):
    out = tmp_path / f"labels.{fmt}"
    hio.write_labels(array_track, out)
    cols, prov = hio.read_labels(out)
    _assert_matches_track(cols, array_track)
    assert prov["input"] == {"path": None}


@pytest.mark.parametrize("fmt", FORMATS)
def test_round_trip_of_hand_made_values(tmp_path, fmt):
    tr = _toy_track()
    out = tmp_path / f"toy.{fmt}"
    hio.write_labels(tr, out)
    cols, _ = hio.read_labels(out)
    _assert_matches_track(cols, tr)
    amps = cols["harmonic_amplitudes"]
    assert amps[1, 1] == 0.0 and np.isnan(amps[2, 2])  # absent stays 0, missing stays NaN
    if fmt != "csv":  # binary and JSON keep full precision
        np.testing.assert_array_equal(amps, tr.harmonic_amplitudes)
        np.testing.assert_array_equal(cols["f0_hz"], tr.f0_hz)


@pytest.mark.parametrize("fmt", FORMATS)
def test_two_writes_are_byte_identical(tmp_path, file_track, fmt):
    a, b = tmp_path / f"a.{fmt}", tmp_path / f"b.{fmt}"
    hio.write_labels(file_track, a)
    hio.write_labels(file_track, b)
    assert a.read_bytes() == b.read_bytes()
    # the same track written again to the same path: same bytes
    before = a.read_bytes()
    hio.write_labels(file_track, a)
    assert a.read_bytes() == before


def test_tracking_twice_gives_identical_files(tmp_path, wav_path):
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    hio.write_labels(harmtrack.track_file(wav_path), a)
    hio.write_labels(harmtrack.track_file(wav_path), b)
    assert a.read_bytes() == b.read_bytes()


def test_fmt_override_and_default_csv(tmp_path):
    tr = _toy_track()
    p = hio.write_labels(tr, tmp_path / "labels.dat", fmt="json")
    assert json.loads(p.read_text())["frames"]["model_order"] == [0, 3, 2, 0]
    cols, _ = hio.read_labels(p)  # unknown extension: the content decides
    _assert_matches_track(cols, tr)
    p = hio.write_labels(tr, tmp_path / "noext")
    assert p.read_text().startswith("# harmtrack ")
    p = hio.write_labels(tr, tmp_path / "upper.NPZ")
    assert zipfile.is_zipfile(p)


def test_provenance_override(tmp_path):
    p = hio.write_labels(_toy_track(), tmp_path / "x.csv", provenance={"note": "take 2"})
    _, prov = hio.read_labels(p)
    assert prov["note"] == "take 2" and prov["tool"] == "harmtrack"


# ---------------------------------------------------------------------------
# layout of each format
# ---------------------------------------------------------------------------


def test_csv_layout(tmp_path):
    p = hio.write_labels(_toy_track(), tmp_path / "x.csv")
    lines = p.read_text(encoding="ascii").split("\n")
    assert lines[0] == f"# harmtrack {harmtrack.__version__} f0 and harmonic-amplitude labels"
    assert lines[1].startswith("# provenance: {")
    record = lines[1][len("# provenance: "):]
    assert record == json.dumps(json.loads(record), sort_keys=True, separators=(",", ":"))
    assert lines[2].startswith("# units: time_s s; f0_hz Hz")
    assert lines[3] == ("time_s,f0_hz,voiced,voicing_prob,model_order,hnr_db,"
                        "amp_h1,amp_h2,amp_h3")
    assert lines[4] == "0.000000,nan,0,0.0100,0,nan,nan,nan,nan"
    assert lines[5] == "0.010000,151.1235,1,0.9877,3,23.46,0.123457,0,1.5e-07"
    assert lines[-1] == "" and len(lines) == 9
    assert "\r" not in p.read_text()


def test_npz_layout_is_plain_numpy_and_dated_fixed(tmp_path):
    tr = _toy_track()
    p = hio.write_labels(tr, tmp_path / "x.npz")
    with np.load(p, allow_pickle=False) as z:
        assert set(z.files) == {"time_s", "f0_hz", "voiced", "voicing_prob", "model_order",
                                "hnr_db", "harmonic_amplitudes", "provenance"}
        np.testing.assert_array_equal(z["harmonic_amplitudes"], tr.harmonic_amplitudes)
        assert json.loads(str(z["provenance"]))["tool"] == "harmtrack"
        np.testing.assert_array_equal(z["voiced"], [0, 1, 1, 0])
    with zipfile.ZipFile(p) as zf:
        assert {info.date_time for info in zf.infolist()} == {(1980, 1, 1, 0, 0, 0)}


@pytest.mark.parametrize("case", ["toy", "voice", "engine", "column-major"])
def test_npz_built_in_memory_equals_the_zipfile_writer(case):
    # The ZIP layout is PKWARE's APPNOTE.TXT; Python's zipfile module is the
    # reference writer: the in-memory archive of a label table must be its bytes.
    from harmtrack import engine_synth
    from harmtrack.io import npz_format
    from harmtrack.io.columns import track_table

    if case == "toy":
        tr = _toy_track()
    elif case == "column-major":  # a matrix stored column by column reads back the same
        tr = harmtrack.track(_harmonic_signal(dur=3.0), SR)
        tr = dataclasses.replace(tr, harmonic_amplitudes=np.asfortranarray(tr.harmonic_amplitudes))
    elif case == "voice":
        tr = harmtrack.track(_harmonic_signal(dur=3.0), SR)
    else:
        t, rpm = engine_synth.rpm_profile(3.0, kind="steady", rpm=1800.0, seed=1)
        tr = harmtrack.track(engine_synth.engine(t, rpm, SR, cylinders=4, seed=1), SR,
                             preset="engine", cylinders=4)
    table = track_table(tr, validate=False)
    prov = hio.make_provenance(tr, extra={"note": "caf\u00e9 \u2013 archive"})
    fast = npz_format.encode(table, prov)
    buf = io.BytesIO()
    npz_format.write(buf, table, prov)
    assert fast == buf.getvalue()
    with zipfile.ZipFile(io.BytesIO(fast)) as zf:
        assert zf.testzip() is None  # every member's CRC checks out
    with np.load(io.BytesIO(fast), allow_pickle=False) as z:
        np.testing.assert_array_equal(z["harmonic_amplitudes"], table["harmonic_amplitudes"])


def test_json_layout_has_units_and_null_for_nan(tmp_path):
    p = hio.write_labels(_toy_track(), tmp_path / "x.json")
    text = p.read_text()
    assert "NaN" not in text
    doc = json.loads(text)
    assert set(doc) == {"provenance", "columns", "frames"}
    assert doc["columns"]["f0_hz"] == "Hz" and doc["columns"]["time_s"] == "s"
    assert list(doc["columns"]) == list(doc["frames"])
    assert doc["frames"]["f0_hz"][0] is None and doc["frames"]["amp_h3"][2] is None
    assert doc["frames"]["voiced"] == [0, 1, 1, 0]


def test_columns_table_in_the_docs_matches_the_code():
    assert hio.columns_markdown() in labels_mod.__doc__
    names = [row[0] for row in hio.COLUMNS]
    assert names[:6] == ["time_s", "f0_hz", "voiced", "voicing_prob", "model_order", "hnr_db"]
    assert hio.column_names(2) == names[:6] + ["amp_h1", "amp_h2"]


def test_non_json_settings_are_made_plain(tmp_path):
    tr = _toy_track({"hop_s": np.float64(0.01), "n": np.int64(3), "bad": float("nan"),
                     "pair": (1, 2), "input": {"path": "x.wav", "sr": np.float32(8000)}})
    p = hio.write_labels(tr, tmp_path / "x.json")
    prov = json.loads(p.read_text())["provenance"]
    assert prov["settings"] == {"hop_s": 0.01, "n": 3, "bad": None, "pair": [1, 2]}
    assert prov["input"] == {"path": "x.wav", "sr": 8000.0}


# ---------------------------------------------------------------------------
# destination problems and atomicity
# ---------------------------------------------------------------------------


def test_missing_folder_raises_naming_the_path(tmp_path):
    out = tmp_path / "no" / "such" / "x.csv"
    with pytest.raises(HarmtrackError) as err:
        hio.write_labels(_toy_track(), out)
    msg = str(err.value)
    assert str(out) in msg and "does not exist" in msg and "\n" not in msg
    assert not (tmp_path / "no").exists()


def test_unwritable_folder_raises(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        if os.access(folder, os.W_OK):
            pytest.skip("this user can write to read-only folders (root)")
        with pytest.raises(HarmtrackError) as err:
            hio.write_labels(_toy_track(), folder / "x.csv")
        assert str(folder / "x.csv") in str(err.value)
        assert list(folder.iterdir()) == []
    finally:
        folder.chmod(0o755)


def test_unwritable_folder_message_without_permission_bits(tmp_path, monkeypatch):
    # root ignores permission bits, so pretend the folder refuses writing
    real_access = os.access
    monkeypatch.setattr(os, "access", lambda p, mode: False if os.fspath(p) == os.fspath(tmp_path)
                        else real_access(p, mode))
    with pytest.raises(HarmtrackError, match="is not writable") as err:
        hio.write_labels(_toy_track(), tmp_path / "x.csv")
    assert str(tmp_path / "x.csv") in str(err.value)
    assert list(tmp_path.iterdir()) == []


def test_permission_error_while_creating_the_temp_file(tmp_path, monkeypatch):
    import tempfile

    def denied(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(tempfile, "mkstemp", denied)
    with pytest.raises(HarmtrackError, match="Permission denied") as err:
        hio.write_labels(_toy_track(), tmp_path / "x.csv")
    assert str(tmp_path / "x.csv") in str(err.value)


def test_unknown_extension_raises(tmp_path):
    with pytest.raises(HarmtrackError, match=r"x\.txt.*unknown label file extension"):
        hio.write_labels(_toy_track(), tmp_path / "x.txt")
    with pytest.raises(HarmtrackError, match="unknown label format"):
        hio.write_labels(_toy_track(), tmp_path / "x.csv", fmt="xml")
    assert list(tmp_path.iterdir()) == []


def test_destination_that_is_a_folder_raises(tmp_path):
    (tmp_path / "d.csv").mkdir()
    with pytest.raises(HarmtrackError, match="is a folder"):
        hio.write_labels(_toy_track(), tmp_path / "d.csv")


@pytest.mark.parametrize("stage", ["replace", "fsync"])
def test_failed_write_leaves_existing_file_and_no_temp(tmp_path, monkeypatch, stage):
    out = tmp_path / "x.csv"
    out.write_bytes(b"precious")

    def boom(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, stage, boom)
    with pytest.raises(HarmtrackError, match="No space left"):
        hio.write_labels(_toy_track(), out)
    monkeypatch.undo()
    assert out.read_bytes() == b"precious"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.csv"]


def test_interrupted_write_leaves_existing_file(tmp_path, monkeypatch):
    out = tmp_path / "x.json"
    out.write_bytes(b"precious")

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(os, "replace", interrupt)
    with pytest.raises(KeyboardInterrupt):
        hio.write_labels(_toy_track(), out)
    monkeypatch.undo()
    assert out.read_bytes() == b"precious"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.json"]


def test_replaced_file_keeps_its_permissions(tmp_path):
    out = tmp_path / "x.csv"
    out.write_text("old")
    out.chmod(0o640)
    hio.write_labels(_toy_track(), out)
    assert out.stat().st_mode & 0o777 == 0o640
    new = hio.write_labels(_toy_track(), tmp_path / "new.csv")
    assert new.stat().st_mode & 0o777 == 0o644


# ---------------------------------------------------------------------------
# malformed files
# ---------------------------------------------------------------------------


def _good_csv_lines(tmp_path):
    p = hio.write_labels(_toy_track(), tmp_path / "good.csv")
    return p.read_text().splitlines()


def _write_lines(tmp_path, lines, name="bad.csv"):
    p = tmp_path / name
    p.write_text("\n".join(lines) + "\n")
    return p


def _drop_column(lines, col):
    out = []
    for ln in lines:
        if ln.startswith("#"):
            out.append(ln)
            continue
        cells = ln.split(",")
        del cells[col]
        out.append(",".join(cells))
    return out


@pytest.mark.parametrize("mutate, message", [
    (lambda ls: _drop_column(ls, 1), "missing column.*f0_hz"),
    (lambda ls: ls[:3] + [ls[3] + ",extra"] + [r + ",1" for r in ls[4:]],
     "unexpected column 'extra'"),
    (lambda ls: ls[:3] + [ls[3].replace("amp_h2", "amp_h5")] + ls[4:], "without gaps"),
    (lambda ls: ls[:5] + [ls[5] + ",0.5"] + ls[6:], "ragged row"),
    (lambda ls: ls[:5] + [ls[5].rsplit(",", 1)[0]] + ls[6:], "ragged row"),
    (lambda ls: ls[:4] + [ls[5], ls[4]] + ls[6:], "times are not increasing"),
    (lambda ls: ls[:5] + [ls[5].replace("151.1235", "abc")] + ls[6:], "'abc' in column f0_hz"),
    (lambda ls: ls[:5] + [ls[5].replace(",1,", ",2,", 1)] + ls[6:],
     "voiced must hold only 0 and 1"),
    (lambda ls: ls[:3], "no header row"),
    (lambda ls: ls[:1] + ["# provenance: {not json"] + ls[2:], "provenance is not valid JSON"),
    (lambda ls: ls[:3] + [ls[3].replace("voiced", "f0_hz")] + ls[4:], "duplicate column"),
])
def test_malformed_csv_raises_one_line(tmp_path, mutate, message):
    p = _write_lines(tmp_path, mutate(_good_csv_lines(tmp_path)))
    with pytest.raises(HarmtrackError, match=message) as err:
        hio.read_labels(p)
    assert str(p) in str(err.value) and "\n" not in str(err.value)


def test_malformed_npz_raises(tmp_path):
    good = hio.write_labels(_toy_track(), tmp_path / "good.npz").read_bytes()
    cut = tmp_path / "cut.npz"
    cut.write_bytes(good[: len(good) // 2])
    with pytest.raises(HarmtrackError, match="cut.npz"):
        hio.read_labels(cut)
    text = tmp_path / "text.npz"
    text.write_text("hello")
    with pytest.raises(HarmtrackError, match="not an NPZ label file"):
        hio.read_labels(text)
    noprov = tmp_path / "noprov.npz"
    np.savez(noprov, time_s=np.zeros(1))
    with pytest.raises(HarmtrackError, match="without a provenance"):
        hio.read_labels(noprov)
    short = tmp_path / "short.npz"
    arrays = {k: np.zeros(3) for k in ("time_s", "f0_hz", "voiced", "voicing_prob",
                                        "model_order", "hnr_db")}
    arrays["time_s"] = np.arange(2.0)
    np.savez(short, provenance=np.array("{}"), **arrays)
    with pytest.raises(HarmtrackError, match="rows"):
        hio.read_labels(short)


@pytest.mark.parametrize("text, message", [
    ("{not json", "not a JSON label file"),
    ("[1, 2]", "top level is not an object"),
    ('{"provenance": {}}', 'without a "frames" object'),
    ('{"frames": {}}', 'without a "provenance" object'),
    ('{"provenance": {}, "frames": {"time_s": 1}}', "frames.time_s is not a list"),
    ('{"provenance": {}, "frames": {"time_s": [0, 1]}}', "missing column"),
])
def test_malformed_json_raises(tmp_path, text, message):
    p = tmp_path / "bad.json"
    p.write_text(text)
    with pytest.raises(HarmtrackError, match=message):
        hio.read_labels(p)


def test_json_with_ragged_columns_raises(tmp_path):
    p = hio.write_labels(_toy_track(), tmp_path / "x.json")
    doc = json.loads(p.read_text())
    doc["frames"]["hnr_db"].append(1.0)
    p.write_text(json.dumps(doc))
    with pytest.raises(HarmtrackError, match="column hnr_db has 5 rows"):
        hio.read_labels(p)


def test_missing_label_file_raises(tmp_path):
    with pytest.raises(HarmtrackError, match="no such file"):
        hio.read_labels(tmp_path / "none.csv")


# ---------------------------------------------------------------------------
# reference f0 files
# ---------------------------------------------------------------------------


def test_read_reference_of_the_demo_truth_and_of_labels(tmp_path):
    from pathlib import Path

    truth = Path(harmtrack.__file__).resolve().parents[1] / "audio_demo" / "demo_voice_truth.csv"
    if truth.is_file():
        t, f = hio.read_reference(truth)
        assert t.size == f.size and t[0] == 0.0 and np.all(np.diff(t) > 0)
        assert np.isnan(f[0]) and np.nanmax(f) < 1000
    p = hio.write_labels(_toy_track(), tmp_path / "x.csv")
    t, f = hio.read_reference(p)
    np.testing.assert_allclose(t, [0.0, 0.01, 0.02, 0.03])
    np.testing.assert_allclose(f, [np.nan, 151.1235, 149.5, np.nan])
    plain = tmp_path / "plain.txt"
    plain.write_text("0.0 100\n0.01 0\n0.02 110.5\n")
    t, f = hio.read_reference(plain)
    np.testing.assert_allclose(f, [100.0, 0.0, 110.5])
    bad = tmp_path / "bad.txt"
    bad.write_text("0.0 100\n0.0 100\n")
    with pytest.raises(HarmtrackError, match="strictly increasing"):
        hio.read_reference(bad)
