"""Coverage of a free-load two-channel case over many seeds, and where one seed's noise points.

    python3 scripts/coverage_freeload.py [SEEDS] [--case load-asymmetric] [--store FILE] [--draws N]

1. Fits the case of tests/fit/units_issue11.py (ngspice-simulated once, seeded noise) for seeds
   0 … SEEDS−1, one JSON line per seed in FILE (a rerun resumes: seeds already there are not
   fitted again), progress on stderr. Prints per reported value: mean of z = (reported − true)/u
   with its standard error sd/√n, sd(z) against the χ² band an honest sd stays in over n seeds
   (scipy.stats.chi2), the fraction of seeds with |z| > 3 (a normal z: 0.27 %) and seed 0's rank
   by |z| (1 = the largest).
2. The linearised Q direction (the fit's model, benchfit.model.filter.sampled_transfer): at the simulator's truth (L held, C, Rs, ESR, load and the channel
   gain ratio free, the ratio's prior row as in the fit) the whitened least-squares map from the
   harmonic phasors H_k = Y_k/X_k to Q (delta method, Moore–Penrose inverse for the Rs/load
   valley, along which Q does not move to first order). Each seed's noise is projected on it:
   t = δQ_lin/sd(δQ_lin), for the output channel's noise alone, the drive's alone and both,
   with f held at the true 50 Hz. Over ``--draws`` seeds (no fit needed) t must have sd ≈ 1;
   seed 0's t says whether its noise is itself a rare draw along Q. The correlation of t with
   the fitted z(Q) over the fitted seeds says how much of z(Q) that noise explains.
3. The same seed in the load-known case of the same circuit (``asymmetric-drive``: every
   two-channel case draws its noise from numpy.random.default_rng(seed), drive then output, so
   seed 0 is the same noise vector there): its z(Q) for seed 0.

Needs ngspice. Run it in the background, e.g.
    nice python3 scripts/coverage_freeload.py 200 > cov.txt 2> cov.log &
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.stats import chi2

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "fit"))

from benchfit.fit.common import MAX_ORDER, SIGNIFICANCE, complex_mult_cov, noise_rescaled, parts_of, subset  # noqa: E402
from benchfit.fit.common import whiten, whitening  # noqa: E402
from benchfit.fit.identify import numeric_jacobian  # noqa: E402
from benchfit.fit.marginal import figures_of  # noqa: E402
from benchfit.measurement.tone import fit_harmonics  # noqa: E402
from benchfit.model.filter import sampled_transfer, transfer  # noqa: E402
from units_issue11 import CASES, FS, capture_and_fix, fit_rows, simulate, truth  # noqa: E402

#: the noise the two-channel cases add (units_issue11.capture_and_fix): drive, output (V rms)
SIGMA = (0.02, 0.01)
F_TRUE = 50.0  # the simulated drive's frequency (fitspice.simulate_unit)


def fitted(store: Path, case, drive, out, seeds: range) -> dict[int, dict]:
    """z and the not-determined names per seed, from ``store``; the missing seeds are fitted and appended."""
    done: dict[int, dict] = {}
    if store.exists():
        for line in store.read_text().splitlines():
            row = json.loads(line)
            if row["case"] == case.name:
                done[row["seed"]] = row
    todo = [s for s in seeds if s not in done]
    t0 = time.time()
    with store.open("a") as fh:
        for i, seed in enumerate(todo):
            (r, z, und), = fit_rows(case, drive, out, [seed])
            q = r.derived["q_factor"]
            row = {"case": case.name, "seed": seed, "z": z, "und": und, "q": q.value, "u_q": q.stderr, "u_fit_q": q.u_fit}
            fh.write(json.dumps(row) + "\n")
            fh.flush()
            done[seed] = row
            el = time.time() - t0
            print(f"{case.name} seed {seed}: z(Q) {z.get('q_factor', math.nan):+.2f}  "
                  f"[{i + 1}/{len(todo)}, {el:.0f} s, {el / (i + 1):.1f} s/fit]", file=sys.stderr, flush=True)
    return {s: done[s] for s in seeds}


def table(rows: dict[int, dict]) -> None:
    n = len(rows)
    seeds = sorted(rows)
    names = sorted({k for r in rows.values() for k in r["z"]})
    und = sorted({u for r in rows.values() for u in r["und"]})
    band = [math.sqrt(chi2.ppf(p, n - 1) / (n - 1)) for p in (0.0005, 0.9995)]
    print(f"{n} seeds; not determined / not separated in some seed: {', '.join(und) or 'none'}")
    print(f"  (99.9 % band of an honest sd(z): {band[0]:.2f}…{band[1]:.2f}; a mean is a bias beyond "
          f"±3.3 s.e.; |z| > 3 in 0.27 % of normal draws)")
    print(f"  {'value':22s} {'mean z':>7s} {'s.e.':>5s} {'sd z':>5s} {'|z|>3':>6s} {'max|z|':>6s}  seed 0: z, rank")
    for k in names:
        a = np.array([rows[s]["z"].get(k, math.nan) for s in seeds])
        ok = np.isfinite(a)
        if not ok.any():
            continue
        b = a[ok]
        sd = float(np.std(b, ddof=1)) if b.size > 1 else 0.0
        z0 = a[0] if seeds[0] == 0 else math.nan
        rank = int(np.sum(np.abs(b) >= abs(z0))) if math.isfinite(z0) else 0
        print(f"  {k:22s} {np.mean(b):+7.2f} {sd / math.sqrt(b.size):5.2f} {sd:5.2f} "
              f"{np.mean(np.abs(b) > 3):6.1%} {np.max(np.abs(b)):6.2f}  {z0:+.2f}, {rank} of {b.size}")


class QDirection:
    """The linearised map from both channels' noise to Q at the truth (module docstring, item 2)."""

    def __init__(self, case, drive: np.ndarray, out: np.ndarray, figure: str = "q_factor") -> None:
        t = truth(case.unit)
        kmax = max(1, min(MAX_ORDER, int(math.floor((0.5 * FS - 1e-9) / F_TRUE))))
        self.kmax = kmax
        cap, _, _ = capture_and_fix(case, drive, out, 0)  # the fit's own noise estimate (seed 0) for W
        xn, yn = cap.samples[0], cap.samples[1]
        hx_all = noise_rescaled(fit_harmonics(xn, FS, F_TRUE, kmax), xn, FS)
        self.keep = hx_all.amplitudes > SIGNIFICANCE * hx_all.amplitudes_u
        hxn = subset(hx_all, self.keep)
        hyn = subset(noise_rescaled(fit_harmonics(yn, FS, F_TRUE, kmax), yn, FS), self.keep)
        self.hx = subset(fit_harmonics(drive, FS, F_TRUE, kmax), self.keep).phasors  # the clean phasors
        self.hk = subset(fit_harmonics(out, FS, F_TRUE, kmax), self.keep).phasors / self.hx
        self.cov_out = complex_mult_cov(1.0 / self.hx, hyn.phasor_cov)
        self.cov_drive = complex_mult_cov(-self.hk / self.hx, hxn.phasor_cov)
        self.w = whitening(self.cov_out + self.cov_drive)
        fk = hxn.orders * F_TRUE
        hk0 = self.hk
        free = ("C", "Rs", "Resr", "Rload")
        base = {k: float(t[k]) for k in ("L", "C", "Rs", "Resr", "Rload")}
        u_ratio = 0.03 / math.sqrt(3.0)  # the channel gain ratio's prior (fit.budgets.channel_gain_ratio)

        def unpack(p: np.ndarray) -> tuple[dict[str, float], float]:
            v = dict(base)
            v.update({k: base[k] * math.exp(x) for k, x in zip(free, p[:-1])})
            return v, 1.0 + float(p[-1])

        def residual(p: np.ndarray) -> np.ndarray:
            v, g = unpack(p)
            return np.append(whiten(self.w, hk0 - g * sampled_transfer(fk, parts_of(v), FS)), (g - 1.0) / u_ratio)

        p0 = np.zeros(len(free) + 1)
        jac = numeric_jacobian(residual, p0, step=1e-6)
        grad = numeric_jacobian(lambda p: np.array([figures_of(unpack(p)[0])[figure]]), p0, step=1e-6)[0]
        pinv = np.linalg.pinv(jac, rcond=1e-10)
        # δθ = −J⁺·[W δh; 0], so δQ = bᵀ·(W δh) with b the data rows of −J⁺ᵀ∇Q
        b = -(pinv.T @ grad)
        self.b = b[:-1]
        self.u_lin = float(math.sqrt(grad @ np.linalg.pinv(jac.T @ jac, rcond=1e-12) @ grad))
        wb = np.einsum("kji,kj->ki", self.w, self.b.reshape(-1, 2))  # Wᵀb per order: δQ = Σ (Wᵀb)·δh
        self.sd_out = float(math.sqrt(np.einsum("ki,kij,kj->", wb, self.cov_out, wb)))
        self.sd_drive = float(math.sqrt(np.einsum("ki,kij,kj->", wb, self.cov_drive, wb)))
        self.sd_data = float(np.linalg.norm(self.b))
        self.q_true = float(t[figure])
        # the clean (noise-free) samples' H_k against the model at the truth: a deterministic error of the
        # harmonic method, with the drive taken as band-limited (transfer: its harmonics above Nyquist fold
        # onto the kept orders) and as linear between samples (sampled_transfer, the fit's model)
        self.dq_clean = {name: float(self.b @ whiten(self.w, hk0 - h))
                         for name, h in (("band-limited drive, H(j2πkf)", transfer(fk, parts_of(base))),
                                         ("drive linear between samples", sampled_transfer(fk, parts_of(base), FS)))}

    def project(self, case, drive: np.ndarray, out: np.ndarray, seed: int) -> tuple[float, float, float]:
        """t of the output's noise, the drive's and both for one seed (each over its own sd)."""
        cap, _, _ = capture_and_fix(case, drive, out, seed)
        dn, on = cap.samples[0] - drive, cap.samples[1] - out
        dx = subset(fit_harmonics(dn, FS, F_TRUE, self.kmax), self.keep).phasors
        dy = subset(fit_harmonics(on, FS, F_TRUE, self.kmax), self.keep).phasors
        q_out = float(self.b @ whiten(self.w, dy / self.hx))
        q_drive = float(self.b @ whiten(self.w, -self.hk * dx / self.hx))
        return q_out / self.sd_out, q_drive / self.sd_drive, (q_out + q_drive) / math.hypot(self.sd_out, self.sd_drive)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("seeds", nargs="?", type=int, default=100)
    ap.add_argument("--case", default="load-asymmetric", choices=[c for c in CASES if CASES[c].load_free])
    ap.add_argument("--store", type=Path, default=Path(tempfile.gettempdir()) / "benchfit-coverage-freeload.jsonl")
    ap.add_argument("--draws", type=int, default=2000, help="seeds projected on the Q direction (no fit)")
    ap.add_argument("--compare", default="asymmetric-drive", help="load-known case with the same circuit ('' skips)")
    a = ap.parse_args()
    case = CASES[a.case]
    with tempfile.TemporaryDirectory(prefix="benchfit-cov-") as tmp:
        drive, out = simulate(Path(tmp), case)
        qd = QDirection(case, drive, out)
        print(f"== {a.case}: linearised Q direction at the truth (Q = {qd.q_true:.4g}; f held at {F_TRUE:g} Hz)")
        print(f"  sd of δQ_lin from the data noise {qd.sd_data:.4g} (output {qd.sd_out:.4g}, drive {qd.sd_drive:.4g});"
              f" with the gain prior row: u_lin(Q) = {qd.u_lin:.4g}")
        for what, dq in qd.dq_clean.items():
            print(f"  the clean samples' H_k against the model ({what}) at the truth move Q by {dq:+.3g}"
                  f" = {dq / qd.sd_data:+.3f} sd (linearised, f held)")
        ts = np.array([qd.project(case, drive, out, s) for s in range(max(a.draws, a.seeds))])
        for j, what in enumerate(("output noise", "drive noise", "both")):
            col = ts[:, j]
            print(f"  t({what:12s}) over {col.size} seeds: mean {np.mean(col):+.3f}, sd {np.std(col, ddof=1):.3f},"
                  f" |t|>3 {np.mean(np.abs(col) > 3):.2%}; seed 0: {col[0]:+.2f}"
                  f" (rank {int(np.sum(np.abs(col) >= abs(col[0])))} of {col.size} by |t|)")
        print(f"== {a.case}: fitted z over seeds 0…{a.seeds - 1} (store {a.store})")
        rows = fitted(a.store, case, drive, out, range(a.seeds))
        table(rows)
        zq = np.array([rows[s]["z"].get("q_factor", math.nan) for s in range(a.seeds)])
        ok = np.isfinite(zq)
        for j, what in enumerate(("output noise", "drive noise", "both")):
            r = float(np.corrcoef(ts[:a.seeds, j][ok], zq[ok])[0, 1])
            print(f"  corr(t({what}), z(Q)) over {int(ok.sum())} seeds: {r:+.3f}")
        resid = zq[ok] - ts[:a.seeds, 2][ok]
        print(f"  z(Q) − t(both): mean {np.mean(resid):+.3f}, sd {np.std(resid, ddof=1):.3f} "
              "(what the fit adds beyond the linearised noise at the true f)")
        err = np.array([(rows[s]["q"] - qd.q_true) / qd.sd_data for s in range(a.seeds)])
        uq = np.array([rows[s]["u_q"] or math.nan for s in range(a.seeds)])
        print(f"  fitted (Q − Q_true)/sd_lin: mean {np.nanmean(err):+.3f}, sd {np.nanstd(err, ddof=1):.3f}; seed 0 "
              f"{err[0]:+.2f}; reported u(Q)/sd_lin: median {np.nanmedian(uq) / qd.sd_data:.3f}")
        if a.compare:
            other = CASES[a.compare]
            d2, o2 = simulate(Path(tmp), other)
            same = bool(np.allclose(d2, drive) and np.allclose(o2, out))
            (r2, z2, _), = fit_rows(other, d2, o2, [0])
            q2 = r2.derived["q_factor"]
            print(f"== {a.compare} (load known; same circuit: {same}; same noise draw for every seed): seed 0 z(Q) "
                  f"{z2.get('q_factor', math.nan):+.2f} (u(Q) {q2.stderr:.3g}, its noise part {q2.u_fit:.3g}), "
                  f"(Q − Q_true)/sd_lin {(q2.value - qd.q_true) / qd.sd_data:+.2f}")


if __name__ == "__main__":
    main()
