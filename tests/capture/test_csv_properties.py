"""Property test (hypothesis): a waveform written in any CSV dialect the reader accepts reads back.

The dialects are those of benchfit.capture.csvfile's module docstring (delimiter ",", ";", tab or
spaces; decimal comma with ";", tab or space; a header with units or none; CRLF line ends; a
comment line). Values are written with 9 significant digits, so they read back to 5e-9
relative (half a unit in the ninth digit); the rate comes from the time column.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st

from benchfit.capture.csvfile import read_csv


@st.composite
def exports(draw):
    delim = draw(st.sampled_from([",", ";", "\t", " "]))
    decimal = draw(st.sampled_from(["."] if delim == "," else [".", ","]))
    n_ch = draw(st.integers(min_value=1, max_value=3))
    n = draw(st.integers(min_value=8, max_value=200))
    fs = draw(st.sampled_from([1e3, 44.1e3, 48e3, 1e5, 2.5e6]))
    seed = draw(st.integers(min_value=0, max_value=2**32 - 1))
    scale = draw(st.sampled_from([1e-3, 1.0, 12.0]))
    header = draw(st.booleans())
    crlf = draw(st.booleans())
    comment = draw(st.booleans())
    return delim, decimal, n_ch, n, fs, seed, scale, header, crlf, comment


def _num(x: float, decimal: str) -> str:
    text = f"{x:.9g}"
    return text.replace(".", ",") if decimal == "," else text


@settings(max_examples=60, deadline=None)
@given(exports())
@example((" ", ",", 1, 8, 1000.0, 0, 0.001, False, False, False))  # found: once read as comma-delimited
def test_a_dialect_round_trips(export):
    delim, decimal, n_ch, n, fs, seed, scale, header, crlf, comment = export
    rng = np.random.default_rng(seed)
    samples = rng.uniform(-scale, scale, size=(n_ch, n))
    t = np.arange(n) / fs
    names = [f"ch{i + 1}" for i in range(n_ch)]
    sep = "    " if delim == " " else delim
    lines = []
    if comment:
        lines.append("# exported by the bench logger")
    if header:
        lines.append(sep.join(["Time (s)"] + [f"{name} (V)" for name in names]))
    for k in range(n):
        lines.append(sep.join([_num(t[k], decimal)] + [_num(samples[c, k], decimal) for c in range(n_ch)]))
    eol = "\r\n" if crlf else "\n"
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "export.csv"
        path.write_bytes((eol.join(lines) + eol).encode("utf-8"))
        cap = read_csv(path)
    assert cap.samples.shape == (n_ch, n)
    np.testing.assert_allclose(cap.samples, samples, rtol=5e-9, atol=scale * 1e-12)
    # the time column's mean step: 9-digit time stamps, so the rate is good to about 1e-8
    assert abs(cap.sample_rate / fs - 1) < 1e-7
    if header:
        assert list(cap.channel_names) == names and set(cap.units) == {"V"}
