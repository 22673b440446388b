"""Figures: self-contained SVG text, PNG output, every panel drawn from the results."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from benchfit.capture.capture import Capture
from benchfit.errors import BenchfitError
from benchfit.fit.result import DerivedValue, FitCurves, FitParameter, FitQuality, FitResult
from benchfit.measurement.result import ChannelMeasurement, Harmonic
from benchfit.report.figures import fit_svg, save_figure, spectrum_svg, waveform_svg


def _self_contained(svg: str) -> None:
    assert svg.lstrip().startswith("<?xml") and svg.rstrip().endswith("</svg>")
    # only internal references (#id); no external files, fonts or scripts
    refs = re.findall(r'(?:xlink:)?href="([^"]*)"', svg)
    assert all(r.startswith("#") for r in refs)
    # namespaces (xmlns="http://…") are names, not fetches; nothing else may point outside
    assert "<script" not in svg and "@font-face" not in svg and "@import" not in svg
    assert "<image" not in svg and "url(http" not in svg


def _capture() -> Capture:
    fs = 48000.0
    t = np.arange(4800) / fs
    return Capture(np.vstack([np.sign(np.sin(2 * math.pi * 50 * t)), np.sin(2 * math.pi * 50 * t)]),
                   fs, ("drive", "output"), ("V", "V"))


def test_waveform_svg_with_model_overlay():
    cap = _capture()
    svg = waveform_svg(cap, channel="output", model=cap.samples[1] * 0.98, periods=3)
    _self_contained(svg)
    assert svg.count("<path") > 5
    # same input, same bytes (no time stamp, fixed hash salt)
    assert svg == waveform_svg(cap, channel="output", model=cap.samples[1] * 0.98, periods=3)


def test_spectrum_svg_uses_the_harmonics():
    hs = tuple(Harmonic(k, 50.0 * k, 1.0 / k, 0.0, 1e-4) for k in (1, 3, 5, 7))
    cm = ChannelMeasurement("output", "V", 50.0, 1e-4, 1.0, 0.0, 0.7, 2.0, None, None, None,
                            12.3, 12.4, 18.1, harmonics=hs)
    svg = spectrum_svg(cm)
    _self_contained(svg)
    empty = spectrum_svg(ChannelMeasurement("x", "FS", None, None, None, 0, 0, 0, None, None, None,
                                            None, None, None))
    _self_contained(empty)
    assert svg != empty


def _result(method: str, with_h: bool) -> FitResult:
    t = np.arange(200) / 2000.0
    data = np.sin(2 * math.pi * 20 * t)
    f = np.array([50.0, 150.0, 250.0])
    h = 1 / (1 + 1j * f / 100)
    curves = FitCurves(time_s=t, data=data, model=data * 0.99, harmonic_hz=f if with_h else np.zeros(0),
                       h_measured=h if with_h else np.zeros(0, complex),
                       h_model=h * 1.01 if with_h else np.zeros(0, complex),
                       h_measured_u=np.abs(h) * 0.01 if with_h else np.zeros(0),
                       residual=data * 0.01)
    return FitResult("x.csv", "lc-lowpass", method, {"L": FitParameter(0.3, None, True, "H")},
                     {"q_factor": DerivedValue(4.0, 0.1)}, {}, FitQuality(0.01, 0.999, 400),
                     curves=curves)


@pytest.mark.parametrize("method,with_h", [("two-channel", True), ("one-channel", True),
                                           ("ringdown", False)])
def test_fit_svg_and_png(tmp_path, method, with_h):
    svg = fit_svg(_result(method, with_h))
    _self_contained(svg)
    out = save_figure(svg, tmp_path / "f.png")
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    save_figure(svg, tmp_path / "f.svg")
    assert (tmp_path / "f.svg").read_text(encoding="utf-8") == svg


def test_save_figure_rejects_other_types_and_plain_text_png(tmp_path):
    with pytest.raises(BenchfitError, match=r"\.svg or \.png"):
        save_figure(fit_svg(_result("two-channel", True)), tmp_path / "f.pdf")
    with pytest.raises(BenchfitError, match="as .svg"):
        save_figure("<svg></svg>", tmp_path / "f.png")


def test_fit_svg_of_a_result_read_back_from_json():
    # FitResult.from_dict keeps no curves and may carry null quality figures
    d = {"file": "x.csv", "model": "lc-lowpass", "method": "two-channel", "parameters": {},
         "derived": {}, "correlations": {}, "quality": {"nrmse": None, "r_squared": None, "n_points": 0},
         "warnings": []}
    _self_contained(fit_svg(FitResult.from_dict(d)))


def test_user_text_with_dollar_signs_is_plain_text():
    """A channel named like TeX ('$x^$', unbalanced, unknown command) used to crash the figure in
    matplotlib's mathtext parser; every text of a figure is plain text now."""
    name = r"out $x^$ $\nosuch$"
    t = np.arange(4800) / 48000
    cap = Capture(np.sin(2 * np.pi * 50 * t), 48000, channel_names=(name,), source="$HC-07$.wav")
    svg = waveform_svg(cap)
    texts = [tx for tx in svg.figure.findobj(lambda o: hasattr(o, "get_text")) if "$" in tx.get_text()]
    assert texts and not any(tx.get_parse_math() for tx in texts)
    assert name in {tx.get_text().split(" (")[0] for tx in texts}


def test_log_axis_decades_keep_their_mathtext():
    """Plain text for user strings must not turn the log axis' 10^n tick labels into raw
    '$\\mathdefault{10^{0}}$' strings (matplotlib writes decades with mathtext)."""
    ch = ChannelMeasurement(name="$out$", unit="FS", frequency_hz=50.0, frequency_u_hz=1e-4, amplitude=0.5,
                            vdc=0.0, vrms=0.35, vpp=1.0, duty_cycle_pct=None, rise_time_s=None,
                            fall_time_s=None, thd_pct=1.0, thd_n_pct=1.1, sinad_db=39.0,
                            harmonics=(Harmonic(1, 50.0, 0.5, 0.0), Harmonic(2, 100.0, 0.005, 0.0),
                                       Harmonic(3, 150.0, 0.0001, 0.0)))
    fig = spectrum_svg(ch).figure
    (ax,) = fig.axes
    decades = [t for t in ax.yaxis.get_ticklabels() if "10^" in t.get_text()]
    assert decades and all(t.get_parse_math() for t in decades)
    assert not ax.title.get_parse_math() and not ax.yaxis.label.get_parse_math()
