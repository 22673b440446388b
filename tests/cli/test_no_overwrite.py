"""Nothing the user has is replaced: files that appear after a check, foreign folders, read-only logs."""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

FS = 48000


@pytest.fixture(autouse=True)
def _isolated(tmp_path, monkeypatch):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "default_log.sqlite"))
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "config"))


@pytest.fixture
def two_channel(tmp_path):
    t = np.arange(FS // 2) / FS
    square = np.where((t * 50) % 1 < 0.5, 0.8, -0.8)
    sine = 0.5 * np.sin(2 * np.pi * 50 * t)
    path = tmp_path / "HC-03_two.wav"
    sf.write(path, np.stack([square, sine], axis=1), FS, subtype="PCM_24")
    return path


def test_fit_plot_keeps_a_file_made_while_the_fit_ran(run, two_channel, tmp_path, monkeypatch):
    """The up-front 'file exists' check passes; the file appears while the figure is drawn; the write
    (hard link of a finished temporary file, POSIX link(2) fails with EEXIST) keeps it."""
    import benchfit.report.figures as figures

    fig = tmp_path / "hc03_fit.svg"
    real = figures.fit_svg

    def racing_fit_svg(result):
        fig.write_text("<svg>another program's figure</svg>\n", encoding="utf-8")
        return real(result)

    monkeypatch.setattr(figures, "fit_svg", racing_fit_svg)
    r = run("fit", str(two_channel), "--plot", str(fig), "--json")
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.strip() == (f"error: {fig}: file exists (it appeared while the figure was drawn) — choose "
                                "another --plot or add --overwrite")
    assert fig.read_text(encoding="utf-8") == "<svg>another program's figure</svg>\n"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []  # no temporary left


def test_save_figure_png_exclusive_and_overwrite(tmp_path):
    from benchfit.capture.capture import Capture
    from benchfit.errors import BenchfitError
    from benchfit.report.figures import save_figure, waveform_svg

    svg = waveform_svg(Capture(np.sin(np.arange(4800) / 20), FS))
    png = tmp_path / "wave.png"
    png.write_bytes(b"keep")
    with pytest.raises(BenchfitError, match="file exists"):
        save_figure(svg, png, overwrite=False)
    assert png.read_bytes() == b"keep"
    save_figure(svg, png)  # the library default replaces, as before
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG spec, ISO/IEC 15948 5.2)


def test_demo_refuses_a_folder_holding_other_files(run, tmp_path):
    out = tmp_path / "projects"
    out.mkdir()
    (out / "notes.txt").write_text("my notes\n", encoding="utf-8")
    r = run("demo", "--out", str(out))
    assert r.returncode == 2
    assert r.stderr.strip() == (f"error: {out}: the folder holds files the demo did not make — give --out a "
                                "new or empty folder")
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
