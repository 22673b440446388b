"""Recordings past a plain WAV's 4 GiB are written as RF64 (EBU Tech 3306, the 64-bit WAV), and
an RF64 file reads back whole through load and the block reader.

The limit is the WAV format's own: its RIFF and data chunk sizes are 32-bit fields (Microsoft
RIFF/WAVE specification, 1991), so 2^32 bytes is the most a data chunk can state.
"""

from __future__ import annotations

import numpy as np
import soundfile as sf

from benchfit.capture.live import wav_container


def test_the_container_switches_at_four_gibibytes_of_data():
    # 48 kHz stereo 24-bit: 6 bytes a frame; 4 GiB / 6 B / 48 kHz ≈ 4.14 h
    frames_4h = 4 * 3600 * 48000
    frames_5h = 5 * 3600 * 48000
    assert wav_container(frames_4h, 2, "pcm24") == "WAV"
    assert wav_container(frames_5h, 2, "pcm24") == "RF64"
    assert wav_container(frames_4h, 2, "float") == "RF64"  # 8 bytes a frame: 5.5 GiB
    assert wav_container(48000, 1, "pcm24") == "WAV"


def test_an_rf64_file_named_wav_reads_back_whole(tmp_path):
    from benchfit.capture.blocks import BlockReader
    from benchfit.capture.load import load

    path = tmp_path / "long.wav"
    rng = np.random.default_rng(4)
    x = (0.5 * np.sin(2 * np.pi * 50.04 * np.arange(24000) / 8000.0)[:, None]
         + rng.normal(0, 1e-3, (24000, 2)))
    with sf.SoundFile(str(path), "w", samplerate=8000, channels=2, subtype="PCM_24", format="RF64") as fh:
        fh.write(x)
    assert sf.info(str(path)).format == "RF64"
    cap = load(path)
    assert cap.samples.shape == (2, 24000)
    with BlockReader(path) as reader:
        got = sum(b.n_samples for b in reader.blocks(5000))
    assert got == 24000
