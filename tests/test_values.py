"""Checks of solderless.engine.values against IEC 60062 (RKM marking), IEC 60063
(preferred numbers, tables quoted in docs/references.md) and the
SPICE scale-factor rules (ngspice manual, "Numbers and scale factors")."""
import math

import pytest
from hypothesis import given, strategies as st

from solderless.engine.errors import SolderlessError, ValueFormatError
from solderless.engine.values import (E_SERIES, format_value, nearest_preferred,
                           parse_tolerance, parse_value, preferred_deviation,
                           series_values, step_preferred)


# IEC 60062 examples as listed in docs/references.md, plus SI-prefix forms
# (SI brochure prefixes; 'meg' is common practice from SPICE).
@pytest.mark.parametrize("text, expected", [
    ("R47", 0.47), ("4R7", 4.7), ("470R", 470.0), ("4K7", 4.7e3),
    ("4k7", 4.7e3), ("47K3", 47.3e3), ("2M2", 2.2e6), ("4p7", 4.7e-12),
    ("4n7", 4.7e-9), ("1\u00b50", 1e-6), ("1u0", 1e-6), ("1\u03bc0", 1e-6),
    ("100n", 100e-9), ("47u", 47e-6), ("1.5e-3", 1.5e-3), ("10 k\u03a9", 1e4),
    ("10 k\u2126", 1e4), ("10kohm", 1e4), ("10kOhms", 1e4), ("100nF", 1e-7),
    ("2.2uF", 2.2e-6), ("1meg", 1e6), ("1MEG", 1e6), ("1M", 1e6),
    ("1m", 1e-3), ("1mH", 1e-3), ("1F", 1.0), ("1f", 1e-15), ("-5", -5.0),
    ("0", 0.0), ("+12", 12.0), ("4k7J", 4.7e3), ("2M2K", 2.2e6),
    ("470 \u03a9", 470.0), ("1MHz", 1e6), ("10ms", 10e-3),
])
def test_parse_examples(text, expected):
    assert parse_value(text) == pytest.approx(expected, rel=1e-15)


def test_parse_exact_decimal():
    # '100n' must be the double nearest 1e-7, not 100 * 1e-9 (which is off by
    # one ulp): exactness of decimal scaling is common practice.
    assert parse_value("100n") == 1e-7
    assert parse_value("4n7") == 4.7e-9


def test_numbers_pass_through():
    assert parse_value(3) == 3.0 and parse_value(2.5e-3) == 2.5e-3


@pytest.mark.parametrize("text, expected", [
    # ngspice manual, section "Syntax of expressions / numbers": scale
    # factors are case-insensitive, M = milli, MEG = mega, MIL = 25.4e-6,
    # letters after the scale factor are ignored.
    ("10uF", 10e-6), ("1M", 1e-3), ("1m", 1e-3), ("1MEG", 1e6),
    ("1Meg", 1e6), ("1mil", 25.4e-6), ("10V", 10.0), ("2.2K", 2.2e3),
    ("1e3", 1e3), ("5p", 5e-12), ("3FF", 3e-15), ("1T", 1e12), ("1G", 1e9),
    ("4k7", 4.7e3),
])
def test_parse_spice(text, expected):
    assert parse_value(text, spice=True) == pytest.approx(expected, rel=1e-15)


def test_spice_rkm_mega_is_refused():
    with pytest.raises(ValueFormatError, match="2.2meg"):
        parse_value("2M2", spice=True)


@pytest.mark.parametrize("bad", ["", "abc", "4k7x", "k", "1..2", "1e", "--1",
                                 "1 2", True, None, float("nan")])
def test_bad_values_raise_with_place_and_examples(bad):
    with pytest.raises(ValueFormatError) as ei:
        parse_value(bad, file="pedal.toml", line=12, part="R3")
    msg = str(ei.value)
    assert "pedal.toml:12" in msg and "R3" in msg and "4k7" in msg
    assert isinstance(ei.value, SolderlessError)


def test_wrong_unit_is_named():
    with pytest.raises(ValueFormatError, match="'H'"):
        parse_value("10uH", unit="F")
    assert parse_value("10uF", unit="F") == 10e-6


@pytest.mark.parametrize("text, expected", [
    ("5%", 0.05), ("1 %", 0.01), ("\u00b110%", 0.10), ("0.05", 0.05),
    (0.05, 0.05),
    # IEC 60062 tolerance letters (docs/references.md)
    ("B", 0.001), ("C", 0.0025), ("D", 0.005), ("F", 0.01), ("G", 0.02),
    ("J", 0.05), ("K", 0.10), ("M", 0.20),
])
def test_tolerance(text, expected):
    assert parse_tolerance(text) == pytest.approx(expected)


@pytest.mark.parametrize("bad", ["Q", "five", "150%", -0.1])
def test_bad_tolerance(bad):
    with pytest.raises(ValueFormatError):
        parse_tolerance(bad, part="C1")


@pytest.mark.parametrize("x, rkm, eng", [
    # IEC 60062 marking; engineering notation (SI prefixes)
    (4700, "4k7", "4.7 k\u03a9"), (4.7e-9, "4n7", "4.7 n\u03a9"),
    (470, "470R", "470 \u03a9"), (0.47, "R47", "470 m\u03a9"),
    (47300, "47k3", "47.3 k\u03a9"), (2.2e6, "2M2", "2.2 M\u03a9"),
    (1e-6, "1u", "1 \u00b5\u03a9"), (999.9, "1k", "1 k\u03a9"),
    (-4700, "-4k7", "-4.7 k\u03a9"), (0, "0", "0 \u03a9"),
])
def test_format(x, rkm, eng):
    assert format_value(x) == rkm
    assert format_value(x, "ohm", style="eng") == eng


def test_format_eng_without_unit():
    assert format_value(4700, style="eng") == "4.7 k"
    assert format_value(100e-9, "F", style="eng") == "100 nF"
    assert format_value(12.5, "V", style="rkm") == "12.5"


@given(st.integers(100, 999), st.integers(-15, 11))
def test_round_trip_three_digits(m, e):
    x = float(f"{m}e{e - 2}")
    for style in ("rkm", "eng"):
        for unit in ("", "ohm", "F"):
            assert parse_value(format_value(x, unit, style)) == \
                pytest.approx(x, rel=1e-12)


@given(st.floats(1e-14, 1e14), st.integers(1, 8))
def test_round_trip_rounds_to_digits(x, d):
    y = parse_value(format_value(x, digits=d))
    # rounding to d significant digits: error at most half a unit in the
    # last place (common practice)
    assert abs(y - x) <= 0.5 * 10 ** (1 - d) * x * (1 + 1e-9)


def test_series_tables_match_iec60063():
    # E12/E24/E96 lists as quoted from IEC 60063:2015 in docs/references.md
    e12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
    e24_extra = [1.1, 1.3, 1.6, 2.0, 2.4, 3.0, 3.6, 4.3, 5.1, 6.2, 7.5, 9.1]
    e96 = [int(v) / 100 for v in """100 102 105 107 110 113 115 118 121 124
        127 130 133 137 140 143 147 150 154 158 162 165 169 174 178 182 187
        191 196 200 205 210 215 221 226 232 237 243 249 255 261 267 274 280
        287 294 301 309 316 324 332 340 348 357 365 374 383 392 402 412 422
        432 442 453 464 475 487 499 511 523 536 549 562 576 590 604 619 634
        649 665 681 698 715 732 750 768 787 806 825 845 866 887 909 931 953
        976""".split()]
    assert list(E_SERIES["E12"]) == e12
    assert list(E_SERIES["E24"]) == sorted(e12 + e24_extra)
    assert list(E_SERIES["E96"]) == e96
    # IEC 60063 builds each series from every k-th value of the next finer
    # one: E3 < E6 < E12 < E24 and E48 < E96 < E192
    for coarse, fine in [("E3", "E6"), ("E6", "E12"), ("E12", "E24"),
                         ("E48", "E96"), ("E96", "E192")]:
        assert list(E_SERIES[coarse]) == list(E_SERIES[fine][::2])
    # E192: the rounded geometric series except 9.20 (from memory, as noted
    # in docs/references.md)
    geo = [round(10 ** (i / 192), 2) for i in range(192)]
    diff = [(g, v) for g, v in zip(geo, E_SERIES["E192"]) if abs(g - v) > 1e-9]
    assert diff == [(9.19, 9.20)]
    for name, t in E_SERIES.items():
        assert len(t) == int(name[1:]) and list(t) == sorted(t)


def test_nearest_and_steps():
    assert nearest_preferred(4600, "E12") == 4700.0
    assert nearest_preferred(9.6, "E24") == 10.0        # across a decade
    assert nearest_preferred(0.0000048, "E6") == 4.7e-6
    assert nearest_preferred(1234, "E96") == 1240.0
    assert step_preferred(4700, "E12", +1) == 5600.0
    assert step_preferred(4700, "E12", -1) == 3900.0
    assert step_preferred(4600, "E12", -1) == 3900.0
    assert step_preferred(4600, "E12", +1) == 4700.0
    assert step_preferred(8.2, "E12", +1) == 10.0
    assert step_preferred(1.0, "E12", -1) == 0.82
    assert step_preferred(100e-9, "E6", +6) == 1e-6
    assert step_preferred(4700, "E12", 0) == 4700.0
    assert preferred_deviation(4800, "E12") == pytest.approx(100 / 4700)
    assert preferred_deviation(4600, "E12") < 0
    assert series_values("E6", 1e3, 1e4) == [1e3, 1.5e3, 2.2e3, 3.3e3,
                                             4.7e3, 6.8e3, 1e4]


@given(st.floats(1e-12, 1e9), st.sampled_from(list(E_SERIES)))
def test_nearest_is_nearest(x, series):
    n = nearest_preferred(x, series)
    up = step_preferred(x, series, +1)
    down = step_preferred(x, series, -1)
    assert down <= x * (1 + 1e-9) and up >= x * (1 - 1e-9)
    assert n in (up, down) or math.isclose(n, x, rel_tol=1e-9)
    assert abs(math.log(x / n)) <= min(abs(math.log(x / up)),
                                       abs(math.log(x / down))) + 1e-12


def test_preferred_rejects_nonpositive_and_unknown_series():
    with pytest.raises(ValueFormatError):
        nearest_preferred(0)
    with pytest.raises(ValueFormatError, match="E24"):
        nearest_preferred(10, "E7")
