"""Property tests (hypothesis) of the SI parse/format pair in benchfit.units.

Round trips are benchfit's own contract; the rounding rule of "value ± u" is the GUM's
(JCGM 100:2008, 7.2.2 and 7.2.6: u to two significant digits, the value given to the same
decimal place as its uncertainty).
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


#: units that take an SI prefix, and ones format_with_uncertainty leaves unscaled
pm_units = st.sampled_from(["F", "H", "Hz", "V", "s", "Ω", "", "%", "FS", "ppm", "1/s"])
_UNSCALED = {"", "%", "FS", "ppm", "1/s"}


@settings(max_examples=400, deadline=None)
@given(magnitudes, signs, st.floats(min_value=1e-6, max_value=3.0), pm_units)
def test_value_with_uncertainty_parses_back_within_half_a_unit_of_its_last_digit(x, sign, rel_u, unit):
    """u is rounded to two significant digits, the value to the same decade, one prefix for both
    (JCGM 100:2008, 7.2.2 and 7.2.6); parsing the text gives both back within half a unit of that
    decade."""
    value, u = sign * x, x * rel_u
    text = format_with_uncertainty(value, u, unit, digits=2)
    scale = 1.0
    beyond = re.fullmatch(r"\((.*)\)e(-?\d+) ?(\S*)", text)  # past femto … tera: "(2.26 ± 0.10)e25 Ω"
    if beyond:
        assert beyond.group(3) == unit and max(abs(value), u) >= 1e15, text
        scale = 10.0 ** int(beyond.group(2))
    m = re.fullmatch(r"(-?\d+(?:\.(\d+))?) ± (\d+(?:\.(\d+))?) ?(\S*)", beyond.group(1) if beyond else text)
    assert m, text
    v_text, v_dec, u_text, u_dec, tail = m.groups()
    assert beyond or tail.endswith(unit), text
    prefix = tail[: len(tail) - len(unit)] if not beyond else ""
    assert prefix == "" or unit not in _UNSCALED, text  # no prefix on %, FS, ppm, 1/s or no unit
    assert len(v_dec or "") == len(u_dec or "")  # the same decimal place (GUM 7.2.6)
    shown_u = float(u_text)
    place = math.floor(math.log10(shown_u)) - 1  # the decade of u's second significant digit
    assert float(f"{shown_u:.1e}") == shown_u, text  # two significant digits, no more
    assert len(v_dec or "") == max(0, -place), text
    back = scale * parse_quantity(v_text + prefix)  # the parser reads the prefix the formatter wrote
    back_u = scale * parse_quantity(u_text + prefix)
    half = 0.5 * 10.0 ** place * parse_quantity("1" + prefix) * scale
    slack = 1e-9 * half + 1e-12 * abs(value)  # float rounding in the scaling, not in the method
    assert abs(back - value) <= half + slack, (text, value)
    assert abs(back_u - u) <= half + slack, (text, u)


@settings(max_examples=100, deadline=None)
@given(magnitudes, signs, st.floats(min_value=1e-12, max_value=0.99e-7), st.sampled_from(["Hz", "V", "s"]))
def test_a_tiny_uncertainty_keeps_8_digits_of_the_value_and_u_apart(x, sign, rel_u, unit):
    value, u = sign * x, x * rel_u
    text = format_with_uncertainty(value, u, unit)
    v_part, u_part = text.split(" ± ")
    # 8 significant digits: within half a unit in the 8th place (the compact branch's rule)
    assert math.isclose(parse_quantity(v_part, unit=unit), value, rel_tol=0.5e-7 * (1 + 1e-9)), text
    assert math.isclose(parse_quantity(u_part, unit=unit), u, rel_tol=0.05 * (1 + 1e-9)), text


@given(st.integers(min_value=-10**6, max_value=10**6), st.sampled_from(["", "k", "M", "m", "u", "µ", "n", "p"]))
def test_parse_reads_every_prefix(n, prefix):
    factor = {"": 1, "k": 1e3, "M": 1e6, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "n": 1e-9, "p": 1e-12}[prefix]
    assert math.isclose(parse_quantity(f"{n}{prefix}"), n * factor, rel_tol=1e-12, abs_tol=1e-30)
