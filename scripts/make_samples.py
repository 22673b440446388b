#!/usr/bin/env python3
"""Generate the bundled sample captures of the demo scenario (all synthetic).

The scenario (invented): a makerspace electronics group builds "hum-check" boxes HC-01…HC-12.
Each box makes a 50 Hz sine from a 555-style astable (12 V supply) whose square output is cut
down by a low-impedance divider (220 Ω over 100 Ω) and filtered by an L-C low-pass: two
150 mH chokes in series and a 33 µF capacitor bank, into a 10 kΩ load.

The circuit is simulated here with scipy.signal.lsim (state space, first-order-hold exact
discretisation) at 480 kHz, then "captured" the way the group does it:

* a USB oscilloscope samples directly (no anti-alias filter) and exports CSV;
* the sound card's line-in (through an attenuator) low-pass filters, decimates to 48 kHz,
  AC-couples (first-order high-pass, connected a while before recording: in its steady state),
  adds noise and quantises to 16 bits; its crystal runs
  a few tens of ppm off, and a calibration profile in the sidecar records gain (with its
  0.3 % relative standard uncertainty), timebase and input coupling.

Run ``python scripts/make_samples.py`` to rewrite sample_captures/ (seeded: byte-identical
output for the same numpy/scipy/soundfile versions). Nothing here is measured data.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import soundfile as sf
from scipy import signal

OUT = Path(__file__).resolve().parent.parent / "sample_captures"
FS_SIM = 480_000.0  # simulation rate, Hz

# the sound card used for the recordings (invented): 38 ppm fast, 0.1 s input time constant
CARD_PPM = 38.0
CARD_TAU_S = 0.1
# gain uncertainty (invented): 0.3 % relative standard uncertainty of the card's gain, as
# 'benchfit calibrate gain --rms-u' would store it from the fit and the meter reading combined
CARD_GAIN_U_REL = 0.003
PROFILE = {"profile": "makerspace-laptop", "timebase_ppm": CARD_PPM, "timebase_u_ppm": 0.5,
           "coupling_tau_s": CARD_TAU_S}


@dataclass(frozen=True)
class Unit:
    """One built hum-check box (effective values of the built unit)."""

    serial: str
    f_timer: float = 50.0   # astable frequency, Hz
    duty: float = 0.52      # high time / period
    v_high: float = 10.6    # 555 output high level at 12 V supply, V
    v_low: float = 0.08     # output low level, V
    r_top: float = 220.0    # divider, ohm
    r_bottom: float = 56.0
    l_h: float = 0.300      # two 150 mH chokes in series (effective, incl. coupling), H
    r_wind: float = 24.0    # winding resistance of both chokes plus wiring, ohm
    c_f: float = 33e-6      # capacitor bank, F
    esr: float = 0.6        # bank ESR, ohm
    r_load: float = 10e3    # test load, ohm

    @property
    def r_th(self) -> float:
        return self.r_top * self.r_bottom / (self.r_top + self.r_bottom)

    def k_div(self) -> float:
        return self.r_bottom / (self.r_top + self.r_bottom)


def timer_wave(t: np.ndarray, u: Unit, rise_s: float = 2e-6) -> np.ndarray:
    """The 555 output: a rectangular wave with linear edges (levels v_low/v_high)."""
    period = 1.0 / u.f_timer
    ph = np.mod(t, period)
    high = u.duty * period
    y = np.where(ph < high, u.v_high, u.v_low).astype(float)
    # linear edges of rise_s at both transitions
    r = ph < rise_s
    y[r] = u.v_low + (u.v_high - u.v_low) * ph[r] / rise_s
    f = (ph >= high) & (ph < high + rise_s)
    y[f] = u.v_high - (u.v_high - u.v_low) * (ph[f] - high) / rise_s
    return y


def simulate(u: Unit, seconds: float, source: np.ndarray | None = None, r_source: float | None = None):
    """Simulate the filter. Returns (t, drive_at_filter_input, output) at FS_SIM.

    States x = (i_L, v_C); input v_th (Thevenin source); outputs (v_out, v_drive).
    """
    t = np.arange(int(seconds * FS_SIM)) / FS_SIM
    if source is None:
        v_th = timer_wave(t, u) * u.k_div()
        r_th = u.r_th
    else:
        v_th, r_th = source, float(r_source)
    rl, esr, c, l = u.r_load, u.esr, u.c_f, u.l_h
    rtot = r_th + u.r_wind
    g = 1.0 / (1.0 + esr / rl)  # v_out = g·(v_C + esr·i_L)
    # dv_C/dt = (i_L − v_out/rl)/C ; L di_L/dt = v_th − rtot·i_L − v_out
    a = np.array([
        [(-rtot - g * esr) / l, -g / l],
        [(1 - g * esr / rl) / c, -g / (rl * c)],
    ])
    b = np.array([[1.0 / l], [0.0]])
    cm = np.array([[g * esr, g], [-r_th, 0.0]])
    d = np.array([[0.0], [1.0]])
    sys = signal.StateSpace(a, b, cm, d)
    # start from the periodic steady state approximately: run one extra second and drop it
    _, y, _ = signal.lsim(sys, v_th, t)
    return t, y[:, 1], y[:, 0]


#: how long the line-in has been connected before a recording starts: ten time constants of its
#: AC coupling, so the high-pass is in its periodic steady state (its start transient is down by
#: e⁻¹⁰ ≈ 4.5e-5, a few 1e-7 FS here, far below one 16-bit code)
CARD_WARMUP_S = 10 * CARD_TAU_S


def soundcard(x_sim: np.ndarray, seconds: float, gain_v_per_fs: float, rng, noise_fs: float = 2e-4):
    """Capture through the line-in: anti-alias + decimate to the card's true rate, AC-couple,
    add noise, quantise to 16 bits. Returns FS samples (file rate nominally 48 kHz).

    ``x_sim`` starts CARD_WARMUP_S before the recording (the circuit already settled): the card's
    high-pass runs over that stretch first and it is dropped, as on a line-in connected a while
    before recording. (Starting the high-pass from rest instead leaves a decaying start transient
    in the record, 3.6e-3 FS here, that leaks into every harmonic as about 1/k: an output-only fit
    read it as a drive whose source resistance differs high and low.)"""
    fs_true = 48_000.0 * (1 + CARD_PPM * 1e-6)
    # resample the simulated signal onto the card's sample instants (band-limited)
    n_warm = int(round(CARD_WARMUP_S * 48_000))
    n_out = int(seconds * 48_000)
    t_card = np.arange(n_warm + n_out) / fs_true
    # anti-alias: low-pass at 20 kHz before interpolation
    sos = signal.butter(8, 20_000, fs=FS_SIM, output="sos")
    xf = signal.sosfiltfilt(sos, x_sim)
    t_sim = np.arange(x_sim.size) / FS_SIM
    if t_card[-1] > t_sim[-1]:
        raise ValueError(f"soundcard: {x_sim.size / FS_SIM:.3g} s simulated, {t_card[-1]:.3g} s needed "
                         f"({CARD_WARMUP_S:g} s of warm-up before the {seconds:g} s record)")
    xc = np.interp(t_card, t_sim, xf)
    # AC coupling: first-order high-pass with time constant CARD_TAU_S (bilinear), run over the
    # warm-up and then the record; only the record is kept
    xc = ac_couple(xc - xc.mean(), fs_true)[n_warm:]
    fs_units = xc / gain_v_per_fs + rng.normal(0, noise_fs, xc.size)
    return quantise_16bit(fs_units)


def ac_couple(x: np.ndarray, fs_true: float) -> np.ndarray:
    """The line-in's AC coupling: a first-order high-pass of time constant CARD_TAU_S (bilinear), from rest."""
    b, a = signal.bilinear([CARD_TAU_S, 0.0], [CARD_TAU_S, 1.0], fs=fs_true)
    return signal.lfilter(b, a, x)


def quantise_16bit(fs_units: np.ndarray) -> np.ndarray:
    """Round FS samples to 16-bit PCM codes c/2¹⁵ (c in −2¹⁵…2¹⁵−1), the values a PCM_16 file stores.

    The writer (libsndfile through soundfile) scales floats by 2¹⁵ and, for WAV, rounds down, so a
    value c/2¹⁵ is stored exactly. Codes made on the scale 2¹⁵−1 instead are written as c−1 when
    negative (c·2¹⁵/(2¹⁵−1) lies just below c) and as c when positive: a one-code step at every zero
    crossing, a square wave in step with the signal whose odd harmonics (2/(π·k·2¹⁵) FS) the
    output-only fit of a 2 s HC-03 record saw at 5–9 u with every part at its true value (χ²ᵣ 2.6;
    16.9 at 5e-5 FS of noise). FLAC rounds to nearest and shifted codes only past half scale.
    """
    return np.clip(np.round(fs_units * 32768.0), -32768.0, 32767.0) / 32768.0


#: the simulated circuit has settled (its L-C transient died away) this long after switch-on
SETTLE_S = 0.6


def record_output(u: Unit, seconds: float, gain_v_per_fs: float, rng) -> np.ndarray:
    """The unit's settled output recorded for ``seconds`` on the line-in (after its warm-up)."""
    _, _, out = simulate(u, SETTLE_S + CARD_WARMUP_S + seconds)
    return soundcard(out[int(SETTLE_S * FS_SIM):], seconds, gain_v_per_fs, rng)


def write_wav(path: Path, data: np.ndarray, names: list[str], gains: list[float], device: str,
              start: str, unit: str, subtype: str = "PCM_16", fmt: str | None = None) -> None:
    sf.write(str(path), data.T if data.ndim == 2 else data, 48_000, subtype=subtype, format=fmt)
    side = {
        "benchfit_sidecar": 1,
        "channels": [{"name": n} for n in names],
        "sample_rate_hz": 48_000,
        "device": device,
        "start_utc": start,
        "overflow_count": 0,
        "clip_count": 0,
        "calibration": dict(PROFILE, gain_v_per_fs=gains, gain_u_rel=[CARD_GAIN_U_REL] * len(gains)),
        "benchfit_version": "0.1.0",
        "unit": unit,
    }
    path.with_suffix(".json").write_text(json.dumps(side, indent=2) + "\n")


def write_scope_csv(path: Path, t: np.ndarray, cols: dict[str, np.ndarray], rate: float,
                    european: bool, serial: str) -> None:
    """A scope-style CSV: a preamble, a header with units, one row per sample."""
    step = 1.0 / rate
    if abs(FS_SIM / rate - round(FS_SIM / rate)) > 1e-9:
        raise ValueError(f"scope rate {rate} must divide the simulation rate {FS_SIM}")
    idx = np.arange(int(t[-1] * rate)) * int(round(FS_SIM / rate))
    idx = idx[idx < t.size]
    lines = []
    if european:
        sep = ";"
        lines += [f"Record;{serial}", f"Sample interval;{step:.6e}".replace(".", ","),
                  "Points;" + str(idx.size), ""]
        header = ["Time [ms]"] + [f"{k} [V]" for k in cols]
        lines.append(sep.join(header))
        for i in idx:
            row = [f"{t[i] * 1e3:.5f}"] + [f"{cols[k][i]:.5f}" for k in cols]
            lines.append(sep.join(v.replace(".", ",") for v in row))
    else:
        sep = ","
        lines += [f"# record,{serial}", f"# sample interval,{step:.6e}", ""]
        header = ["time (s)"] + [f"{k} (V)" for k in cols]
        lines.append(sep.join(header))
        for i in idx:
            lines.append(sep.join([f"{t[i]:.7f}"] + [f"{cols[k][i]:.5f}" for k in cols]))
    path.write_text("\n".join(lines) + "\n")


def scope_noise(rng, x, lsb=0.04):
    """8-bit-scope-like: noise plus quantisation to lsb volts."""
    return np.round((x + rng.normal(0, 0.3 * lsb, x.size)) / lsb) * lsb


def main() -> None:
    OUT.mkdir(exist_ok=True)
    rng = np.random.default_rng(20261201)
    gain = 4.0  # V per FS: an 8:1 attenuator into a line-in of 0.5 V peak full scale
    # --- the batch: HC-01 … HC-06, as-left, sound-card recordings of the output --------------
    batch = [
        Unit("HC-01", f_timer=50.03, duty=0.521, l_h=0.302, c_f=33.4e-6),
        Unit("HC-02", f_timer=49.96, duty=0.518, l_h=0.297, c_f=32.6e-6, r_wind=25.1),
        Unit("HC-04", f_timer=50.08, duty=0.524, l_h=0.305, c_f=33.9e-6, esr=0.9),
        Unit("HC-05", f_timer=49.92, duty=0.519, l_h=0.299, c_f=33.1e-6),
        Unit("HC-06", f_timer=50.11, duty=0.522, l_h=0.296, c_f=32.2e-6, r_wind=23.2),
    ]
    info = {}
    for k, u in enumerate(batch):
        x = record_output(u, 1.0, gain, rng)
        name = f"{u.serial.lower().replace('-', '')}_output.flac"
        write_wav(OUT / name, x, ["output"], [gain], "line-in (USB audio adapter)",
                  f"2026-11-2{k}T18:{10 + k:02d}:00Z", u.serial, subtype="PCM_16", fmt="FLAC")
        info[name] = u

    # --- HC-03: as found (timer 50.40 Hz, out of spec) and as left (trimmed to 50.01 Hz) -------
    hc03 = Unit("HC-03", f_timer=50.40, duty=0.527, l_h=0.304, c_f=33.6e-6, r_wind=24.6)
    for tag, f in (("asfound", 50.40), ("asleft", 50.01)):
        u = replace(hc03, f_timer=f)
        x = record_output(u, 2.0, gain, rng)
        write_wav(OUT / f"hc03_{tag}.wav", x, ["output"], [gain], "line-in (USB audio adapter)",
                  "2026-11-27T19:02:00Z" if tag == "asfound" else "2026-11-27T19:20:00Z", u.serial)
        info[f"hc03_{tag}.wav"] = u

    # --- HC-03: the timer output on the scope (European CSV dialect) -------------------------
    u = replace(hc03, f_timer=50.01)
    t = np.arange(int(0.12 * FS_SIM)) / FS_SIM
    timer = timer_wave(t, u)
    write_scope_csv(OUT / "hc03_timer_scope.csv", t, {"CH A": scope_noise(rng, timer)},
                    rate=24_000, european=True, serial="HC-03")

    # --- HC-03: two-channel capture, drive (filter input) and output, on the scope ------------
    t, drive, out = simulate(u, 1.2)
    keep = t >= 0.8
    t2 = t[keep] - 0.8
    write_scope_csv(OUT / "hc03_drive_output_scope.csv", t2,
                    {"drive": scope_noise(rng, drive[keep], 0.016), "output": scope_noise(rng, out[keep], 0.016)},
                    rate=10_000, european=False, serial="HC-03")

    # --- HC-05: ring-down of the bare L-C tank from a 2 Hz bench square (5 Ω source), scope ----
    u = replace(batch[3], r_load=1e6)
    t = np.arange(int(0.56 * FS_SIM)) / FS_SIM
    sq = np.where(np.mod(t + 0.05, 0.5) < 0.25, 0.5, -0.5)
    _, _, out = simulate(u, 0.56, source=sq, r_source=5.0)
    write_scope_csv(OUT / "hc05_ringdown_scope.csv", t, {"tank": scope_noise(rng, out, 0.008)},
                    rate=20_000, european=False, serial="HC-05")
    info["hc05_ringdown_scope.csv"] = u

    # --- HC-07: the failing unit: one choke is a wrong 47 mH part ----------------------------
    u = Unit("HC-07", f_timer=50.05, duty=0.523, l_h=0.150 + 0.047, c_f=33.2e-6, r_wind=17.0)
    x = record_output(u, 1.0, gain, rng)
    write_wav(OUT / "hc07_output.wav", x, ["output"], [gain], "line-in (USB audio adapter)",
              "2026-11-28T17:45:00Z", u.serial)
    info["hc07_output.wav"] = u

    warmup_samples()

    for name, u in info.items():
        f0 = 1 / (2 * math.pi * math.sqrt(u.l_h * u.c_f))
        print(f"{name:28s} {u.serial}: timer {u.f_timer:.2f} Hz, L {u.l_h * 1e3:.0f} mH, "
              f"C {u.c_f * 1e6:.1f} µF, f0 {f0:.2f} Hz")
    total = sum(p.stat().st_size for p in OUT.iterdir() if p.is_file())
    print(f"sample_captures/: {total / 1e6:.2f} MB")


# --- HC-08: a 10-minute warm-up run on the line-in, for 'benchfit drift' (own seed) ------------
WARM_FS = 8000        # the card at 8 kHz: a 10-minute mono FLAC stays small
WARM_S = 600.0
WARM_F = 50.02        # settled frequency, Hz
WARM_STEP = -600e-6   # fractional frequency offset at switch-on (the 555 runs slow while cold)
WARM_TAU_S = 75.0     # warm-up time constant, s
WARM_DRIFT = 30e-6 / 3600.0   # +30 ppm/h after warm-up (fractional per second)
WARM_WHITE = 1e-6     # white FM: σ_y(1 s) = 1e-6
WARM_FLICKER = 3e-7   # flicker FM floor of σ_y (about)
WARM_AMP_V = 1.70     # output peak amplitude (1.2 V rms), settling 0.4 % lower as it warms
WARM_H3 = 0.022       # third harmonic left by the L-C filter (THD about 2.2 %)


def _flicker(rng, n: int) -> np.ndarray:
    """Flicker (1/f) fractional-frequency noise by spectral shaping of white noise (seeded)."""
    spec = np.fft.rfft(rng.normal(size=n))
    f = np.fft.rfftfreq(n)
    f[0] = f[1]
    y = np.fft.irfft(spec / np.sqrt(f), n)
    return y / np.std(y)


def warm_law(t: np.ndarray) -> np.ndarray:
    """The deterministic part of HC-08's fractional frequency: exponential approach plus drift."""
    return WARM_STEP * np.exp(-t / WARM_TAU_S) + WARM_DRIFT * t


def warmup_samples() -> None:
    """``hc08_warmup.flac``: 10 min of HC-08 from switch-on, 8 kHz mono, with sidecar; and
    ``hc08_output.flac``: the 1 s as-left capture at 48 kHz made right after the run."""
    rng = np.random.default_rng(20261208)
    rate_y = 20.0  # fractional frequency sampled at 20 Hz, phase integrated and interpolated
    n_y = int(WARM_S * rate_y) + 1
    ty = np.arange(n_y) / rate_y
    # white FM of σ at 1 s: per-sample σ·√rate; flicker FM scaled so σ_y is about WARM_FLICKER
    y = (warm_law(ty) + WARM_WHITE * math.sqrt(rate_y) * rng.normal(size=n_y)
         + 2.6 * WARM_FLICKER * _flicker(rng, n_y))  # σ_y floor ≈ 0.38·std for 1/f over 4 decades
    cycles = np.concatenate([[0.0], np.cumsum(WARM_F * (1 + y[:-1]) / rate_y)])
    card = 1 + CARD_PPM * 1e-6  # the card's clock runs fast: its true rate is WARM_FS·card
    t = np.arange(int(WARM_S * WARM_FS)) / (WARM_FS * card)
    phase = 2 * math.pi * np.interp(t, ty, cycles)
    amp = WARM_AMP_V * (1 - 0.004 * (1 - np.exp(-t / WARM_TAU_S)))
    gain = 4.0
    x = (amp * (np.cos(phase) + WARM_H3 * np.cos(3 * phase + 0.4))) / gain
    # the line-in was connected before switch-on: its AC coupling starts from rest, the unit's output with it
    x = ac_couple(x, WARM_FS * card) + rng.normal(0, 2e-4, x.size)
    x = quantise_16bit(x)
    side = {
        "benchfit_sidecar": 1, "channels": [{"name": "output"}], "sample_rate_hz": WARM_FS,
        "device": "line-in (USB audio adapter)", "start_utc": "2026-11-29T09:00:00Z",
        "overflow_count": 0, "clip_count": 0,
        "calibration": dict(PROFILE, gain_v_per_fs=[gain], gain_u_rel=[CARD_GAIN_U_REL]),
        "benchfit_version": "0.1.0", "unit": "HC-08",
    }
    sf.write(str(OUT / "hc08_warmup.flac"), x, WARM_FS, subtype="PCM_16", format="FLAC")
    (OUT / "hc08_warmup.json").write_text(json.dumps(side, indent=2) + "\n")
    # as left, right after the run: 1 s at 48 kHz at the settled frequency
    f_end = WARM_F * (1 + float(warm_law(np.array([WARM_S]))[0]))
    n_warm = int(round(CARD_WARMUP_S * 48_000))  # the tone was on the line-in long before: steady state
    t = (np.arange(n_warm + 48_000) - n_warm) / (48_000 * card)
    a = WARM_AMP_V * 0.996
    x = a * (np.cos(2 * math.pi * f_end * t) + WARM_H3 * np.cos(3 * 2 * math.pi * f_end * t + 0.4)) / gain
    x = quantise_16bit(ac_couple(x, 48_000 * card)[n_warm:] + rng.normal(0, 2e-4, 48_000))
    write_wav(OUT / "hc08_output.flac", x, ["output"], [gain], "line-in (USB audio adapter)",
              "2026-11-29T09:10:05Z", "HC-08", subtype="PCM_16", fmt="FLAC")
    size = (OUT / "hc08_warmup.flac").stat().st_size
    print(f"hc08_warmup.flac             HC-08: {WARM_S:.0f} s warm-up at {WARM_FS} Hz, τ {WARM_TAU_S:g} s, "
          f"step {WARM_STEP * 1e6:+.0f} ppm, drift {WARM_DRIFT * 3.6e9:+.0f} ppm/h, {size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
