"""Coverage of the output-only fit's uncertainty over many noise seeds (issue 11); not a test.

    python3 scripts/coverage_units.py CASE SEEDS [--log FILE] [--converge S,S,...] [--points N]

CASE is one of the output-only cases of tests/fit/units_issue11.py (``sound-card``,
``core-loss-output-only``, ``asymmetric-output-only``). ngspice (an independent circuit simulator)
runs once per case and its output is cached (``$TMPDIR/benchfit-coverage``); each seed only adds
the capture's noise and runs the real fit path (benchfit.fit.lowpass.fit_lowpass, one channel).

Per seed it logs (one JSON line) z = (reported − true)/u of every reported value, and the
*linearised noise draw* along Q and along the ESR: the seed's noise in the whitened output phasors,
ε = W(Y_noisy − Y_clean) (Y_clean: the same capture without noise, at the same fundamental),
projected on the direction a linearised fit (C, Rs, ESR and the phase free; L and the load held at
the truth, the gain solved) turns into Q (or ln ESR), in units of its standard deviation. Over the
seeds the draw is N(0, 1) by construction; a seed whose z is large because of its noise has a draw
of about the same size.

At the end: per value mean z, sd z (with the χ² 99.9 % band of an honest sd, scipy.stats.chi2),
the fraction with |z| > 3 (0.27 % for a normal z) and seed 0's rank by |z|.

``--draws N``: seed 0's shift along the same two directions against N − 1 other seeds' noise, so that
its size in σ does not rest on the capture's own noise estimate (:func:`true_noise_draws`).

``--converge`` (grid convergence): for the given seeds, the same posterior the fit marginalises
(benchfit.fit.marginal) evaluated on a brute-force dense grid over the nuisance axes (N points per
axis, over the posterior's ±8 sd clipped to the prior range; profile over the other parts as the
code does), against the fit's own adaptive grid: mean and sd of Q, the decay rate and total_loss_ohm.
"""

from __future__ import annotations

import argparse
import inspect
import json
import math
import os
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
from scipy.stats import chi2

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "fit"))
sys.path.insert(0, str(ROOT / "tests"))  # the shared ngspice runner (tests/ngspice_run.py)

import benchfit.fit.marginal as marginal  # noqa: E402
import benchfit.fit.onechannel as onechannel  # noqa: E402
from benchfit.fit.common import whiten  # noqa: E402
from benchfit.fit.identify import fit_log_parameters, numeric_jacobian  # noqa: E402
from benchfit.fit.lowpass import fit_lowpass  # noqa: E402
from benchfit.fit.marginal import figures_of  # noqa: E402
from benchfit.measurement.tone import fit_harmonics  # noqa: E402

from units_issue11 import CASES, OUTPUT_ONLY, capture_and_fix, simulate, truth, zscores  # noqa: E402

WATCH = ("q_factor", "decay_rate_per_s", "total_loss_ohm", "natural_frequency_hz", "C")


def waves(name: str) -> tuple[np.ndarray, np.ndarray]:
    """The case's ngspice drive and output, simulated once and cached."""
    cache = Path(os.environ.get("TMPDIR", tempfile.gettempdir())) / "benchfit-coverage"
    cache.mkdir(exist_ok=True)
    f = cache / f"{name}.npz"
    if not f.exists():
        with tempfile.TemporaryDirectory() as tmp:
            drive, out = simulate(Path(tmp), CASES[name])
        np.savez(f, drive=drive, out=out)
    d = np.load(f)
    return d["drive"], d["out"]


class Recorder:
    """Wraps fit.marginal.marginalise inside the one-channel fit to keep its inputs (the residual closure)."""

    def __init__(self) -> None:
        self.calls: list[tuple[tuple, dict]] = []
        self.orig = onechannel.marginalise

    def __call__(self, *args, **kwargs):
        self.calls.append((args, kwargs))
        return self.orig(*args, **kwargs)


def noise_draw(residual, cap_clean, t: dict[str, float]) -> dict[str, float]:
    """Seed's noise projected on the linearised directions of Q and ln ESR, in standard deviations."""
    env = inspect.getclosurevars(residual).nonlocals
    wy, w = env["wy"], env["w"]
    mp = inspect.getclosurevars(env["model_phasors"]).nonlocals
    k, f = mp["k"], float(mp["f"])
    y = np.asarray(cap_clean.samples[0], dtype=float)
    h = fit_harmonics(y, cap_clean.sample_rate, f, int(k.max()))
    yc = h.phasors[:k.size]
    tau = cap_clean.calibration.coupling_tau_s
    if tau:
        jwt = 2j * math.pi * k * f * tau
        yc = yc * (1.0 + jwt) / jwt
    eps = wy - whiten(w, yc)
    start = {"L": t["L"], "C": t["C"], "Rs": t["Rs"], "Resr": t["Resr"], "Rload": t["Rload"]}
    # the phase at the truth: a 1-parameter fit with the parts held (the gain is solved inside residual)
    v, _, _, _, _, _ = fit_log_parameters(residual, start, (), start, {"phase": (0.0, -4 * math.pi, 4 * math.pi)})
    best = (math.inf, 0.0)
    for ph in np.linspace(-math.pi, math.pi, 73)[:-1]:
        r = residual({**start, "phase": float(ph), "duty": 0.52})
        if float(r @ r) < best[0]:
            best = (float(r @ r), float(ph))
    v, _, _, _, _, _ = fit_log_parameters(residual, start, (), start, {"phase": (best[1], -4 * math.pi, 4 * math.pi)})
    names = ("C", "Rs", "Resr", "phase")
    x0 = np.array([math.log(t["C"]), math.log(t["Rs"]), math.log(t["Resr"]), v["phase"]])

    def vals(x):
        return {"L": t["L"], "Rload": t["Rload"], "C": math.exp(x[0]), "Rs": math.exp(x[1]),
                "Resr": math.exp(x[2]), "phase": float(x[3])}

    jac = numeric_jacobian(lambda x: residual(vals(x)), x0, step=1e-6)
    cov = np.linalg.inv(jac.T @ jac)
    delta = -cov @ jac.T @ eps  # the noise's shift of the linearised estimate: r ≈ ε + J·δ is least at δ = −(JᵀJ)⁻¹Jᵀε
    out = {}
    gq = numeric_jacobian(lambda x: np.array([figures_of(vals(x))["q_factor"]]), x0, step=1e-6)[0]
    out["draw_q"] = float(gq @ delta / math.sqrt(gq @ cov @ gq))
    i = names.index("Resr")
    out["draw_ln_esr"] = float(delta[i] / math.sqrt(cov[i, i]))
    # the part of ε in the span of the fit's directions: χ² with 4 degrees of freedom for pure noise
    out["chi2_span"] = float(delta @ (jac.T @ jac) @ delta)
    out["lin_u_q"] = float(math.sqrt(gq @ cov @ gq))
    # the whitened directions whose dot product with ε gives δQ and δ ln ESR (for true_noise_draws)
    out["_dirs"] = (-(jac @ cov @ gq), -(jac @ cov[:, i]), w, k, f, yc)
    return out


def true_noise_draws(name: str, drive, out, dirs, n: int) -> dict[str, float]:
    """Seed 0's shift of Q and ln ESR against the same linear functionals over ``n`` other noise seeds.

    The functionals (seed 0's whitening and directions, :func:`noise_draw`) are applied to each seed's
    phasors at seed 0's fundamental; their spread over the seeds is the noise's true standard deviation
    along them, whatever the fit's own noise estimate says. Returns seed 0's standardised shifts and the
    ratio of that true sd to the one the whitening implies (1 when the capture's noise estimate is right).
    """
    aq, ae, w, k, f, yc = dirs
    case = CASES[name]
    shifts = []
    for seed in range(n):
        cap, _, _ = capture_and_fix(case, drive, out, seed)
        y = np.asarray(cap.samples[0], dtype=float)
        yk = fit_harmonics(y, cap.sample_rate, f, int(k.max())).phasors[:k.size]
        tau = cap.calibration.coupling_tau_s
        if tau:
            jwt = 2j * math.pi * k * f * tau
            yk = yk * (1.0 + jwt) / jwt
        eps = whiten(w, yk) - whiten(w, yc)
        shifts.append((float(aq @ eps), float(ae @ eps)))
    a = np.array(shifts)
    m, sd = a[1:].mean(axis=0), a[1:].std(axis=0, ddof=1)
    return {"seed0_q_sigma": float((a[0, 0] - m[0]) / sd[0]), "seed0_ln_esr_sigma": float((a[0, 1] - m[1]) / sd[1]),
            "q_sd_over_whitened": float(sd[0] / math.sqrt(aq @ aq)),
            "ln_esr_sd_over_whitened": float(sd[1] / math.sqrt(ae @ ae)), "seeds": n - 1}


def run_seed(name: str, drive, out, seed: int, t: dict[str, float], rec: Recorder):
    case = CASES[name]
    cap, fix, duty = capture_and_fix(case, drive, out, seed)
    rec.calls.clear()
    t0 = time.perf_counter()
    r = fit_lowpass(cap, fix=fix, drive_duty=duty)
    dt = time.perf_counter() - t0
    z, und = zscores(r, t)
    row: dict = {"seed": seed, "seconds": round(dt, 2), "z": z, "undetermined": und,
                 "value": {k: r.derived[k].value for k in WATCH if k in r.derived} |
                 {k: r.parameters[k].value for k in WATCH if k in r.parameters},
                 "u": {k: r.derived[k].stderr for k in WATCH if k in r.derived} |
                 {k: r.parameters[k].stderr for k in WATCH if k in r.parameters}}
    if rec.calls and name in OUTPUT_ONLY:
        clean, _, _ = capture_and_fix(case, drive, out, seed, noise=0.0)
        try:
            row.update(noise_draw(rec.calls[0][0][0], clean, t))
            row["dirs"] = row.pop("_dirs")
        except Exception as e:  # noqa: BLE001 - a diagnostic; the z row stays
            row["draw_error"] = repr(e)
    return r, row, (rec.calls[0] if rec.calls else None)


def summary(rows: list[dict], seed0: int = 0) -> None:
    n = len(rows)
    names = sorted({k for r in rows for k in r["z"]})
    lo, hi = (math.sqrt(chi2.ppf(p, n - 1) / (n - 1)) for p in (0.0005, 0.9995)) if n > 2 else (0.0, 0.0)
    print(f"{n} seeds; honest sd(z) 99.9 % band {lo:.2f}…{hi:.2f}; a normal z is beyond 3 in 0.27 %")
    for k in names:
        a = np.array([r["z"][k] for r in rows if k in r["z"]])
        s0 = next((r["z"][k] for r in rows if r["seed"] == seed0 and k in r["z"]), math.nan)
        rank = int(np.sum(np.abs(a) > abs(s0))) + 1 if math.isfinite(s0) else 0
        print(f"  {k:22s} mean {np.mean(a):+5.2f}  sd {np.std(a, ddof=1):4.2f}  |z|>3 {np.mean(np.abs(a) > 3):6.1%}"
              f"  max|z| {np.max(np.abs(a)):4.2f}  seed {seed0}: z {s0:+5.2f}, rank {rank} of {a.size}")
    for k in ("draw_q", "draw_ln_esr"):
        a = np.array([r[k] for r in rows if k in r])
        if a.size:
            s0 = next((r[k] for r in rows if r["seed"] == seed0 and k in r), math.nan)
            rank = int(np.sum(np.abs(a) > abs(s0))) + 1
            print(f"  {k:22s} mean {np.mean(a):+5.2f}  sd {np.std(a, ddof=1):4.2f}  seed {seed0}: {s0:+5.2f}, "
                  f"rank {rank} of {a.size}")
    zq = np.array([r["z"].get("q_factor", math.nan) for r in rows if "draw_q" in r])
    dq = np.array([r["draw_q"] for r in rows if "draw_q" in r])
    ok = np.isfinite(zq)
    if ok.sum() > 2:
        print(f"  correlation of z(Q) with the linearised draw along Q: {np.corrcoef(zq[ok], dq[ok])[0, 1]:.3f}")


def dense(call, points: int, marg_now) -> marginal.Marginal:
    """The same posterior on a brute-force grid: one pass, ``points`` per axis over ±8 sd of the fit's own
    posterior (clipped to the prior range); a share axis (the prior's split, hardly seen) over its whole range."""
    args, kwargs = call
    residual, values, fixed, nuis, extra, part_names = args[:6]
    w, pts = marg_now.weights, marg_now.points
    new = []
    for a, q in enumerate(nuis):
        m = float(w @ pts[:, a])
        sd = math.sqrt(max(float(w @ (pts[:, a] - m) ** 2), 0.0))
        if q.variable == "share":
            new.append(replace(q, points=max(points // 5, 6)))
        else:
            # at least 6 of the fit's finest steps either side: a grid too coarse may understate the sd
            gaps = np.diff(np.unique(pts[:, a]))
            half = max(8 * sd, 6 * float(gaps.min()) if gaps.size else 0.0)
            new.append(replace(q, lo=max(q.lo, m - half), hi=min(q.hi, m + half), points=points))
    rounds = marginal._ROUNDS
    marginal._ROUNDS = 1
    try:
        return marginal.marginalise(residual, values, fixed, tuple(new), extra, part_names, *args[6:], **kwargs)
    finally:
        marginal._ROUNDS = rounds


def converge(name: str, seeds: list[int], points: int, drive, out, t) -> None:
    rec = Recorder()
    onechannel.marginalise = rec
    for seed in seeds:
        r, row, call = run_seed(name, drive, out, seed, t, rec)
        args = call[0]
        t0 = time.perf_counter()
        now = marginal.marginalise(*args, **call[1])
        t_now = time.perf_counter() - t0
        print(f"seed {seed}: fit's grid {now.points.shape[0]} points ({t_now:.1f} s), draw_q {row.get('draw_q', 0):+.2f}")
        for npt in (points, int(round(points * 1.5))):
            t0 = time.perf_counter()
            d = dense(call, npt, now)
            td = time.perf_counter() - t0
            print(f"  dense {npt}/axis: {d.points.shape[0]} points ({td:.0f} s)")
            for k in ("q_factor", "decay_rate_per_s", "total_loss_ohm", "Resr"):
                tr = t[k]
                print(f"    {k:18s} fit grid {now.mean[k]:.7g} ± {now.u(k):.3g} (spread {now.u_spread[k]:.3g})"
                      f"  dense {d.mean[k]:.7g} ± {d.u(k):.3g} (spread {d.u_spread[k]:.3g})"
                      f"  z fit {(now.mean[k] - tr) / now.u(k):+.2f}  z dense {(d.mean[k] - tr) / d.u(k):+.2f}")
        sys.stdout.flush()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("case", choices=OUTPUT_ONLY)
    ap.add_argument("seeds", type=int)
    ap.add_argument("--log", type=Path)
    ap.add_argument("--converge", default="")
    ap.add_argument("--points", type=int, default=41)
    ap.add_argument("--draws", type=int, default=0, help="seed 0's noise against this many noise-only seeds")
    a = ap.parse_args()
    drive, out = waves(a.case)
    t = truth(CASES[a.case].unit, output_only=True)
    if a.converge:
        converge(a.case, [int(s) for s in a.converge.split(",")], a.points, drive, out, t)
        return
    rec = Recorder()
    onechannel.marginalise = rec
    rows = []
    done = set()
    if a.log and a.log.exists():  # resume
        rows = [json.loads(x) for x in a.log.read_text().splitlines() if x.strip()]
        done = {r["seed"] for r in rows}
    for seed in range(a.seeds):
        if seed in done:
            continue
        _, row, _ = run_seed(a.case, drive, out, seed, t, rec)
        if seed == 0 and a.draws and "dirs" in row:
            print(f"seed 0 against {a.draws - 1} noise-only seeds: {true_noise_draws(a.case, drive, out, row['dirs'], a.draws)}",
                  flush=True)
        row.pop("dirs", None)
        rows.append(row)
        if a.log:
            with a.log.open("a") as fh:
                fh.write(json.dumps(row) + "\n")
        print(f"seed {seed}: {row['seconds']} s  z(Q) {row['z'].get('q_factor', math.nan):+.2f}"
              f"  draw_q {row.get('draw_q', math.nan):+.2f}", flush=True)
    summary(sorted(rows, key=lambda r: r["seed"]))


if __name__ == "__main__":
    main()
