"""Tests of the command line: ``harmtrack track``, ``harmtrack demo`` and their error reports.

Most runs go through ``harmtrack.cli.main([...])`` in-process (the tracker's
compiled kernels are then shared); one test runs ``python -m harmtrack`` and the
``harmtrack`` console script as real processes.
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

import harmtrack
from harmtrack import cli
from harmtrack import io as hio

SR = 16000


def _tone(sr=SR, dur=1.0, f0=(120.0, 170.0), n_harm=10, amp=0.5, pad_s=0.2):
    """Gliding harmonic tone with silent padding at both ends."""
    n = int(round(dur * sr))
    f = np.geomspace(f0[0], f0[1], n)
    phase = 2 * np.pi * np.cumsum(f) / sr
    top = max(1, min(n_harm, int(0.45 * sr / f0[1])))
    y = sum(amp / k * np.sin(k * phase) for k in range(1, top + 1)) / 2.0
    pad = np.zeros(int(pad_s * sr))
    return np.concatenate([pad, y, pad])


def run(argv, capsys):
    """Run the CLI in-process; return (exit code, stdout, stderr)."""
    code = cli.main([os.fspath(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def audio(tmp_path_factory):
    """Input files shared by the tests of this module."""
    d = tmp_path_factory.mktemp("cli_audio")
    files = {}

    def put(name, y, sr=SR, **kw):
        files[name] = d / name
        sf.write(files[name], y, sr, **kw)

    put("tone.wav", _tone(), subtype="PCM_16")
    put("tone8k.wav", _tone(sr=8000), 8000, subtype="PCM_16")
    put("tone44k.wav", _tone(sr=44100, dur=0.6), 44100, subtype="PCM_16")
    put("tone96k.wav", _tone(sr=96000, dur=0.5), 96000, subtype="PCM_24")
    put("silence.wav", np.zeros(SR), subtype="PCM_16")
    put("stereo.wav", np.stack([_tone(), 0.5 * _tone()], axis=1), subtype="PCM_16")
    put("clipped.wav", np.clip(4.0 * _tone(), -1.0, 1.0), subtype="PCM_16")
    put("short.wav", _tone(dur=0.01, pad_s=0.0), subtype="PCM_16")
    put("empty.wav", np.zeros(0), subtype="PCM_16")
    nan = _tone(dur=0.5).astype(np.float32)
    nan[1000] = np.nan
    put("nan.wav", nan, subtype="FLOAT")
    whole = files["tone.wav"].read_bytes()
    files["truncated.wav"] = d / "truncated.wav"
    files["truncated.wav"].write_bytes(whole[: len(whole) // 2])
    files["notes.txt"] = d / "notes.txt"
    files["notes.txt"].write_text("these are notes, not audio\n" * 20)
    return files


# ---------------------------------------------------------------------------
# successful runs
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def api_track(audio):
    """What the API gives for the options the CLI tests pass."""
    return harmtrack.track_file(audio["tone.wav"], preset="voice", max_harmonics=12,
                                smoothing=0.5)


@pytest.mark.parametrize("fmt", ["csv", "npz", "json"])
def test_track_writes_labels_equal_to_the_api_result(tmp_path, capsys, audio, api_track, fmt):
    out = tmp_path / f"labels.{fmt}"
    code, stdout, stderr = run(["track", audio["tone.wav"], "-o", out, "--max-harmonics", "12",
                                "--smoothing", "0.5"], capsys)
    assert code == 0, stderr
    assert stderr == ""
    cols, prov = hio.read_labels(out)
    tr = api_track
    np.testing.assert_allclose(cols["time_s"], tr.times, atol=5e-7, rtol=0)
    np.testing.assert_allclose(cols["f0_hz"], tr.f0_hz, atol=5e-5, rtol=0)
    np.testing.assert_array_equal(cols["voiced"], tr.voiced)
    np.testing.assert_allclose(cols["voicing_prob"], tr.voicing_prob, atol=5e-5, rtol=0)
    np.testing.assert_array_equal(cols["model_order"], tr.model_order)
    np.testing.assert_allclose(cols["hnr_db"], tr.hnr_db, atol=5e-3, rtol=0)
    np.testing.assert_allclose(cols["harmonic_amplitudes"], tr.harmonic_amplitudes, rtol=5e-6)
    assert cols["harmonic_amplitudes"].shape[1] == 12
    assert prov["input"]["sha256"] == hashlib.sha256(audio["tone.wav"].read_bytes()).hexdigest()
    assert prov["input"]["path"] == os.fspath(audio["tone.wav"])
    assert prov["settings"]["smoothing"] == 0.5 and prov["settings"]["preset"] == "voice"
    assert prov["version"] == harmtrack.__version__
    assert str(out) in stdout and f"({fmt})" in stdout


@pytest.mark.parametrize("fmt", ["csv", "npz", "json"])
def test_two_runs_give_byte_identical_files(tmp_path, capsys, audio, fmt):
    a, b = tmp_path / f"a.{fmt}", tmp_path / f"b.{fmt}"
    assert run(["track", audio["tone.wav"], "-o", a, "-q"], capsys)[0] == 0
    assert run(["track", audio["tone.wav"], "-o", b, "-q"], capsys)[0] == 0
    assert a.read_bytes() == b.read_bytes()


def test_summary_and_quiet(tmp_path, capsys, audio):
    out = tmp_path / "x.csv"
    code, stdout, _ = run(["track", audio["tone.wav"], "-o", out], capsys)
    assert code == 0
    lines = stdout.splitlines()
    keys = [ln.split()[0] for ln in lines]
    assert keys == ["file", "duration", "analysis", "frames", "f0", "took", "output"]
    assert str(audio["tone.wav"]) in lines[0]
    assert "1.400 s at 16000 Hz" in lines[1]
    assert "16000 Hz, 50 ms frames" in lines[2]  # analysed at its own rate
    assert "% voiced" in lines[3] and "median" in lines[4] and "Hz" in lines[4]
    code, stdout, stderr = run(["track", audio["tone.wav"], "-o", out, "-q"], capsys)
    assert (code, stdout, stderr) == (0, "", "")


def test_format_option_overrides_the_extension(tmp_path, capsys, audio):
    out = tmp_path / "labels.dat"
    code, _, err = run(["track", audio["tone.wav"], "-o", out, "--format", "json", "-q"], capsys)
    assert code == 0, err
    assert out.read_text().startswith("{")


def test_options_reach_the_tracker(tmp_path, capsys, audio):
    out = tmp_path / "x.json"
    code, _, err = run(["track", audio["tone.wav"], "-o", out, "-q", "--preset", "singing",
                        "--fmin", "90", "--fmax", "400", "--hop", "0.005", "--frame", "0.04",
                        "--no-prewhiten"], capsys)
    assert code == 0, err
    cols, prov = hio.read_labels(out)
    s = prov["settings"]
    assert (s["preset"], s["fmin_hz"], s["fmax_hz"], s["hop_s"], s["frame_s"], s["prewhiten"]) \
        == ("singing", 90.0, 400.0, 0.005, 0.04, False)
    assert np.allclose(np.diff(cols["time_s"]), 0.005)


def test_silence_is_all_unvoiced(tmp_path, capsys, audio):
    out = tmp_path / "x.csv"
    code, stdout, stderr = run(["track", audio["silence.wav"], "-o", out], capsys)
    assert code == 0, stderr
    cols, _ = hio.read_labels(out)
    assert cols["time_s"].size > 50
    assert not cols["voiced"].any() and np.all(np.isnan(cols["f0_hz"]))
    assert "no voiced frames" in stdout


def test_stereo_file_warns_about_channels(tmp_path, capsys, audio):
    out = tmp_path / "x.csv"
    code, _, stderr = run(["track", audio["stereo.wav"], "-o", out, "-q"], capsys)
    assert code == 0
    lines = stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("harmtrack: warning: ")
    assert "channels" in lines[0]
    _, prov = hio.read_labels(out)
    assert prov["input"]["channels"] == 2


def test_clipped_file_warns(tmp_path, capsys, audio):
    code, _, stderr = run(["track", audio["clipped.wav"], "-o", tmp_path / "x.csv", "-q"], capsys)
    assert code == 0
    lines = stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("harmtrack: warning: ")
    assert "clipped" in lines[0]


@pytest.mark.parametrize("name, sr", [("tone8k.wav", 8000), ("tone44k.wav", 44100),
                                      ("tone96k.wav", 96000)])
def test_sample_rates_keep_times_in_file_seconds(tmp_path, capsys, audio, name, sr):
    out = tmp_path / "x.csv"
    code, _, stderr = run(["track", audio[name], "-o", out, "-q"], capsys)
    assert code == 0, stderr
    assert all(ln.startswith("harmtrack: warning: ") for ln in stderr.splitlines())
    cols, prov = hio.read_labels(out)
    info = sf.info(audio[name])
    duration = info.frames / info.samplerate
    assert prov["input"]["sr"] == sr and prov["sr"] == sr
    assert cols["time_s"][0] == 0.0
    assert cols["time_s"][-1] <= duration
    assert cols["time_s"][-1] >= duration - 0.02
    assert cols["voiced"].mean() > 0.4
    f0 = cols["f0_hz"][cols["voiced"]]
    assert 110 < np.median(f0) < 180


# ---------------------------------------------------------------------------
# bad input: exit 2, one stderr line naming the file, output untouched
# ---------------------------------------------------------------------------

# (case, input file key or None for a missing file, extra arguments, output name, names input?)
BAD_CASES = [
    ("missing file", None, [], "out.csv", True),
    ("text file", "notes.txt", [], "out.csv", True),
    ("truncated wav", "truncated.wav", [], "out.csv", True),
    ("empty wav", "empty.wav", [], "out.csv", True),
    ("shorter than a frame", "short.wav", [], "out.csv", True),
    ("nan samples", "nan.wav", [], "out.csv", True),
    ("fmin >= fmax", "tone.wav", ["--fmin", "300", "--fmax", "200"], "out.csv", True),
    ("fmin == fmax", "tone.wav", ["--fmin", "200", "--fmax", "200"], "out.csv", True),
    ("fmax above the band", "tone8k.wav", ["--fmax", "5000"], "out.csv", True),
    ("unknown preset", "tone.wav", ["--preset", "opera"], "out.csv", True),
    ("unknown format", "tone.wav", ["--format", "xml"], "out.csv", False),
    ("unknown output extension", "tone.wav", [], "out.txt", False),
]


def _check_one_error_line(stderr: str, named: Path):
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith("harmtrack: error: "), stderr
    assert str(named) in lines[0], stderr
    assert "Traceback" not in stderr


@pytest.mark.parametrize("existing", [False, True], ids=["no-output", "existing-output"])
@pytest.mark.parametrize("case, key, extra, out_name, names_input", BAD_CASES,
                         ids=[c[0] for c in BAD_CASES])
def test_bad_input_exits_2_with_one_line(tmp_path, capsys, audio, case, key, extra, out_name,
                                         names_input, existing):
    src = audio[key] if key else tmp_path / "does_not_exist.wav"
    out = tmp_path / out_name
    if existing:
        out.write_bytes(b"earlier result\n")
    code, stdout, stderr = run(["track", src, "-o", out, *extra], capsys)
    assert code == 2
    assert stdout == ""
    _check_one_error_line(stderr, src if names_input else out)
    if existing:
        assert out.read_bytes() == b"earlier result\n"
    else:
        assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ([out_name] if existing else [])


def test_output_in_a_missing_folder(tmp_path, capsys, audio):
    out = tmp_path / "missing" / "out.csv"
    code, stdout, stderr = run(["track", audio["tone.wav"], "-o", out], capsys)
    assert code == 2 and stdout == ""
    _check_one_error_line(stderr, out)
    assert not (tmp_path / "missing").exists()


def test_output_in_an_unwritable_folder(tmp_path, capsys, audio):
    folder = tmp_path / "locked"
    folder.mkdir()
    (folder / "out.csv").write_bytes(b"earlier result\n")
    folder.chmod(0o555)
    try:
        if os.access(folder, os.W_OK):
            pytest.skip("this user can write to read-only folders (root)")
        code, stdout, stderr = run(["track", audio["tone.wav"], "-o", folder / "out.csv"], capsys)
        assert code == 2 and stdout == ""
        _check_one_error_line(stderr, folder / "out.csv")
        assert (folder / "out.csv").read_bytes() == b"earlier result\n"
        assert [p.name for p in folder.iterdir()] == ["out.csv"]
    finally:
        folder.chmod(0o755)


def test_output_in_a_folder_that_refuses_writing(tmp_path, capsys, audio, monkeypatch):
    # the same case for users whom permission bits do not stop (root): the
    # folder reports itself unwritable
    folder = tmp_path / "locked"
    folder.mkdir()
    (folder / "out.csv").write_bytes(b"earlier result\n")
    real_access = os.access
    monkeypatch.setattr(os, "access", lambda p, mode: False if os.fspath(p) == os.fspath(folder)
                        else real_access(p, mode))
    code, stdout, stderr = run(["track", audio["tone.wav"], "-o", folder / "out.csv"], capsys)
    assert code == 2 and stdout == ""
    _check_one_error_line(stderr, folder / "out.csv")
    assert "not writable" in stderr
    assert (folder / "out.csv").read_bytes() == b"earlier result\n"
    assert [p.name for p in folder.iterdir()] == ["out.csv"]


def test_output_over_the_input_is_refused(tmp_path, capsys, audio):
    src = tmp_path / "in.csv"
    src.write_bytes(audio["tone.wav"].read_bytes())
    code, _, stderr = run(["track", src, "-o", src], capsys)
    assert code == 2
    _check_one_error_line(stderr, src)
    assert src.read_bytes() == audio["tone.wav"].read_bytes()


@pytest.mark.parametrize("argv", [
    ["track", "x.wav"],  # -o missing
    ["track", "x.wav", "-o", "y.csv", "--fmin", "low"],
    ["track", "x.wav", "-o", "y.csv", "--bogus"],
    ["dance"],
    [],
])
def test_usage_errors_exit_2(capsys, argv):
    code, stdout, stderr = run(argv, capsys)
    assert code == 2
    assert stdout == ""
    assert "usage: harmtrack" in stderr and "error:" in stderr


def test_help_and_version(capsys):
    code, stdout, _ = run(["--version"], capsys)
    assert code == 0 and stdout.strip() == f"harmtrack {harmtrack.__version__}"
    code, stdout, _ = run(["--help"], capsys)
    assert code == 0 and "track" in stdout and "demo" in stdout
    code, stdout, _ = run(["track", "--help"], capsys)
    assert code == 0
    for opt in ("--preset", "--fmin", "--fmax", "--hop", "--frame", "--max-harmonics",
                "--smoothing", "--no-prewhiten", "--format", "-q"):
        assert opt in stdout


def test_unexpected_failure_is_an_internal_error(tmp_path, capsys, audio, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("kernel exploded\nsecond line")

    monkeypatch.setattr(harmtrack.api, "track_file", broken)
    out = tmp_path / "x.csv"
    code, _, stderr = run(["track", audio["tone.wav"], "-o", out], capsys)
    assert code == 1
    assert stderr.splitlines() == [
        "harmtrack: internal error: RuntimeError: kernel exploded "
        "(rerun with --debug for the traceback)"
    ]
    assert not out.exists()
    code, _, stderr = run(["track", audio["tone.wav"], "-o", out, "--debug"], capsys)
    assert code == 1
    assert "Traceback" in stderr and "kernel exploded" in stderr
    assert stderr.splitlines()[-1].startswith("harmtrack: internal error: RuntimeError")


def test_debug_shows_the_traceback_of_an_input_error(tmp_path, capsys):
    src = tmp_path / "none.wav"
    code, _, stderr = run(["--debug", "track", src, "-o", tmp_path / "x.csv"], capsys)
    assert code == 2
    assert "Traceback" in stderr
    assert stderr.splitlines()[-1] == f"harmtrack: error: {src}: no such file"


# ---------------------------------------------------------------------------
# demo
# ---------------------------------------------------------------------------


def test_demo_regenerates_the_recording_when_not_bundled(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(cli, "_bundled_demo_dir", lambda: tmp_path / "not_installed")
    outdir = tmp_path / "demo_out"
    code, stdout, stderr = run(["demo", "-o", outdir], capsys)
    assert code == 0, stderr
    assert (outdir / "demo_voice.wav").is_file()
    cols, prov = hio.read_labels(outdir / "demo_voice.csv")
    assert prov["input"]["path"] == os.fspath(outdir / "demo_voice.wav")
    assert "regenerated" in stdout
    for label in ("raw pitch accuracy", "gross pitch error", "voicing decision error"):
        assert label in stdout
    # the regenerated recording is the bundled one, when that exists
    bundled = Path(harmtrack.__file__).resolve().parents[1] / "audio_demo" / "demo_voice.wav"
    if bundled.is_file():
        assert prov["input"]["sha256"] == hashlib.sha256(bundled.read_bytes()).hexdigest()


# ---------------------------------------------------------------------------
# real processes
# ---------------------------------------------------------------------------


def _env():
    env = dict(os.environ)
    env.pop("PYTHONWARNINGS", None)
    return env


def test_python_dash_m_and_console_script(tmp_path, audio):
    out = tmp_path / "x.npz"
    proc = subprocess.run([sys.executable, "-m", "harmtrack", "track", os.fspath(audio["tone.wav"]),
                           "-o", os.fspath(out)], capture_output=True, text=True, env=_env(),
                          timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    assert "output" in proc.stdout and out.is_file()
    bad = tmp_path / "nope.wav"
    proc = subprocess.run([sys.executable, "-m", "harmtrack", "track", os.fspath(bad), "-o",
                           os.fspath(tmp_path / "y.csv")], capture_output=True, text=True,
                          env=_env(), timeout=300)
    assert proc.returncode == 2
    assert proc.stderr.splitlines() == [f"harmtrack: error: {bad}: no such file"]


def test_demo_command(tmp_path):
    script = Path(sys.executable).parent / "harmtrack"
    if not script.is_file():
        pytest.skip("the harmtrack console script is not installed next to this Python")
    proc = subprocess.run([os.fspath(script), "demo", "-o", os.fspath(tmp_path / "demo")],
                          capture_output=True, text=True, env=_env(), timeout=300, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "demo" / "demo_voice.csv").is_file()
    for label in ("raw pitch accuracy", "gross pitch error", "voicing decision error"):
        assert label in proc.stdout
    rpa = float(proc.stdout.split("raw pitch accuracy")[1].split("%")[0])
    assert 0.0 <= rpa <= 100.0
