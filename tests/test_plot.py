"""Figures: the track over the spectrogram, in PNG, SVG and PDF, with the overlay where f0 is."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("matplotlib")

import harmtrack  # noqa: E402
from harmtrack import cli, plotting, synth  # noqa: E402
from harmtrack import engine_synth as es  # noqa: E402

SR = 16000


@pytest.fixture(scope="module")
def tone():
    y = synth.harmonic_tone(2.0, SR, f0_hz=200.0, amplitudes=[0.3, 0.2, 0.1, 0.05], seed=0)
    return y, harmtrack.track(y, SR)


def _hex_rgb(h):
    return np.array([int(h[i:i + 2], 16) / 255.0 for i in (1, 3, 5)])


def test_overlay_lies_where_the_known_f0_is(tmp_path, tone):
    y, tr = tone
    fig = plotting.plot_track(y, SR, tr, max_freq_hz=1000.0, harmonics=1, figsize=(8.0, 5.0))
    dpi = 100
    fig.set_dpi(dpi)
    out = plotting.save_figure(fig, tmp_path / "tone.png", dpi=dpi)
    import matplotlib.image as mpimg

    img = mpimg.imread(out)[..., :3]
    assert img.shape[:2] == (500, 800)  # figsize x dpi
    ax = fig.axes[0]
    want = _hex_rgb(plotting.STYLE["f0"])
    for t in (0.5, 1.0, 1.5):
        for f, expect in ((200.0, True), (260.0, False)):
            x, yd = ax.transData.transform((t, f))
            row, col = int(round(img.shape[0] - yd)), int(round(x))
            patch = img[row - 1:row + 2, col - 1:col + 2].reshape(-1, 3)
            hit = np.any(np.all(np.abs(patch - want) < 0.12, axis=1))
            assert hit == expect, (t, f)


@pytest.mark.parametrize("ext, magic", [("png", b"\x89PNG"), ("svg", b"<?xml"), ("pdf", b"%PDF")])
def test_formats_by_extension(tmp_path, tone, ext, magic):
    y, tr = tone
    out = plotting.save_figure(plotting.plot_track(y, SR, tr, freq_scale="log"),
                               tmp_path / f"f.{ext}")
    data = out.read_bytes()
    assert data.startswith(magic) and len(data) > 5000
    if ext == "svg":
        assert b"<svg" in data[:2000]


def test_engine_figure_has_speed_and_order_panels(tmp_path):
    t, r = es.rpm_profile(3.0, kind="steady", rpm=1200.0, hop_s=0.01, seed=0)
    y = es.engine(t, r, SR, cylinders=4, strokes=4, seed=0, weak_cylinder=0, weak_db=-np.inf,
                  highpass_hz=150.0, noise_snr_db=10.0, noise_color="white")
    tr = harmtrack.track(y, SR, preset="engine", cylinders=4, rpm_min=800, rpm_max=4000)
    fig = plotting.plot_track(y, SR, tr)
    labels = [a.get_ylabel() for a in fig.axes]
    assert "speed (rpm)" in labels and "engine order" in labels
    speed = fig.axes[labels.index("speed (rpm)")]
    line = speed.get_lines()[0].get_ydata()
    assert np.nanmedian(line) == pytest.approx(1200.0, rel=0.01)
    assert any(p.get_label() == "uneven firing" for p in speed.patches)  # the dead cylinder
    plotting.save_figure(fig, tmp_path / "engine.png")


def test_cli_plots_from_audio_and_from_labels(tmp_path, capsys):
    wav = synth.write_wav(tmp_path / "v.wav", *synth.demo_voice()[:2])
    assert cli.main(["plot", str(wav), "-o", str(tmp_path / "a.png"), "--size", "6x4",
                     "--dpi", "50"]) == 0
    import matplotlib.image as mpimg

    assert mpimg.imread(tmp_path / "a.png").shape[:2] == (200, 300)
    assert cli.main(["track", str(wav), "-o", str(tmp_path / "v.csv"), "-q"]) == 0
    assert cli.main(["plot", str(wav), "--labels", str(tmp_path / "v.csv"), "-o",
                     str(tmp_path / "b.pdf")]) == 0
    assert (tmp_path / "b.pdf").read_bytes().startswith(b"%PDF")


@pytest.mark.parametrize("labels, message", [
    ("time,pitch\n0.0,100\n", "f0_hz"),                                   # wrong columns
    ("time_s,f0_hz,voiced,voicing_prob,model_order,hnr_db\n"
     "0.02,100,1,1,3,10\n0.01,100,1,1,3,10\n", "increasing"),            # times not increasing
    ("time_s,f0_hz,voiced,voicing_prob,model_order,hnr_db\n"
     "0.00,100,1,1,3,10\n0.01,100,1,1\n", "fields"),                     # ragged row
])
def test_bad_labels_give_one_line_and_no_figure(tmp_path, capsys, labels, message):
    wav = synth.write_wav(tmp_path / "v.wav", *synth.demo_voice()[:2])
    lab = tmp_path / "bad.csv"
    lab.write_text(labels)
    out = tmp_path / "f.png"
    assert cli.main(["plot", str(wav), "--labels", str(lab), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(lab) in err[0] and message in err[0], err
    assert not out.exists()


def test_bad_figure_options(tmp_path, tone, capsys):
    y, tr = tone
    with pytest.raises(harmtrack.HarmtrackError, match="unknown figure format"):
        plotting.save_figure(plotting.plot_track(y, SR, tr), tmp_path / "f.jpg")
    with pytest.raises(harmtrack.HarmtrackError, match="do not belong together"):
        plotting.plot_track(y[:SR // 4], SR, tr)
    wav = synth.write_wav(tmp_path / "t.wav", y, SR)
    assert cli.main(["plot", str(wav), "-o", str(tmp_path / "x.png"), "--size", "big"]) == 2
    assert "--size" in capsys.readouterr().err


def test_batch_overview_shows_files_and_failures(tmp_path, capsys):
    src = tmp_path / "in"
    src.mkdir()
    for i, f0 in enumerate((110.0, 220.0)):
        synth.write_wav(src / f"r{i}.wav", synth.harmonic_tone(
            0.6, SR, f0_hz=f0, amplitudes=[0.3, 0.1], seed=i), SR)
    (src / "broken.wav").write_bytes(b"not audio at all")
    out = tmp_path / "out"
    assert cli.main(["batch", str(src), "-o", str(out), "-q", "--workers", "1"]) == 2
    fig = plotting.plot_batch_overview(out / "summary.csv")
    medians = fig.axes[0].get_lines()[0].get_ydata()
    assert sorted(np.round(medians)) == [110.0, 220.0]
    text = " ".join(t.get_text() for t in fig.axes[2].texts)
    assert "1 failed" in text and "broken.wav" in text
    assert cli.main(["plot", str(out), "-o", str(tmp_path / "overview.png")]) == 0
    assert (tmp_path / "overview.png").read_bytes().startswith(b"\x89PNG")
    assert cli.main(["plot", str(src), "-o", str(tmp_path / "x.png")]) == 2
    assert "summary.csv" in capsys.readouterr().err
