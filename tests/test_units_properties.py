"""Property tests (hypothesis) of the SI parse/format pair in benchfit.units.

Round trips are benchfit's own contract; the rounding rule of "value ± u" is the GUM's
(JCGM 100:2008, 7.2.6: the value is given to the same decimal place as its uncertainty).
"""

from __future__ import annotations

import math
import re

from hypothesis import given, settings
from hypothesis import strategies as st

from benchfit.units import format_quantity, format_with_uncertainty, parse_quantity

# magnitudes benchfit shows: femto … tera (the prefixes format_quantity uses)
magnitudes = st.floats(min_value=1e-15, max_value=9.99e14, allow_nan=False, allow_infinity=False)
signs = st.sampled_from([1.0, -1.0])
units = st.sampled_from(["", "F", "H", "Hz", "V", "s"])


@settings(max_examples=300, deadline=None)
@given(magnitudes, signs, units, st.integers(min_value=3, max_value=12))
def test_format_then_parse_gives_the_value_back_to_the_digits_shown(x, sign, unit, digits):
    value = sign * x
    text = format_quantity(value, unit, digits)
    back = parse_quantity(text, unit=unit)
    # 'digits' significant digits: the printed mantissa is within half a unit in its last place
    assert math.isclose(back, value, rel_tol=0.5 * 10.0 ** (1 - digits) * (1 + 1e-9)), (value, text, back)


@settings(max_examples=300, deadline=None)
@given(magnitudes, signs, st.floats(min_value=1e-4, max_value=0.3), units)
def test_value_with_uncertainty_keeps_the_decimal_place_of_u(x, sign, rel_u, unit):
    value, u = sign * x, x * rel_u
    text = format_with_uncertainty(value, u, unit, digits=2)
    m = re.fullmatch(r"(-?\d+(?:\.(\d+))?) ± (\d+(?:\.(\d+))?) ?(\S*)", text)
    assert m, text
    v_text, v_dec, u_text, u_dec, tail = m.groups()
    assert len(v_dec or "") == len(u_dec or "")  # same decimal place (GUM 7.2.6)
    scale = parse_quantity("1" + tail[: len(tail) - len(unit)] if unit else "1" + tail)
    half_ulp = 0.5 * 10.0 ** -len(v_dec or "") * scale
    assert abs(float(v_text) * scale - value) <= half_ulp * (1 + 1e-6) + abs(value) * 1e-12, text
    # u is rounded at the same place: two significant digits, within half a unit in the last place
    assert abs(float(u_text) * scale - u) <= half_ulp * (1 + 1e-6), text
    assert len((u_text.replace(".", "")).lstrip("0")) >= 2, text


@given(st.integers(min_value=-10**6, max_value=10**6), st.sampled_from(["", "k", "M", "m", "u", "µ", "n", "p"]))
def test_parse_reads_every_prefix(n, prefix):
    factor = {"": 1, "k": 1e3, "M": 1e6, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "n": 1e-9, "p": 1e-12}[prefix]
    assert math.isclose(parse_quantity(f"{n}{prefix}"), n * factor, rel_tol=1e-12, abs_tol=1e-30)
