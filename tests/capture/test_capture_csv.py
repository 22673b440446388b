"""CSV reader: dialects, preamble, units, time axis, jitter and every bad input."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from benchfit.capture.csvfile import JITTER_LIMIT, parse_header_unit, read_csv
from benchfit.capture.load import load
from benchfit.errors import CaptureError

DATA = Path(__file__).resolve().parents[1] / "data"

# the same three rows in every dialect: t = 0, 20, 40 µs; channel A 0.1/0.2/0.3 V; channel B -1.5/0/1.5 V
EXPECTED_A = [0.1, 0.2, 0.3]
EXPECTED_B = [-1.5, 0.0, 1.5]

DIALECTS = {
    "comma": "Time (s),CH A (V),CH B (V)\n0,0.1,-1.5\n2e-05,0.2,0\n4e-05,0.3,1.5\n",
    "semicolon-decimal-comma": "Time (s);CH A (V);CH B (V)\n0;0,1;-1,5\n0,00002;0,2;0\n0,00004;0,3;1,5\n",
    "tab-decimal-comma": "Time (s)\tCH A (V)\tCH B (V)\n0\t0,1\t-1,5\n2E-05\t0,2\t0\n4E-05\t0,3\t1,5\n",
    "tab-decimal-point": "Time (s)\tCH A (V)\tCH B (V)\n0\t0.1\t-1.5\n2e-05\t0.2\t0\n4e-05\t0.3\t1.5\n",
    "whitespace": "  0.000000   0.1  -1.5\n  0.000020   0.2   0.0\n  0.000040   0.3   1.5\n",
    "whitespace-with-header": "Time (s)    CH A (V)    CH B (V)\n0.000000    0.1    -1.5\n0.000020    0.2    0.0\n"
                              "0.000040    0.3    1.5\n",
    "quoted-decimal-comma": '"Time (s)","CH A (V)","CH B (V)"\n"0","0,1","-1,5"\n"0,00002","0,2","0"\n'
                            '"0,00004","0,3","1,5"\n',
    "crlf-and-bom": "\ufeffTime (s),CH A (V),CH B (V)\r\n0,0.1,-1.5\r\n2e-05,0.2,0\r\n4e-05,0.3,1.5\r\n",
    "trailing-delimiter": "Time (s),CH A (V),CH B (V),\n0,0.1,-1.5,\n2e-05,0.2,0,\n4e-05,0.3,1.5,\n",
    "comments-and-blank-lines": "# exported by the bench logger\n// second comment\n\nTime (s),CH A (V),CH B (V)\n"
                                "0,0.1,-1.5\n\n2e-05,0.2,0\n# marker\n4e-05,0.3,1.5\n\n",
}


def _write(tmp_path: Path, text: str, name: str = "HC-01.csv", encoding: str = "utf-8") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return path


def _one_line_error(path: Path, **kwargs) -> str:
    with pytest.raises(CaptureError) as info:
        load(path, **kwargs)
    msg = str(info.value)
    assert "\n" not in msg
    return msg


@pytest.mark.parametrize("dialect", sorted(DIALECTS))
def test_every_dialect_gives_the_same_capture(tmp_path, dialect):
    cap = load(_write(tmp_path, DIALECTS[dialect]))
    assert cap.n_channels == 2
    # values are printed with ≤ 6 digits; 1e-12 V only absorbs binary rounding of the parse
    np.testing.assert_allclose(cap.samples, [EXPECTED_A, EXPECTED_B], rtol=0, atol=1e-12)
    assert cap.sample_rate == pytest.approx(50_000, rel=1e-12)  # 1/20 µs, binary rounding only
    assert cap.units == ("V", "V")
    if dialect != "whitespace":
        assert cap.channel_names == ("CH A", "CH B")
        assert cap.warnings == ()


def test_sniffed_delimiter_and_decimal_are_recorded(tmp_path):
    cap = load(_write(tmp_path, DIALECTS["semicolon-decimal-comma"]))
    assert (cap.metadata["csv_delimiter"], cap.metadata["csv_decimal"]) == (";", ",")


# --- units in headers ---------------------------------------------------------------------------------
# SI prefixes m = 1e-3, µ/u = 1e-6, n = 1e-9, k = 1e3: BIPM SI Brochure, 9th ed. (2019), Table 7
@pytest.mark.parametrize(
    "header, name, unit",
    [
        ("time (ms)", "time", "ms"), ("CH A [mV]", "CH A", "mV"), ("v_out_V", "v_out", "V"),
        ("t/us", "t", "us"), ("Time[s]", "Time", "s"), ("U / mV", "U", "mV"), ("Time (µs)", "Time", "µs"),
        ("CH1(V)", "CH1", "V"), ("time_ms", "time", "ms"), ("Channel A", "Channel A", None),
        ("CH1 (output)", "CH1 (output)", None), ("Temp [°C]", "Temp", "°C"), ("Volt", "", "Volt"),
        ("Current [mA]", "Current", "mA"), ("Vertical Min", "Vertical Min", None), ("t (min)", "t", "min"),
    ],
)
def test_parse_header_unit(header, name, unit):
    assert parse_header_unit(header) == (name, unit)


@pytest.mark.parametrize(
    "t_head, t_scale, v_head, v_scale",
    [
        ("time (ms)", 1e-3, "CH A [mV]", 1e-3), ("t/us", 1e-6, "v_out_V", 1.0), ("Time[s]", 1.0, "CH1 (uV)", 1e-6),
        ("Time (ns)", 1e-9, "HV [kV]", 1e3), ("t_µs", 1e-6, "Vout (µV)", 1e-6), ("Time(mS)", 1e-3, "U (mv)", 1e-3),
        ("Time (sec)", 1.0, "Out (Volts)", 1.0), ("t (min)", 60.0, "CH1 (V)", 1.0),
    ],
)
def test_units_are_converted_to_seconds_and_volts(tmp_path, t_head, t_scale, v_head, v_scale):
    text = f"{t_head},{v_head}\n10,250\n12,-250\n14,500\n"
    cap = load(_write(tmp_path, text))
    # SI prefixes: BIPM SI Brochure, 9th ed., Table 7; minute = 60 s: SI Brochure Table 8
    np.testing.assert_allclose(cap.samples[0], np.array([250, -250, 500]) * v_scale, rtol=1e-15)
    assert cap.t0 == pytest.approx(10 * t_scale, rel=1e-15)
    assert cap.sample_rate == pytest.approx(1 / (2 * t_scale), rel=1e-12)


def test_unitless_voltage_column_is_read_as_volts_with_a_warning(tmp_path):
    cap = load(_write(tmp_path, "Time (s),output\n0,1.25\n0.001,1.5\n"))
    assert cap.units == ("V",)
    np.testing.assert_array_equal(cap.samples[0], [1.25, 1.5])
    assert any("'output' has no unit — read as volts" in w for w in cap.warnings)


def test_units_row_under_the_names(tmp_path):
    cap = load(_write(tmp_path, "X,CH1,CH2\nSecond,mV,Volt\n-0.001,100,1\n-0.0009,200,2\n-0.0008,300,3\n"))
    assert cap.channel_names == ("CH1", "CH2")
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    np.testing.assert_allclose(cap.samples, [[0.1, 0.2, 0.3], [1, 2, 3]], rtol=1e-15)
    assert cap.t0 == -0.001
    assert cap.sample_rate == pytest.approx(10_000, rel=1e-9)  # printed time has 1-digit steps; rounding only


def test_non_voltage_and_index_columns_are_dropped(tmp_path):
    text = "No.,Time (s),Temp [°C],Load [mA],CH1 (V)\n1,0,21.5,3,0.5\n2,0.001,21.5,3,0.6\n3,0.002,21.6,3,0.7\n"
    cap = load(_write(tmp_path, text))
    assert cap.channel_names == ("CH1",)
    assert cap.metadata["dropped_columns"] == ["No.", "Temp [°C]", "Load [mA]"]
    assert sum("not volts — skipped" in w for w in cap.warnings) == 2


def test_preamble_units_apply_to_unitless_columns(tmp_path):
    text = "Horizontal Units,ms\nVertical Units,mV\nTime,CH1\n0,100\n0.5,200\n1,300\n"
    cap = load(_write(tmp_path, text))
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    np.testing.assert_allclose(cap.samples[0], [0.1, 0.2, 0.3], rtol=1e-15)
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    assert cap.sample_rate == pytest.approx(2000, rel=1e-12)
    assert cap.warnings == ()


# --- preamble -----------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "line, step",
    [
        ("Sample Interval,2e-05", 2e-5), ("Sample Interval (s),2e-05", 2e-5), ("Sample period,20 us", 2e-5),
        ("X-Increment,2.0E-05", 2e-5), ("dt,20µs", 2e-5), ("Sample rate,50000", 2e-5),
        ("Sampling Rate,50 kSa/s", 2e-5), ("Sample rate,50kHz", 2e-5), ("Samplerate,1 MS/s", 1e-6),
        ("Time step: 0.1 ms", 1e-4), ("# Sample rate = 48 kHz", 1 / 48000),
    ],
)
def test_preamble_gives_the_sample_step(tmp_path, line, step):
    text = f"Device,bench logger\n{line}\n\nCH1 (V),CH2 (V)\n0.1,0.2\n0.3,0.4\n0.5,0.6\n"
    cap = load(_write(tmp_path, text))
    # SI prefixes: BIPM SI Brochure, 9th ed., Table 7; only binary rounding between text and float
    assert cap.sample_rate == pytest.approx(1 / step, rel=1e-12)
    assert cap.metadata["preamble"]["Device"] == "bench logger"
    assert cap.t0 == 0.0


def test_semicolon_preamble_with_decimal_comma_and_start_time(tmp_path):
    text = "Sample rate;50000\nStart time;-0,004 s\nCH A [mV];CH B [mV]\n1,5;2\n2,5;3\n3,5;4\n"
    cap = load(_write(tmp_path, text))
    assert cap.sample_rate == 50000
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    assert cap.t0 == pytest.approx(-0.004, rel=1e-15)
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    np.testing.assert_allclose(cap.samples, [[1.5e-3, 2.5e-3, 3.5e-3], [2e-3, 3e-3, 4e-3]], rtol=1e-15)


@pytest.mark.parametrize(
    "lines, rails",
    [
        ("Vertical Range,±5 V", {"*": [-5.0, 5.0]}),
        ("Range,-2.5,2.5", {"*": [-2.5, 2.5]}),
        ("Vertical Min,-1 V\nVertical Max,3 V", {"*": [-1.0, 3.0]}),
        ("CH A Range,±500 mV", {"CH A": [-0.5, 0.5]}),
    ],
)
def test_vertical_range_is_kept_as_rails(tmp_path, lines, rails):
    text = f"Sample Interval,1e-3\n{lines}\nCH A (V)\n0.1\n0.2\n"
    cap = load(_write(tmp_path, text))
    assert cap.metadata["rails_v"] == rails


def test_time_column_wins_over_preamble_and_argument_with_warnings(tmp_path):
    text = "Sample Interval,1e-3\nTime (s),CH1 (V)\n0,1\n2e-3,2\n4e-3,3\n"
    cap = load(_write(tmp_path, text), sample_rate=1000)
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    assert cap.sample_rate == pytest.approx(500, rel=1e-12)
    assert any("preamble 'Sample Interval'" in w for w in cap.warnings)
    assert any("sample rate 1000 Hz given" in w for w in cap.warnings)


# --- files without a header ---------------------------------------------------------------------------
def test_headerless_file_with_increasing_first_column_uses_it_as_time(tmp_path):
    cap = load(_write(tmp_path, "0.010,0.5,1\n0.011,0.6,2\n0.012,0.7,3\n"))
    assert cap.channel_names == ("ch1", "ch2")
    assert cap.t0 == 0.010
    assert cap.sample_rate == pytest.approx(1000, rel=1e-9)  # printed time rounding only


def test_headerless_file_without_time_needs_the_sample_rate(tmp_path):
    path = _write(tmp_path, "0.5,1\n0.4,2\n0.6,3\n")
    msg = _one_line_error(path)
    assert msg.startswith(f"{path}: no time column") and "(sample_rate=)" in msg
    cap = load(path, sample_rate=2000)
    assert cap.sample_rate == 2000
    np.testing.assert_array_equal(cap.samples, [[0.5, 0.4, 0.6], [1, 2, 3]])
    assert cap.metadata["time_source"] == "sample rate given by the caller"


def test_headerless_single_column_with_sample_rate(tmp_path):
    cap = load(_write(tmp_path, "1.5\n1.6\n1.7\n1.8\n"), sample_rate=48000)
    assert cap.n_channels == 1 and cap.n_samples == 4 and cap.sample_rate == 48000


def test_headerless_sample_counter_is_not_time(tmp_path):
    path = _write(tmp_path, "0,0.5\n1,0.6\n2,0.7\n3,0.8\n")
    assert "no time column" in _one_line_error(path)
    cap = load(path, sample_rate=1000)
    np.testing.assert_array_equal(cap.samples, [[0.5, 0.6, 0.7, 0.8]])


# --- time axis: jitter, gaps, order -------------------------------------------------------------------
def _jittered(n: int, rel: float, seed: int) -> str:
    rng = np.random.default_rng(seed)
    dt = 1e-4
    t = np.arange(n) * dt + rng.uniform(-rel, rel, n) * dt
    t[0], t[-1] = 0.0, (n - 1) * dt  # pin the ends so the mean step is exactly dt
    x = np.sin(2 * np.pi * 50 * np.arange(n) * dt)
    return "Time (s),out (V)\n" + "".join(f"{a:.9e},{b:.6f}\n" for a, b in zip(t, x))


def test_small_jitter_is_accepted_and_recorded(tmp_path):
    cap = load(_write(tmp_path, _jittered(400, 0.005, seed=11)))
    assert cap.sample_rate == pytest.approx(10_000, rel=1e-9)  # ends pinned: mean step is 1e-4 s (9-digit print)
    jitter = cap.metadata["time_jitter_max_rel"]
    # uniform ±0.5 % draws (seeded) reach above 0.3 %; measured from the least-squares grid, whose
    # offset and slope move by ~0.5 %/sqrt(400) ≈ 0.03 % of a step, so 0.6 % bounds it
    assert 0.003 < jitter < 0.006


def test_large_jitter_is_rejected_naming_a_line(tmp_path):
    path = _write(tmp_path, _jittered(400, 0.03, seed=11))
    msg = _one_line_error(path)
    assert msg.startswith(f"{path}: line ") and "column 'Time (s)'" in msg and "not evenly spaced" in msg
    assert f"limit {100 * JITTER_LIMIT:g} %" in msg


def test_missing_sample_is_reported_at_the_gap(tmp_path):
    rows = [f"{i * 1e-3:.6f},{i}" for i in range(50) if i != 30]
    path = _write(tmp_path, "Time (s),CH1 (V)\n" + "\n".join(rows) + "\n")
    msg = _one_line_error(path)
    # header is line 1, sample i on line i + 2; the 2 ms step ends at sample 31 (line 33 minus the gap)
    assert msg.startswith(f"{path}: line 32, column 'Time (s)': time step 0.002 s")


def test_time_not_increasing_names_the_row(tmp_path):
    path = _write(tmp_path, "Time (s),CH1 (V)\n0,1\n0.001,2\n0.002,3\n0.0015,4\n0.003,5\n")
    msg = _one_line_error(path)
    assert msg.startswith(f"{path}: line 5, column 'Time (s)': time 0.0015 s does not increase")


# --- bad input ----------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "text, fragment",
    [
        ("Time (s),CH1 (V)\n0,1\n0.001,#VALUE!\n0.002,3\n", "line 3, column 'CH1 (V)': '#VALUE!' is not a number"),
        ("Time (s),CH1 (V)\n0,1\n0.001,2\n0.002,nan\n", "line 4, column 'CH1 (V)': 'nan' is not a finite number"),
        ("Time (s),CH1 (V)\n0,1\n0.001,inf\n0.002,3\n", "line 3, column 'CH1 (V)': 'inf' is not a finite number"),
        ("Time (s),CH1 (V)\n0,1\n0.001,\n0.002,3\n", "line 3, column 'CH1 (V)': the cell is empty"),
        ("Time (s),CH1 (V)\n0,1\n0.001,2,7\n0.002,3\n0.003,4\n", "line 3 has 3 cell(s) but the data rows have 2"),
        ("Time (s),CH1 (V)\n0,1\n0.001\n0.002,3\n0.003,4\n", "line 3 has 1 cell(s) but the data rows have 2"),
        ('Time (s);CH1 (V)\n0;1\n0,001;"1,2,3"\n0,002;3\n', "line 3, column 'CH1 (V)': '1,2,3' is not a number"),
        ("#VALUE!,1\n0.1,2\n0.2,3\n", "line 1, column 'column 1': '#VALUE!' is not a number"),
        ("Time,CH1 (V)\n17:00:00.000,1\n17:00:00.001,2\n", "line 2, column 'Time': '17:00:00.000' is a clock time"),
        ("Time (s),CH1 (V)\n", "no numeric data rows"),
        ("Time (s),CH1 (V)\n0,1\n", "only 1 data row"),
        ("# only a comment\n", "no data rows, only comments"),
        ("Time (s),Temp [°C]\n0,20\n1,21\n", "no voltage column"),
        ("   \n\n", "the file is empty"),
    ],
)
def test_bad_csv_gives_one_line_naming_file_and_place(tmp_path, text, fragment):
    path = _write(tmp_path, text, name="HC-11 as-found.csv")
    msg = _one_line_error(path)
    assert msg.startswith(f"{path}: ")
    assert fragment in msg
    assert " — " in msg  # every message says what to do


def test_bad_cell_in_a_large_file_is_found(tmp_path):
    rows = [f"{i * 2e-5:.5e},{np.sin(i / 10):.6f}" for i in range(20000)]
    rows[15432] = f"{15432 * 2e-5:.5e},#N/A"
    path = _write(tmp_path, "Time (s),out (V)\n" + "\n".join(rows) + "\n")
    assert "line 15434, column 'out (V)': '#N/A' is not a" in _one_line_error(path)


def test_missing_file_and_binary_file(tmp_path):
    missing = tmp_path / "HC-12.csv"
    assert _one_line_error(missing) == f"{missing}: no such file — check the path and the spelling"
    binary = tmp_path / "HC-12.bin"
    binary.write_bytes(bytes(range(256)) * 4)
    assert "not an audio file and not CSV text" in _one_line_error(binary)


def test_latin1_and_utf16_text_are_decoded(tmp_path):
    text = "Time (µs);Out (mV)\n0;1,5\n20;2,5\n40;3,5\n"
    for enc in ("latin-1", "utf-16"):
        cap = load(_write(tmp_path, text, name=f"{enc}.csv", encoding=enc))
        assert cap.sample_rate == pytest.approx(50_000, rel=1e-12)  # 1/20 µs, binary rounding only
        # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
        np.testing.assert_allclose(cap.samples[0], [1.5e-3, 2.5e-3, 3.5e-3], rtol=1e-15)


# --- fixture files (tests/data/README_capture.md) ----------------------------------------------------
def test_logger_export_fixture():
    cap = load(DATA / "capture_hc03_logger_semicolon.csv")
    assert cap.channel_names == ("CH A", "CH B")
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    assert cap.sample_rate == 10_000 and cap.t0 == pytest.approx(-0.002, rel=1e-15)
    assert cap.metadata["rails_v"] == {"*": [-12.0, 12.0]}
    assert cap.metadata["preamble"]["Device"] == "bench logger 2-ch"
    t = cap.time
    # the file holds 1414.2·sin(2π·50·t) mV printed to 0.1 mV: rounding ≤ 0.05 mV
    np.testing.assert_allclose(cap.samples[0], 1.4142 * np.sin(2 * np.pi * 50 * t), rtol=0, atol=0.05e-3 + 1e-12)
    assert set(np.round(cap.samples[1], 6)) == {0.12, 10.5}


def test_scope_export_fixture():
    cap = load(DATA / "capture_hc08_scope_comma.csv")
    assert cap.channel_names == ("CH1", "CH2") and cap.n_samples == 250
    assert cap.sample_rate == pytest.approx(50_000, rel=1e-9)  # 7-digit printed time stamps
    t = cap.time
    # 7 significant digits printed: relative rounding ≤ 5e-7 of a value ≤ 1.52 V, plus time-stamp rounding
    np.testing.assert_allclose(cap.samples[0], 1.5 * np.sin(2 * np.pi * 50 * t + 0.3) + 0.02, rtol=0, atol=2e-6)
    np.testing.assert_allclose(cap.samples[1], 1.41 * np.sin(2 * np.pi * 50 * t - 1.1), rtol=0, atol=2e-6)


def test_million_row_csv_loads(tmp_path):
    n = 1_000_000
    # integer codes (µs time stamps, mV readings) like a logger's ADC export; quick to write
    t_us = np.arange(n) * 20
    a_mv = np.round(1000 * np.sin(2 * np.pi * 50 * t_us * 1e-6)).astype(int)
    path = tmp_path / "long.csv"
    path.write_text("Sample Interval,2e-05\nTime (us),CH A (mV)\n"
                    + "\n".join(map("{},{}".format, t_us.tolist(), a_mv.tolist())) + "\n", encoding="ascii")
    cap = read_csv(path)
    assert cap.n_samples == n and cap.sample_rate == pytest.approx(50_000, rel=1e-12)  # exact integer steps
    # tolerance: IEEE 754 double rounding of parsing and unit scaling (~2e-16 per step), common practice, no source
    np.testing.assert_allclose(cap.samples[0], a_mv * 1e-3, rtol=1e-15)
