"""Report files survive hostile user text: very long serials."""

from __future__ import annotations

import pytest

from benchfit.report.html import report_stem, write_report


def test_a_240_character_serial_gives_a_file_name_the_file_system_takes(tmp_path):
    """Most file systems allow 255 bytes per name (POSIX NAME_MAX on ext4, XFS, APFS — from memory);
    a 240-character serial plus the time stamp used to fail with "File name too long"."""
    serial = "HC-" + "7" * 237
    other = "HC-" + "7" * 236 + "8"
    stem = report_stem(serial, "2026-12-01T21:00:00Z")
    assert len(stem.encode()) + len(".html") <= 255
    assert stem != report_stem(other, "2026-12-01T21:00:00Z")  # cut serials stay apart
    report = {"unit": serial, "created_utc": "2026-12-01T21:00:00Z"}
    html_path, json_path = write_report(report, "<html></html>", tmp_path)
    assert html_path.exists() and json_path.exists()
    assert serial in json_path.read_text(encoding="utf-8")  # the report keeps the whole serial
    assert report_stem("HC-07", "2026-12-01T21:00:00Z") == "HC-07_20261201T210000Z"  # short ones unchanged


def test_safety_box_speaks_of_this_unit_not_of_a_fixed_one():
    """The choke caution used to say "150 mH inductors" for every unit; it now names the fitted L when
    there is one, stays general when there is none, and names the supply only from the spec."""
    from report_builders import make_capture, make_fit, make_measurement

    from benchfit.report.assemble import build_report
    from benchfit.report.spec import parse_spec

    limits = [{"quantity": "frequency_hz", "nominal": 50.0, "tolerance": 0.25}]
    plain = parse_spec({"limit": limits})
    with_supply = parse_spec({"conditions": {"supply_v": 9.0}, "limit": limits})
    left = [(make_capture(), make_measurement())]
    no_fit = build_report(unit="HC-05", spec=plain, as_left=left)["safety"]
    assert not any("150 mH" in s or "mH" in s for s in no_fit)
    assert any("through an inductor produces" in s for s in no_fit)
    assert any("at the stated voltage" in s for s in no_fit)
    fitted = build_report(unit="HC-07", spec=with_supply, as_left=left, fits_left=[make_fit()])["safety"]
    assert any("through the inductor (fitted L = 300 mH)" in s for s in fitted)  # make_fit's L = 0.3 H
    assert any("at the stated 9 V" in s for s in fitted)


def test_report_channel_maps_the_spec_channel_onto_a_capture_channel(tmp_path):
    """A stereo capture with channels ch1/ch2 and a spec that takes frequency from "output": without a
    mapping it is a setup error (exit 2, not a failed unit); --channel output=2 judges channel 2."""
    import json

    import numpy as np
    import soundfile as sf

    from benchfit.cli import main

    fs = 48000
    t = np.arange(fs // 2) / fs
    wav = tmp_path / "HC-03.wav"
    sf.write(wav, np.stack([np.where((t * 50) % 1 < 0.5, 0.8, -0.8), 0.5 * np.sin(2 * np.pi * 49.0 * t)], axis=1),
             fs, subtype="PCM_24")
    spec = tmp_path / "spec.toml"
    spec.write_text('[[limit]]\nquantity = "frequency_hz"\nnominal = 49.0\ntolerance = 0.25\n', encoding="utf-8")
    args = ["report", str(wav), "--spec", str(spec), "--unit", "HC-03", "--no-log", "--out", str(tmp_path / "r"),
            "--no-figures", "--json"]
    for extra, code in (([], 2), (["--channel", "output=2"], 0)):
        try:
            main(args + extra)
        except SystemExit as e:
            assert (e.code or 0) == code
    (twin,) = (tmp_path / "r").glob("*.json")
    rep = json.loads(twin.read_text(encoding="utf-8"))
    (row,) = rep["results"]
    assert row["channel"] == "output" and row["as_left"]["value"] == pytest.approx(49.0, abs=1e-3)


def test_report_labels_read_as_a_technician_writes_them():
    """Human names in the parts table, NRMSE once (in %), conditions by quantity, limits exactly as
    the spec gives them, paths that wrap between their parts."""
    import re

    from report_builders import make_capture, make_fit, make_measurement

    from benchfit.report.assemble import build_report
    from benchfit.report.html import render_html
    from benchfit.report.spec import parse_spec

    spec = parse_spec({"conditions": {"load_ohm": 10000, "supply_v": 12.0},
                       "limit": [{"quantity": "thd_pct", "max": 2.00001},
                                 {"quantity": "frequency_hz", "nominal": 50.0, "tolerance": 0.25}]})
    rep = build_report(unit="HC-07", spec=spec, as_left=[(make_capture(source="/bench/runs/hc07_left.wav"),
                                                          make_measurement())], fits_left=[make_fit()])
    page = render_html(rep, [])
    text = re.sub(r"<[^>]+>", "", page)
    for raw in ("resonant frequency hz", "q factor", "decay rate per s", "load ohm", "supply v"):
        assert not re.search(rf"\b{raw}\b", text), raw  # the raw keys, case as the template writes them
    assert "Q factor" in text and "resonant frequency f₀" in text and "decay rate α" in text
    assert "load resistance" in text and "supply voltage" in text
    assert "≤ 2.00001%" in text  # not "≤ 2%": the limit the unit was judged against
    assert "NRMSE 1%" in text and "NRMSE 0.01" not in text  # make_fit's NRMSE is 0.01 = 1 %
    assert "/<wbr>bench/<wbr>runs/<wbr>hc07_<wbr>left.<wbr>wav" in page


def test_fit_figure_axes_carry_units_and_phases_are_wrapped():
    from dataclasses import replace

    import numpy as np
    from report_builders import make_fit

    from benchfit.report.figures import fit_svg

    f = make_fit()
    k = np.arange(1, 8)
    h = np.exp(-1j * 1.4 * k)  # phase runs to −9.8 rad: unwrapped it would reach −561°
    f = replace(f, curves=replace(f.curves, harmonic_hz=50.0 * k, h_measured=h, h_model=h * 1.01,
                                  h_measured_u=np.full(k.size, 0.01), residual=np.zeros(2 * k.size)))
    fig = fit_svg(f, unit="V").figure
    labels = [ax.get_ylabel() for ax in fig.axes]
    assert "output (V)" in labels and "|H| (V/V)" in labels and "residual (V/V)" in labels
    phase_ax = [ax for ax in fig.axes if ax.get_ylabel() == "phase (°)"][0]
    ys = np.concatenate([ln.get_ydata() for ln in phase_ax.get_lines()])
    assert ys.min() >= -180 and ys.max() <= 180


def test_report_keeps_an_index_of_its_folder(tmp_path):
    """Every report run rewrites out/index.html from the JSON twins there, newest first; another
    program's JSON in the folder is not listed and not touched."""
    import re

    import numpy as np
    import soundfile as sf

    from benchfit.cli import main

    fs = 48000
    t = np.arange(fs // 4) / fs
    spec = tmp_path / "spec.toml"
    spec.write_text('[[limit]]\nquantity = "frequency_hz"\nnominal = 50.0\ntolerance = 0.25\n', encoding="utf-8")
    out = tmp_path / "reports"
    out.mkdir()
    (out / "notes.json").write_text('{"mine": true}\n', encoding="utf-8")
    for serial, f in (("HC-01", 50.0), ("HC-02", 53.0)):
        wav = tmp_path / f"{serial}.wav"
        sf.write(wav, 0.5 * np.sin(2 * np.pi * f * t), fs, subtype="PCM_24")
        try:
            main(["report", str(wav), "--spec", str(spec), "--unit", serial, "--no-log", "--no-figures",
                  "--out", str(out)])
        except SystemExit:
            pass
    page = (out / "index.html").read_text(encoding="utf-8")
    units = re.findall(r'<a href="(HC-0\d_[0-9TZ]+\.html)">(HC-0\d)</a></td><td class="([a-z-]+)"', page)
    assert [(u, v) for _, u, v in units] == [("HC-02", "fail"), ("HC-01", "pass")]  # newest first
    assert all((out / name).is_file() for name, _, _ in units)
    assert "notes" not in page and (out / "notes.json").read_text(encoding="utf-8") == '{"mine": true}\n'


def test_print_header_escapes_the_serial_for_css():
    """The serial goes into a CSS string of the print header: quotes, '<' and '\\' are CSS escapes
    (CSS Syntax Level 3, 4.3.7 "consume an escaped code point"), so it ends neither string nor <style>."""
    from report_builders import make_capture, make_measurement

    from benchfit.report.assemble import build_report
    from benchfit.report.html import css_string, render_html
    from benchfit.report.spec import parse_spec

    serial = 'HC-07"}</style><script>alert(1)</script>\\'
    assert str(css_string(serial)) == r"HC-07\22 \7D \3C \2F style\3E \3C script\3E alert(1)\3C \2F script\3E \5C "
    spec = parse_spec({"limit": [{"quantity": "frequency_hz", "nominal": 50.0, "tolerance": 0.25}]})
    page = render_html(build_report(unit=serial, spec=spec, as_left=[(make_capture(), make_measurement())]), [])
    assert page.count("</style>") == 1 and "<script" not in page


def test_as_found_to_as_left_change_column():
    """With as-found captures the results table shows the change, as-left minus as-found, with the two
    expanded uncertainties combined in quadrature (independent measurements, JCGM 100:2008 5.1.2)."""
    import math
    import re

    from report_builders import make_capture, make_measurement

    from benchfit.report.assemble import build_report
    from benchfit.report.html import format_change, render_html
    from benchfit.report.spec import parse_spec

    spec = parse_spec({"limit": [{"quantity": "frequency_hz", "nominal": 50.0, "tolerance": 0.25}]})
    left = [(make_capture(), make_measurement(f=50.02, f_u=0.004))]
    found = [(make_capture(source="hc07_found.wav"), make_measurement(file="hc07_found.wav", f=50.61, f_u=0.003))]
    rep = build_report(unit="HC-07", spec=spec, as_left=left, as_found=found)
    (row,) = rep["results"]
    u = math.hypot(row["as_found"]["expanded_u"], row["as_left"]["expanded_u"])  # 2·√(0.003² + 0.004²) = 0.01
    assert u == pytest.approx(0.010, rel=1e-9)
    assert format_change(row) == "−590 mHz (U 10 mHz)"
    text = re.sub(r"<[^>]+>", " ", render_html(rep, []))
    assert "Change" in text and "−590 mHz (U 10 mHz)" in text
    alone = build_report(unit="HC-07", spec=spec, as_left=left)
    assert ">Change<" not in render_html(alone, [])  # no as-found: no column


def test_a_full_disk_leaves_no_half_report(tmp_path, monkeypatch):
    """ENOSPC while the JSON twin is written: the HTML written a moment ago is removed, and the error
    names the cause (os.strerror(ENOSPC), POSIX)."""
    import errno
    import os
    from pathlib import Path

    from benchfit.errors import BenchfitError

    real_open = Path.open

    def full_disk_open(self, mode="r", *args, **kwargs):
        if self.suffix == ".json" and "x" in mode:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self))
        return real_open(self, mode, *args, **kwargs)

    monkeypatch.setattr(Path, "open", full_disk_open)
    with pytest.raises(BenchfitError) as info:
        write_report({"unit": "HC-09", "created_utc": "2026-12-01T21:00:00Z"}, "<html></html>", tmp_path)
    assert "No space left on device" in str(info.value) and "the HTML was removed too" in str(info.value)
    assert list(tmp_path.iterdir()) == []


def test_as_found_overlay_is_aligned_on_the_as_left_wave():
    """The as-found wave, drawn over the as-left one, is shifted by the lag of the largest correlation
    within one period: a copy delayed by 137 samples comes back sample for sample."""
    import numpy as np

    from benchfit.capture.capture import Capture
    from benchfit.report.assemble import _as_found_overlay

    fs, f = 48000.0, 50.0
    t = np.arange(24000) / fs
    wave = np.sin(2 * np.pi * f * t) + 0.2 * np.sin(2 * np.pi * 3 * f * t)
    left = Capture(wave, fs, ("output",), ("V",), source="left.wav")
    found = Capture(np.concatenate([np.zeros(137), wave])[: t.size] * 1.1, fs, ("output",), ("V",),
                    source="found.wav")
    got, shifted = _as_found_overlay(left, 0, f, [(found, None)], "output")
    assert got is found
    np.testing.assert_allclose(shifted[:3840], 1.1 * wave[:3840], atol=1e-12)
    other = Capture(wave, fs, ("drive",), ("V",), source="other.wav")
    assert _as_found_overlay(left, 0, f, [(other, None)], "output") is None  # no such channel: no overlay
