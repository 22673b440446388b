"""Hostile capture inputs: each gives a Capture or one BenchfitError line with its fix.

Named cases from the robustness sweep (huge and deeply nested sidecar JSON, impossible
sample rates, a 1e308 sample, a NaN sample, a header cell padded with 100k spaces) and a
seeded mutation fuzzer over the CSV reader and the sidecar reader. The contract
(benchfit/errors.py): a result, or a BenchfitError whose message is one line
``<file>: <what is wrong> — <what to do>``; any other exception is a bug.
"""

from __future__ import annotations

import json
import random
import time

import numpy as np
import pytest
import soundfile as sf

from benchfit.capture.capture import Capture
from benchfit.capture.csvpreamble import parse_header_unit
from benchfit.capture.load import load
from benchfit.errors import BenchfitError, CaptureError
from benchfit.measurement.summary import measure

FS = 48000


def _one_line_with_fix(e: BaseException) -> str:
    msg = str(e)
    assert "\n" not in msg and " — " in msg and len(msg) < 600, msg
    return msg


def _wav_with_sidecar(tmp_path, sidecar_text: str):
    wav = tmp_path / "HC-03.wav"
    sf.write(wav, 0.5 * np.sin(2 * np.pi * 50 * np.arange(4800) / FS), FS, subtype="PCM_24")
    wav.with_suffix(".json").write_text(sidecar_text, encoding="utf-8")
    return wav


@pytest.mark.parametrize("sidecar, expected", [
    ('{"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": 1' + "0" * 400 + "}",
     "'sample_rate_hz' must be a positive number of Hz, got 1000000000000000000000000000000000000..."),
    ('{"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": 1' + "0" * 5000 + "}",
     "sidecar holds a number JSON or benchfit cannot use"),
    ('{"benchfit_sidecar": 1, "x": ' + "[" * 100000 + "]" * 100000 + "}",
     "sidecar is nested too deeply to be a benchfit sidecar — "),
    ('{"benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": NaN}',
     "sidecar holds a number JSON or benchfit cannot use (NaN is not a JSON number)"),
])
def test_hostile_sidecar_numbers_and_nesting(tmp_path, sidecar, expected):
    wav = _wav_with_sidecar(tmp_path, sidecar)
    with pytest.raises(CaptureError) as info:
        load(wav)
    assert expected in _one_line_with_fix(info.value)


@pytest.mark.parametrize("fs", [1e-300, 1e300, 1e-5])
def test_implausible_sample_rate_is_refused(tmp_path, fs):
    """1e-300 Hz used to overflow the tone fit (1/fs²); the capture now refuses it up front."""
    csv = tmp_path / "HC-04.csv"
    csv.write_text("output\n" + "\n".join(f"{v:.5f}" for v in np.sin(np.arange(2000) / 10)) + "\n",
                   encoding="utf-8")
    with pytest.raises(CaptureError) as info:
        load(csv, sample_rate=fs)
    assert "is outside what any recorder uses" in _one_line_with_fix(info.value)


def test_a_1e308_sample_is_refused_with_its_position(tmp_path):
    t = np.arange(4800) / FS
    x = 0.5 * np.sin(2 * np.pi * 50 * t)
    x[100] = 1e308
    csv = tmp_path / "HC-05.csv"
    csv.write_text("time,output\n" + "\n".join(f"{a:.7f},{float(v)!r}" for a, v in zip(t, x)) + "\n",
                   encoding="utf-8")
    with pytest.raises(CaptureError) as info:
        load(csv)
    assert "sample 100 of channel 1 is 1e+308, beyond any reading" in _one_line_with_fix(info.value)


def test_nan_sample_error_says_what_to_do():
    x = np.ones(100)
    x[7] = np.nan
    with pytest.raises(CaptureError) as info:
        Capture(x, FS, source="HC-06.wav")
    assert _one_line_with_fix(info.value).startswith("HC-06.wav: sample 7 of channel 1 is NaN or infinite — ")


def test_header_with_100k_spaces_parses_in_linear_time(tmp_path):
    """The bracket rule was a regex with a lazy group before a run of spaces: quadratic, 86 s for 100k
    spaces. The bound here only catches that hang (it is 100× the linear parser's time on this
    machine), it is not a speed goal."""
    t0 = time.perf_counter()
    assert parse_header_unit("output" + " " * 100000 + "[mV]") == ("output", "mV")
    assert parse_header_unit("output" + " " * 100000 + "x") == ("output" + " " * 100000 + "x", None)
    assert parse_header_unit("(" * 50000 + "x)") == ("(" * 50000 + "x)", None)
    assert time.perf_counter() - t0 < 2.0
    csv = tmp_path / "HC-07.csv"
    tt = np.arange(2000) / FS
    csv.write_text("time,output" + " " * 100000 + "(V)\n"
                   + "\n".join(f"{a:.7f},{np.sin(2 * np.pi * 500 * a):.5f}" for a in tt) + "\n", encoding="utf-8")
    cap = load(csv)
    assert cap.channel_names == ("output",) and cap.units == ("V",)


# --- seeded mutation fuzzing ------------------------------------------------------------------

_TOKENS = ["nan", "inf", "-inf", "1e308", "-1e308", "1" + "0" * 400, "", " ", "#VALUE!", "1,5", "0x10",
           "12:30:01", '"', ";", "\t", "\ufeff", "\x00", "1e-320", "[V]", "(s)", " " * 3000, "µs", "Sample rate: 0",
           "Sample interval: 1e-300", "time", "V", "-", "1_000", "−1.0"]


def _csv_text(rng: random.Random) -> str:
    n = rng.choice([5, 60, 400])
    t = np.arange(n) / FS
    header = rng.choice(["time,output", "time (s),drive (V),output (V)", "Sample rate: 48000\noutput",
                         "# scope export\ntime;output", "output"])
    cols = header.splitlines()[-1].count(",") + header.splitlines()[-1].count(";") + 1
    sep = ";" if ";" in header else ","
    rows = []
    for a in t:
        cells = [f"{a:.7f}"] if "time" in header else []
        cells += [f"{np.sin(2 * np.pi * 500 * a):.5f}"] * (cols - len(cells))
        rows.append(sep.join(cells))
    return header + "\n" + "\n".join(rows) + "\n"


def _mutate_text(text: str, rng: random.Random) -> bytes:
    chars = list(text)
    for _ in range(rng.choice([1, 1, 2, 3])):
        kind = rng.randrange(5)
        i = rng.randrange(len(chars) + 1)
        if kind == 0:
            chars[i:i] = list(rng.choice(_TOKENS))
        elif kind == 1 and chars:  # a cell replaced by a token
            j = min(len(chars), i + rng.randint(1, 8))
            chars[i:j] = list(rng.choice(_TOKENS))
        elif kind == 2:
            del chars[i:i + rng.randint(1, 200)]
        elif kind == 3 and chars:
            j = rng.randrange(len(chars))
            chars[i:i] = chars[j:j + rng.randint(1, 60)]
        else:
            chars[i:i] = [rng.choice("\n\r,;.\"e+-0 ")]
    raw = "".join(chars).encode("utf-8", errors="surrogatepass")
    if raw and rng.random() < 0.1:
        raw = bytearray(raw)
        raw[rng.randrange(len(raw))] = 0xFF
        raw = bytes(raw)
    return raw


def test_csv_reader_mutants_give_a_capture_or_one_error_line(tmp_path):
    """1500 mutants; every 10th capture that loads is measured too (the analysis must survive what the
    reader lets through)."""
    rng = random.Random(20261201)
    path = tmp_path / "HC-08.csv"
    outcomes = {"capture": 0, "error": 0, "measured": 0}
    for n in range(1500):
        raw = _mutate_text(_csv_text(rng), rng)
        path.write_bytes(raw)
        try:
            cap = load(path, sample_rate=rng.choice([None, 48000.0]))
            outcomes["capture"] += 1
            if outcomes["capture"] % 10 == 0:
                json.dumps(measure(cap).to_dict())
                outcomes["measured"] += 1
        except BenchfitError as e:
            _one_line_with_fix(e)
            outcomes["error"] += 1
        except Exception as e:  # noqa: BLE001 - the point of the test
            pytest.fail(f"mutant {n} raised {type(e).__name__}: {e}\n{raw[:300]!r}")
    assert outcomes["capture"] > 150 and outcomes["error"] > 200, outcomes


_SIDECAR = {"benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}], "sample_rate_hz": 48000,
            "device": "line in", "start_utc": "2026-12-01T17:00:00Z", "overflow_count": 0, "clip_count": 0,
            "calibration": {"profile": "desk", "gain_v_per_fs": [1.5, 1.5], "timebase_ppm": 3.0,
                            "timebase_u_ppm": 1.0, "coupling_tau_s": None, "gain_u_rel": [0.003, 0.003]},
            "unit": "HC-03"}
_VALUES = [None, True, 0, -1, 1e308, 10 ** 400, float("nan"), "", "x" * 300, [], {}, [1.5], [[1.5]], {"name": 1},
           "2026-13-45", 2 ** 70, -0.0, 1e-320, "HC-03/../x"]


def _mutate_json(rng: random.Random):
    data = json.loads(json.dumps(_SIDECAR))
    for _ in range(rng.randint(1, 3)):
        node = data
        while isinstance(node, (dict, list)) and node and rng.random() < 0.6:
            key = rng.choice(list(node)) if isinstance(node, dict) else rng.randrange(len(node))
            if not isinstance(node[key], (dict, list)):
                break
            node = node[key]
        if isinstance(node, dict) and node:
            node[rng.choice(list(node) + ["extra"])] = rng.choice(_VALUES)
        elif isinstance(node, list) and node:
            node[rng.randrange(len(node))] = rng.choice(_VALUES)
    text = json.dumps(data)  # NaN is written as NaN, which the reader must refuse
    if rng.random() < 0.2:
        i = rng.randrange(len(text))
        text = text[:i] + rng.choice(["[" * 5000, "}", "1" + "0" * 5000, '"', ",,"]) + text[i:]
    return text


def test_sidecar_mutants_give_a_capture_or_one_error_line(tmp_path):
    rng = random.Random(20261202)
    wav = tmp_path / "HC-09.wav"
    sf.write(wav, 0.5 * np.ones((480, 2)), FS, subtype="PCM_16")
    outcomes = {"capture": 0, "error": 0}
    for n in range(1500):
        text = _mutate_json(rng)
        wav.with_suffix(".json").write_text(text, encoding="utf-8")
        try:
            load(wav)
            outcomes["capture"] += 1
        except BenchfitError as e:
            _one_line_with_fix(e)
            outcomes["error"] += 1
        except Exception as e:  # noqa: BLE001 - the point of the test
            pytest.fail(f"mutant {n} raised {type(e).__name__}: {e}\n{text[:300]!r}")
    assert outcomes["capture"] > 100 and outcomes["error"] > 200, outcomes


# --- CSV time columns as exports write them --------------------------------------------------------

def _us_rounded_csv(tmp_path, scale=1.0, decimals=6, name="HC-08_us.csv"):
    t = np.arange(4800) / FS
    path = tmp_path / name
    path.write_text("time,output\n" + "\n".join(f"{a * scale:.{decimals}f},{np.sin(2 * np.pi * 50 * a):.5f}"
                                              for a in t) + "\n", encoding="utf-8")
    return path


def test_time_column_rounded_to_1us_at_48khz_is_read(tmp_path):
    """48 kHz printed to 1 µs: steps of 20 and 21 µs, stamps up to 0.5 µs (2.4 % of a step) off the grid.
    That is rounding, not irregular sampling: accepted with a warning, the step fitted over all rows
    (its error is ~ (q/√12)/√(Σk²) ≈ 0.14 ppm here — a least-squares slope, from memory)."""
    path = _us_rounded_csv(tmp_path)
    cap = load(path)
    assert cap.sample_rate == pytest.approx(FS, rel=1e-6)
    assert any("time stamps are rounded to 1e-06 s" in w for w in cap.warnings)
    given = load(path, sample_rate=48000.0)  # the caller's rate agrees: it is used exactly
    assert given.sample_rate == 48000.0
    assert any("the given sample rate 48000 Hz is used" in w for w in given.warnings)


def test_time_column_rounded_too_coarsely_is_still_refused(tmp_path):
    """Printed to 10 µs (half a step): rounding that coarse could hide real irregular sampling, so only a
    grid up to a tenth of a step is taken as rounding (common practice, no source); the error stands."""
    with pytest.raises(CaptureError, match="the samples are not evenly spaced"):
        load(_us_rounded_csv(tmp_path, decimals=5))


def test_unitless_microsecond_column_gets_a_plausibility_warning(tmp_path):
    cap = load(_us_rounded_csv(tmp_path, scale=1e6, decimals=3, name="HC-08_us_col.csv"))
    (w,) = [w for w in cap.warnings if "has no unit" in w and "time" in w]
    assert "which gives 0.048 Hz; read as µs it would be 48000 Hz" in w and "'time (us)'" in w


def test_a_one_channel_gain_profile_calibrates_channel_1_of_a_stereo_recording(tmp_path):
    """The profile knows channel 1 only: channel 1 is read in V, channel 2 stays in FS (it used to
    leave both in FS); the sidecar writes null for the missing gain and reads back the same."""
    from benchfit.capture.calibration import CalibrationProfile, ChannelGain
    from benchfit.capture.sidecar import write_sidecar

    g1 = ChannelGain(channel=1, v_per_fs=2.0, u_v_per_fs=0.002, reference_rms_v=0.775, source="ref_sine.wav",
                     measured_utc="2026-12-01T17:00:00Z", reference_u_v=0.002, gain_u_rel=0.003)
    prof = CalibrationProfile(name="desk", gains=(g1,))
    cal = prof.input_calibration(2)
    assert cal.gain_v_per_fs == (2.0, None) and cal.gain_u_rel == (0.003, None)
    wav = tmp_path / "HC-03.wav"
    x = 0.25 * np.sin(2 * np.pi * 50 * np.arange(4800) / FS)
    sf.write(wav, np.stack([x, x], axis=1), FS, subtype="FLOAT")
    write_sidecar(wav, {"benchfit_sidecar": 1, "channels": [{"name": "drive"}, {"name": "output"}],
                        "sample_rate_hz": FS, "calibration": cal.to_dict()})
    cap = load(wav)
    assert cap.units == ("V", "FS")
    np.testing.assert_allclose(cap.samples[0], 2.0 * cap.samples[1], rtol=1e-6)  # float WAV: exact to 1e-7
    m = measure(cap)
    assert [c.unit for c in m.channels] == ["V", "FS"]
    assert m.channels[0].extra["gain_u_rel"] == 0.003 and m.channels[1].extra["gain_u_rel"] is None
