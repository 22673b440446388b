"""Seeded mutation fuzzing of the spec reader: every mutant gives a spec or one SpecError line.

Two thousand mutants of a valid spec (tokens swapped for hostile TOML values — dates,
inf, nan, 1e308, 400-digit integers, arrays and inline tables where text belongs — lines
dropped or doubled, bytes flipped, non-UTF-8 bytes). The contract (benchfit/errors.py):
the reader returns a :class:`~benchfit.report.spec.Spec` whose ``to_dict()`` is strict
JSON (the report and the log store it), or raises a BenchfitError whose message is one
line ``<file>: <what is wrong> — <what to do>``; any other exception is a bug.
"""

from __future__ import annotations

import json
import random

import pytest

from benchfit.errors import BenchfitError
from benchfit.report.spec import decide, load_spec

SPEC = """\
[spec]
name = "hum-check box, 50 Hz reference tone"
revision = "A"
decision_rule = "guard-banded"
notes = "Warm up 5 min."

[conditions]
load = "10 kΩ resistor across the output"
load_ohm = 10000
supply_v = 12.0

[[limit]]
quantity = "frequency_hz"
label = "output frequency"
nominal = 50.0
tolerance = 0.25

[[limit]]
quantity = "thd_pct"
max = 5.0

[[limit]]
quantity = "vrms"
channel = "output"
unit = "V"
min = 1.0
max = 1.6

[[limit]]
quantity = "L"
nominal = 0.3
tolerance_pct = 10
"""

HOSTILE = ["inf", "-inf", "nan", "1e308", "-1e308", "1" + "0" * 400, "1e-320", "0", "-0.0", "1979-05-27",
           "1979-05-27T07:32:00Z", "07:32:00", "[1, 2]", '["frequency_hz"]', "{a = 1}", "true", '""',
           '"frequency_hz"', '"\\u0000"', '"$x^2$"', "'''multi\nline'''", "0x7fffffffffffffff", "1_000",
           "[]", "{}", '"' + "x" * 300 + '"', "2", "-5", "1e15", "9" * 30]


def _mutate(text: str, rng: random.Random) -> bytes:
    lines = text.splitlines()
    for _ in range(rng.randint(1, 3)):
        kind = rng.randrange(6)
        i = rng.randrange(len(lines))
        if kind <= 2 and "=" in lines[i]:  # a value replaced by a hostile one
            key = lines[i].split("=", 1)[0]
            lines[i] = f"{key}= {rng.choice(HOSTILE)}"
        elif kind == 3:
            del lines[i]
            if not lines:
                lines = [""]
        elif kind == 4:
            lines.insert(i, lines[rng.randrange(len(lines))])
        else:
            key = rng.choice(["nominal", "max", "min", "channel", "unit", "label", "extra_key", "quantity"])
            lines.insert(i, f"{key} = {rng.choice(HOSTILE)}")
    raw = bytearray("\n".join(lines).encode("utf-8"))
    if rng.random() < 0.15:  # flip a few bytes, some into invalid UTF-8
        for _ in range(rng.randint(1, 4)):
            raw[rng.randrange(len(raw))] = rng.choice([0xFF, 0xC3, ord("["), ord('"'), ord("="), 0x00])
    return bytes(raw)


def _check_error(e: BenchfitError) -> None:
    msg = str(e)
    assert "\n" not in msg, msg
    assert " — " in msg, msg
    assert len(msg) < 600, msg  # a value is shown cut short, not 400 digits long


def test_every_mutant_gives_a_spec_or_one_error_line(tmp_path):
    rng = random.Random(20261201)
    path = tmp_path / "hc_spec.toml"
    outcomes = {"spec": 0, "error": 0}
    for n in range(2000):
        raw = _mutate(SPEC, rng)
        path.write_bytes(raw)
        try:
            spec = load_spec(path)
        except BenchfitError as e:
            _check_error(e)
            outcomes["error"] += 1
            continue
        except Exception as e:  # noqa: BLE001 - the point of the test
            pytest.fail(f"mutant {n} raised {type(e).__name__}: {e}\n{raw!r}")
        json.dumps(spec.to_dict(), allow_nan=False)  # strict JSON, as the report and log store it
        for lim in spec.limits:  # every limit can be decided for a value and an uncertainty
            decide(1.0, 0.01, lim.lower, lim.upper, spec.decision_rule)
        outcomes["spec"] += 1
    # the mutants exercise both paths (a fuzzer that only ever errors tests nothing)
    assert outcomes["spec"] > 100 and outcomes["error"] > 200, outcomes


# --- the named cases of the issue, each with the line it gives ------------------------------------

def _limit(extra: str) -> str:
    return f"[[limit]]\nquantity = \"frequency_hz\"\n{extra}\n"


@pytest.mark.parametrize("text, expected", [
    (_limit("nominal = 50.0\ntolerance = inf"), "tolerance = inf is not finite — give a finite number"),
    (_limit("nominal = 1e308\ntolerance_pct = 100"), "nominal = 1e+308 is beyond any limit of this tool"),
    (_limit("max = 1" + "0" * 400), "max = 1000000000000000000000000000000000000... is not finite"),
    ("[[limit]]\nquantity = [\"frequency_hz\"]\nmax = 5\n", "quantity: unknown quantity ['frequency_hz'] — "),
    ("[conditions]\nsupply_v = 1e308\n" + _limit("max = 5"), "conditions: supply_v = 1e+308 is beyond any limit"),
    ("[conditions]\nload_ohm = nan\n" + _limit("max = 5"), "conditions: load_ohm = nan is not finite"),
])
def test_hostile_numbers_and_types_are_one_line(tmp_path, text, expected):
    path = tmp_path / "spec.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(BenchfitError) as info:
        load_spec(path)
    _check_error(info.value)
    assert str(info.value).startswith(str(path)) and expected in str(info.value)


def test_spec_not_utf8_is_one_line(tmp_path):
    path = tmp_path / "spec.toml"
    path.write_bytes("[conditions]\nload = \"10 kΩ\"\n".encode("cp1252", errors="replace").replace(b"?", b"\xea")
                     + _limit("max = 5").encode())
    with pytest.raises(BenchfitError) as info:
        load_spec(path)
    assert str(info.value) == f"{path}: not UTF-8 text (byte 25 is not UTF-8) — save the spec as UTF-8"


def test_toml_date_in_conditions_is_kept_as_iso_text(tmp_path):
    """TOML 1.0 has date and time values; JSON has none, so the report and log keep the ISO 8601 text."""
    path = tmp_path / "spec.toml"
    path.write_text("[conditions]\ncalibrated_on = 2026-11-30\nat = 07:32:00\n" + _limit("max = 5"),
                    encoding="utf-8")
    spec = load_spec(path)
    assert spec.conditions["calibrated_on"] == "2026-11-30" and spec.conditions["at"] == "07:32:00"
    assert json.loads(json.dumps(spec.to_dict(), allow_nan=False))["conditions"]["calibrated_on"] == "2026-11-30"
