"""Print z-score spreads per simulated unit (issue 11): python3 scripts/zscores_units.py [SEEDS] [CASE…].

For each case of tests/fit/units_issue11.py (ngspice-simulated, seeded noise; CASE… picks cases by
name or name prefix, e.g. ``load-`` for the free-load ones of tests/fit/test_honest_units_load.py) and each reported
value: max |z|, sd and mean of z = (reported − true)/u over the seeds, and what was reported as
not determined, then per case the largest |z|, the mean fit time per seed and the range of sd(z) against the χ² band an
honest sd would stay in (scipy.stats.chi2). Needs ngspice.
"""

from __future__ import annotations

import math
import sys
import tempfile
from pathlib import Path

import numpy as np
from scipy.stats import chi2

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "fit"))
sys.path.insert(0, str(ROOT / "tests"))  # the shared ngspice runner

from units_issue11 import CASES, run_case  # noqa: E402


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 10
    picks = sys.argv[2:]
    names = [c for c in CASES if not picks or any(c == p or c.startswith(p) for p in picks)]
    if not names:
        sys.exit(f"no case matches {' '.join(picks)} — cases: {', '.join(CASES)}")
    with tempfile.TemporaryDirectory(prefix="benchfit-z-") as tmp:
        for name in names:
            times: list[float] = []
            rows = run_case(Path(tmp), name, range(n), times)
            per_fit = float(np.mean(times)) if times else math.nan
            zs: dict[str, list[float]] = {}
            for _, z, _ in rows:
                for k, v in z.items():
                    zs.setdefault(k, []).append(v)
            und = sorted({u for _, _, us in rows for u in us})
            print(f"{name} ({n} seeds); not determined / not separated in some seed: {', '.join(und) or 'none'}")
            worst = (0.0, "")
            sds = []
            for k, v in zs.items():
                a = np.asarray(v)
                sd = float(np.std(a, ddof=1)) if a.size > 1 else 0.0
                sds.append(sd)
                if np.max(np.abs(a)) > worst[0]:
                    worst = (float(np.max(np.abs(a))), k)
                print(f"  {k:22s} max|z| {np.max(np.abs(a)):5.2f}   sd {sd:5.2f}"
                      f"   mean {np.mean(a):+5.2f}   (n = {a.size})")
            band = [math.sqrt(chi2.ppf(p, n - 1) / (n - 1)) for p in (0.0005, 0.9995)] if n > 1 else [0.0, 0.0]
            print(f"  => max|z| {worst[0]:.2f} ({worst[1]}); sd(z) {min(sds, default=0):.2f}…{max(sds, default=0):.2f}"
                  f" (99.9 % band of an honest sd for {n} seeds: {band[0]:.2f}…{band[1]:.2f}; an sd below it is"
                  " expected where a Type B term constant over the seeds, e.g. a fixed part's tolerance, dominates u);"
                  f" fit {per_fit:.2f} s per seed")


if __name__ == "__main__":
    main()
