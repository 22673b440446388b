"""Simulated hum-check units with the losses real boxes have (ngspice), and the z-scores of a fit.

Shared by tests/fit/test_honest_units.py and scripts/zscores_units.py. ngspice (an independent
circuit simulator) is run once per circuit; the seeds only change the noise added here.

Cases (issue 11):

* ``coupled-chokes`` — two 150 mH chokes on one core, coupling k = 0.55: effective L =
  0.3 + 2·0.55·0.15 = 0.465 H, not the 0.3 H on their labels. Two-channel capture; C measured
  (33 µF ± 2 %) and the load (10 kΩ ± 1 %) fixed, L fitted.
* ``core-loss`` — a 2 kΩ resistance across the chokes (iron loss). Two-channel, L = 300 mH ± 10 %.
* ``asymmetric-drive`` — the timer's output resistance is 25 Ω high and 8 Ω low; the drive probe
  sits at the timer pin, two-channel, L ± 10 %.
* ``scope-8bit`` — both channels quantised to 8 bits (20 V and 4 V full range) and the output
  channel's gain 2.5 % low (the scope's per-channel gain error).
* ``sound-card`` — output only, through an AC-coupled input (τ = 50 ms, known from the
  profile), 16-bit full scale, FS units; L ± 10 %, drive duty given.
* ``asymmetric-output-only`` — the asymmetric timer of ``asymmetric-drive`` captured like
  ``sound-card`` (output only): the one-channel model's ideal rectangular drive is wrong here, and
  the fit must find the switched source (benchfit.fit.asymmetry); its truth r_high − r_low = 17 Ω.
* ``core-loss-output-only`` — the core-loss unit (Rp = 2 kΩ across the chokes) captured like
  ``sound-card`` (output only).
* ``offset-levels`` / ``offset-levels-output-only`` — the asymmetric timer whose levels are not the
  rails: low 0.15 V, high 1.6 V below the 12 V supply (a bipolar timer's VOL and VOH, NE555
  datasheet), two-channel (drive probed at the timer pin) and output only;
  ``offset-levels-symmetric-output-only`` — the same levels behind 15 Ω high and low, output only.
  No fit models the levels (they only scale the output's harmonics, benchfit.model.switched); the
  symmetric unit is a time-invariant one like ``sound-card`` and, with the same capture noise,
  meets the same seed-0 draw on Q (tests/fit/test_honest_units.py's xfail).

Free-load cases (tests/fit/test_honest_units_load.py): two-channel, the user gives L = 300 mH ± 10 %
and nothing else, so the load is unknown and integrated out:

* ``load-default`` — the default unit (Rs 12 Ω, ESR 0.8 Ω, a 10 kΩ load);
* ``load-asymmetric`` — the unit of ``asymmetric-drive`` (same circuit, same noise per seed);
* ``load-open`` — no load at all (1 GΩ);
* ``load-heavy-calibrated`` — a 220 Ω load, both inputs calibrated to 0.1 %.

Every two-channel case draws its noise the same way from ``numpy.random.default_rng(seed)``
(drive first, then output), so one seed is one noise draw in all of them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchfit.capture.capture import Capture, InputCalibration
from benchfit.fit.lowpass import fit_lowpass
from benchfit.fit.marginal import figures_of
from benchfit.model.filter import LowpassParts, second_order

from fitspice import Unit, simulate_unit

FS = 20000.0
KEEP = 0.3


@dataclass(frozen=True)
class Case:
    name: str
    unit: Unit
    edge: float = 50e-6
    #: the user gives L ± 10 % and nothing else: the load is unknown (two-channel)
    load_free: bool = False
    #: both inputs calibrated to 0.1 % (otherwise the channel gain ratio is 1 ± 3 %)
    calibrated: bool = False


#: a bipolar timer's output levels: low 0.15 V above ground, high 1.6 V below the supply (NE555 datasheet,
#: TI SLFS022A, electrical characteristics: VOL 0.1 V typ at IOL = 10 mA, 0.4 V at 50 mA; VOH 13.3 V typ at
#: VCC = 15 V, IOH = −100 mA, i.e. VCC − 1.7 V), with the asymmetric source resistance above ...
_OFFSET = Unit(r_high=25.0, r_low=8.0, Resr=1.5, v_low=0.15, v_drop=1.6)
#: ... and with one resistance high and low
_OFFSET_SYMMETRIC = Unit(r_high=15.0, r_low=15.0, v_low=0.15, v_drop=1.6)

CASES = {
    "coupled-chokes": Case("coupled-chokes", Unit(k=0.55)),
    "core-loss": Case("core-loss", Unit(Rp=2000.0)),
    "asymmetric-drive": Case("asymmetric-drive", Unit(r_high=25.0, r_low=8.0, Resr=1.5)),
    "scope-8bit": Case("scope-8bit", Unit()),
    "sound-card": Case("sound-card", Unit(), edge=2e-6),
    "asymmetric-output-only": Case("asymmetric-output-only", Unit(r_high=25.0, r_low=8.0, Resr=1.5), edge=2e-6),
    "core-loss-output-only": Case("core-loss-output-only", Unit(Rp=2000.0), edge=2e-6),
    "offset-levels": Case("offset-levels", _OFFSET),
    "offset-levels-output-only": Case("offset-levels-output-only", _OFFSET, edge=2e-6),
    "offset-levels-symmetric-output-only": Case("offset-levels-symmetric-output-only", _OFFSET_SYMMETRIC, edge=2e-6),
    "load-default": Case("load-default", Unit(), load_free=True),
    "load-asymmetric": Case("load-asymmetric", Unit(r_high=25.0, r_low=8.0, Resr=1.5), load_free=True),
    "load-open": Case("load-open", Unit(Rload=1e9), load_free=True),
    "load-heavy-calibrated": Case("load-heavy-calibrated", Unit(Rload=220.0), load_free=True, calibrated=True),
}
#: the cases captured on the output alone, like a sound card (AC-coupled, 16-bit, FS units)
OUTPUT_ONLY = ("sound-card", "asymmetric-output-only", "core-loss-output-only", "offset-levels-output-only",
               "offset-levels-symmetric-output-only")


def simulate(tmp_path, case: Case):
    return simulate_unit(tmp_path, case.unit, edge=case.edge, keep=KEEP, tag=case.name)


def truth(u: Unit, output_only: bool = False, duty: float = 0.52) -> dict[str, float]:
    """The true parts and figures. With the drive not measured (output only), Rs holds the timer's
    output resistance too (DESIGN.md, model "lc-lowpass"): its time average D·R_high + (1 − D)·R_low."""
    rs = u.Rs + (duty * u.r_high + (1 - duty) * u.r_low if output_only else 0.0)
    p = LowpassParts(u.L, u.C, rs, u.Resr, u.Rload, u.Rp if u.Rp is not None else math.inf)
    out = {"L": u.L, "C": u.C, "Rs": rs, "Resr": u.Resr, "Rload": u.Rload,
           "Rp": u.Rp if u.Rp is not None else math.inf, **second_order(p)}
    out["series_loss_ohm"] = rs + u.Resr
    # 2·L·α, the series resistance of the same damping (fit.marginal.figures_of): Rs + ESR + L/(C·Rload)
    # without core loss; with Rp the core loss's L/(C·Rp) enters divided by 1 + Rs/Rp (its current flows
    # through Rs too), so the plain sum would be 0.3 % off for the core-loss unit
    out["total_loss_ohm"] = figures_of(out)["total_loss_ohm"]
    if output_only:  # the switched source's asymmetry (the drive probe of a two-channel fit sits after it)
        out["drive_asymmetry_ohm"] = u.r_high - u.r_low
    return out


def capture_and_fix(case: Case, drive: np.ndarray, out: np.ndarray, seed: int, noise: float = 1.0):
    """A noisy capture of the simulated unit and the fit options a user would give (``noise`` scales the
    added noise: 0 gives the same capture without it, for scripts/coverage_units.py)."""
    rng = np.random.default_rng(seed)
    u = case.unit
    if case.name in OUTPUT_ONLY:
        from scipy.signal import bilinear, lfilter

        tau = 0.05
        b, a = bilinear([tau, 0.0], [tau, 1.0], FS)  # the input's high-pass (scipy), in steady state:
        x = np.tile(out - out.mean(), 6)  # run over 2 s of the periodic output first
        x = lfilter(b, a, x)[-out.size:]
        x = x * 0.5 / float(np.max(np.abs(x))) + noise * rng.normal(0.0, 1e-4, x.size)
        x = np.round(x * 32767) / 32767
        cap = Capture(x[None, :], FS, ("output",), ("FS",), source=f"{case.name}.wav",
                      calibration=InputCalibration(coupling_tau_s=tau))
        return cap, {"L": (0.3, 0.03)}, 0.52
    d = drive + noise * rng.normal(0.0, 0.02, drive.size)
    o = out + noise * rng.normal(0.0, 0.01, out.size)
    if case.name == "scope-8bit":
        o = 0.975 * o
        d = np.round(d / (20.0 / 256)) * (20.0 / 256)
        o = np.round(o / (4.0 * 16 / 256)) * (4.0 * 16 / 256)  # 64 V range: the 46 V peak fits
    cal = (InputCalibration(gain_v_per_fs=(1.0, 1.0), gain_u_rel=(1e-3, 1e-3), profile="bench")
           if case.calibrated else InputCalibration())
    cap = Capture(np.vstack([d, o]), FS, ("drive", "output"), ("V", "V"), source=f"{case.name}.csv", calibration=cal)
    if case.load_free:
        return cap, {"L": (0.3, 0.03)}, None
    if case.name == "coupled-chokes":
        return cap, {"C": (u.C, 0.02 * u.C), "Rload": (u.Rload, 0.01 * u.Rload)}, None
    return cap, {"L": (0.3, 0.03), "Rload": (u.Rload, 0.01 * u.Rload)}, None


def zscores(result, t: dict[str, float]) -> tuple[dict[str, float], list[str]]:
    """z = (reported − true)/u for every reported part and derived value, and the names reported
    as not determined (stderr None). Rp is compared as a conductance 1/Rp (its truth may be ∞)."""
    z: dict[str, float] = {}
    undetermined: list[str] = []
    for name, p in result.parameters.items():
        if p.fixed:
            continue
        if p.stderr is None:
            undetermined.append(name)
            continue
        if name == "Rp":
            g, ug = 1.0 / p.value, p.stderr / p.value ** 2
            z[name] = (g - (0.0 if math.isinf(t["Rp"]) else 1.0 / t["Rp"])) / ug
        else:
            z[name] = (p.value - t[name]) / p.stderr
    for name, d in result.derived.items():
        if d.value is None or name not in t:
            continue
        if d.stderr is None:
            undetermined.append(name)
            continue
        z[name] = (d.value - t[name]) / d.stderr
    return z, undetermined


def run_case(tmp_path, name: str, seeds, times: list[float] | None = None):
    """Simulate the case once and fit it for every seed: (result, z, not determined) per seed;
    the fits' wall times (s) go to ``times`` when given."""
    case = CASES[name]
    drive, out = simulate(tmp_path, case)
    return fit_rows(case, drive, out, seeds, times)


def fit_rows(case: Case, drive: np.ndarray, out: np.ndarray, seeds, times: list[float] | None = None):
    """Fit the simulated unit once per noise seed: (result, z, not determined) per seed; the fits'
    wall times (s) go to ``times`` when given."""
    import time

    name = case.name
    t = truth(case.unit, output_only=name in OUTPUT_ONLY)
    rows = []
    for seed in seeds:
        cap, fix, duty = capture_and_fix(case, drive, out, seed)
        t0 = time.perf_counter()
        r = fit_lowpass(cap, fix=fix, drive_duty=duty)
        if times is not None:
            times.append(time.perf_counter() - t0)
        z, und = zscores(r, t)
        rows.append((r, z, und))
    return rows
