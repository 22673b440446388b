"""SI-prefixed parsing and formatting (benchfit.units)."""

import pytest

from benchfit.units import format_quantity, format_with_uncertainty, parse_assignment, parse_quantity


@pytest.mark.parametrize("text,value", [
    ("2.2k", 2200.0), ("288m", 0.288), ("10u", 10e-6), ("22µ", 22e-6), ("33uF", 33e-6),
    ("1.5e-3", 1.5e-3), ("10M", 10e6), ("0", 0.0), (4.7, 4.7),
])
def test_parse_si_prefixes(text, value):
    # SI prefixes: BIPM SI Brochure, 9th ed., Table 7 (m = 1e-3, M = 1e6, µ = 1e-6, k = 1e3)
    assert parse_quantity(text, "x", unit="F") == pytest.approx(value, rel=1e-12)


@pytest.mark.parametrize("text", ["abc", "", "1.2.3", "nan", "inf"])
def test_parse_rejects_non_numbers_in_one_line(text):
    with pytest.raises(ValueError) as e:
        parse_quantity(text, "--fix C")
    assert "\n" not in str(e.value)


def test_parse_positive():
    with pytest.raises(ValueError, match="must be positive"):
        parse_quantity("-1k", "Rload", positive=True, allow_zero=False)
    with pytest.raises(ValueError, match="zero or positive"):
        parse_quantity("-1", "Resr", positive=True)
    assert parse_quantity("0", "Resr", positive=True) == 0.0


def test_parse_assignment_names_allowed():
    assert parse_assignment("c=22u", ("L", "C"), "--fix") == ("C", pytest.approx(22e-6))
    with pytest.raises(ValueError, match="use one of L, C"):
        parse_assignment("X=1", ("L", "C"), "--fix")
    with pytest.raises(ValueError, match="NAME=VALUE"):
        parse_assignment("22u", ("L", "C"), "--fix")


def test_format():
    assert format_quantity(33e-6, "F") == "33 µF"
    assert format_quantity(None, "V") == "—"
    # GUM (JCGM 100:2008, 7.2.6): value rounded to the uncertainty's last digit
    assert format_with_uncertainty(50.01234, 0.00123, "Hz") == "50.0123 ± 0.0012 Hz"
    assert format_with_uncertainty(33.2e-6, 0.41e-6, "F") == "33.20 ± 0.41 µF"
    assert format_with_uncertainty(0.5, None, "V") == "500 mV"


def test_values_beyond_the_prefixes_are_written_with_their_decade():
    # femto … tera is the range the prefixes cover; beyond it (a "no load" conductance's inverse,
    # 2.26e25 Ω) a prefix would print a mantissa of 14 digits. The decade is written out instead,
    # the pair in one decade as in JCGM 100:2008, 7.2.2 (value and u share the factor)
    from benchfit.units import format_quantity, format_with_uncertainty, parse_quantity

    assert format_quantity(2.26e25, "Ω") == "2.26e25 Ω"
    assert parse_quantity(format_quantity(2.26e25, "Ω"), unit="Ω") == 2.26e25
    assert format_quantity(-1e-30, "F") == "-1e-30 F"
    assert format_with_uncertainty(2.26e25, 9e23, "Ω") == "(2.260 ± 0.090)e25 Ω"
    assert format_with_uncertainty(1.2e-17, 1e-19, "F") == "(1.200 ± 0.010)e-17 F"
    # inside the range nothing changes
    assert format_quantity(22.6e12, "Ω") == "22.6 TΩ" and format_quantity(1.5e-15, "F") == "1.5 fF"
