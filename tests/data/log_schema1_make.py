"""Make tests/data/log_schema1.sqlite with benchfit's schema-1 store (commit 68bc218)."""
import sys
from benchfit.log.store import SCHEMA_VERSION, append_run
assert SCHEMA_VERSION == 1
db = sys.argv[1]

def meas(f, thd, vrms, name="hc%02d.wav"):
    return {"file": name, "channels": [{"name": "output", "unit": "V", "frequency_hz": f, "frequency_u_hz": 0.003,
            "amplitude": vrms * 2 ** 0.5, "vdc": 0.0, "vrms": vrms, "vpp": 2 * 2 ** 0.5 * vrms, "thd_pct": thd,
            "thd_n_pct": thd + 0.1, "sinad_db": 30.0, "extra": {"thd_u_pct": 0.02, "vrms_u": 0.004}}]}

for i, (f, thd, vrms) in enumerate([(50.012, 3.1, 1.27), (49.93, 4.2, 1.31), (50.31, 3.8, 1.22)], start=1):
    wav = f"hc{i:02d}.wav"
    m = meas(f, thd, vrms, wav)
    dec = [{"quantity": "frequency_hz", "channel": "output", "label": "frequency", "value": f, "expanded_u": 0.006,
            "lower": 49.75, "upper": 50.25, "unit": "Hz", "rule": "guard-banded",
            "decision": "pass" if 49.756 <= f <= 50.244 else "fail", "note": ""},
           {"quantity": "thd_pct", "channel": "output", "label": "THD", "value": thd, "expanded_u": 0.04,
            "lower": None, "upper": 5.0, "unit": "%", "rule": "guard-banded", "decision": "pass", "note": ""}]
    fit = {"file": wav, "parameters": {"C": {"value": 33e-6 + i * 1e-7, "stderr": 2e-7, "unit": "F"},
                                       "L": {"value": 0.30, "stderr": 0.002, "unit": "H"}},
           "derived": {"resonant_frequency_hz": {"value": 49.7 + i * 0.1, "stderr": 0.05}}}
    append_run(db, command="report", operator="R. Okafor", unit=f"HC-{i:02d}",
               captures=[("as-left", {"path": wav, "sha256": f"{i:02x}" * 32, "metadata": {"device": "line-in"}})],
               measurements=[("as-left", m)], fits=[("as-left", fit)], decisions=dec,
               verdict=("pass" if all(d["decision"] == "pass" for d in dec) else "fail"),
               details={"spec": "hc_spec.toml"})
append_run(db, command="measure", unit="HC-01", captures=[{"path": "hc01_retest.wav"}],
           measurements=[meas(50.010, 3.0, 1.26, "hc01_retest.wav")])
append_run(db, command="measure", captures=[{"path": "bench_check.wav"}],
           measurements=[meas(997.0, 0.01, 0.70, "bench_check.wav")])
