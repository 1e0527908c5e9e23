"""Component values at the edges: engineering notation, RKM marking, E-series.

Everything inside Solderless is a plain float in SI units; this module turns
what people type (``4k7``, ``100nF``, ``2.2 µF``, ``10 kΩ``, ``1meg``) into
floats and back.

* Value marking follows IEC 60062 (the "RKM code"): the multiplier letter
  stands where the decimal point goes (``R47`` = 0.47, ``4R7`` = 4.7,
  ``4k7`` = 4700, ``47K3`` = 47 300, ``2M2`` = 2.2e6, ``4n7`` = 4.7e-9,
  ``1µ0`` = 1e-6); an optional tolerance letter may follow (``4k7J``).
* In Solderless files ``M`` is mega and ``m`` is milli (SI). With
  ``spice=True`` the SPICE rules apply instead: scale factors are
  case-insensitive, ``M`` is milli, ``MEG`` is mega, ``MIL`` is 25.4e-6, and
  letters after the scale factor are ignored (``10uF``).
* Preferred numbers are the IEC 60063 E-series. The tables are stored, not
  generated: the standard's E3..E24 values differ from the rounded geometric
  series (2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2), and E192 has 9.20 where the
  rounded series gives 9.19.

Example
-------
>>> parse_value("4k7")
4700.0
>>> format_value(4.7e-9)
'4n7'
>>> nearest_preferred(4600, "E12")
4700.0
"""
from __future__ import annotations

import math
import re
from bisect import bisect_right
from decimal import Decimal

from solderless.engine.errors import ValueFormatError

__all__ = [
    "parse_value", "parse_tolerance", "format_value", "E_SERIES",
    "SERIES_TOLERANCE", "nearest_preferred", "step_preferred",
    "preferred_deviation", "series_values",
]

# --------------------------------------------------------------------------
# IEC 60063 preferred-number tables (one decade, mantissa in [1, 10)).
# E3..E24 as listed in IEC 60063; E48 is every second E96 value and E96 every
# second E192 value, as in the standard.
E_SERIES: dict[str, tuple[float, ...]] = {
    "E3": (1.0, 2.2, 4.7),
    "E6": (1.0, 1.5, 2.2, 3.3, 4.7, 6.8),
    "E12": (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2),
    "E24": (
        1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
        3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
    ),
    "E48": (
        1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69,
        1.78, 1.87, 1.96, 2.05, 2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01,
        3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42, 4.64, 4.87, 5.11, 5.36,
        5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
    ),
    "E96": (
        1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
        1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
        1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
        2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
        3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
        4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
        5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
        7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
    ),
    "E192": (
        1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14,
        1.15, 1.17, 1.18, 1.20, 1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32,
        1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45, 1.47, 1.49, 1.50, 1.52,
        1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
        1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03,
        2.05, 2.08, 2.10, 2.13, 2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34,
        2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58, 2.61, 2.64, 2.67, 2.71,
        2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
        3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61,
        3.65, 3.70, 3.74, 3.79, 3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17,
        4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59, 4.64, 4.70, 4.75, 4.81,
        4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
        5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42,
        6.49, 6.57, 6.65, 6.73, 6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41,
        7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16, 8.25, 8.35, 8.45, 8.56,
        8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
    ),
}

#: The values pots are made in, per decade: 1-2-2.5-5 (1k, 2k, 2k5, 5k, 10k,
#: 20k, 25k ...; docs/references.md, "Building from a simulation"). Not an
#: IEC 60063 series, but stepped and snapped the same way under the name "POT".
POT_DECADE: tuple[float, ...] = (1.0, 2.0, 2.5, 5.0)

#: Every table a value can step through: the E-series and the pots' values.
_STEP_TABLES: dict[str, tuple[float, ...]] = {**E_SERIES, "POT": POT_DECADE}

#: Tolerance customarily paired with each series (common practice).
SERIES_TOLERANCE: dict[str, float] = {
    "E3": 0.40, "E6": 0.20, "E12": 0.10, "E24": 0.05,
    "E48": 0.02, "E96": 0.01, "E192": 0.005,
}

# --------------------------------------------------------------------------
# Multipliers

_MICRO = ("u", "\u00b5", "\u03bc")  # ASCII u, micro sign, Greek small mu
# Solderless files: case matters (M mega, m milli).
# Values are powers of ten (or an exact Decimal) so that '100n' is exactly
# the float nearest 1e-7.
_SI_PREFIX: dict[str, int] = {
    "f": -15, "p": -12, "n": -9, "u": -6, "\u00b5": -6, "\u03bc": -6,
    "m": -3, "k": 3, "K": 3, "M": 6, "G": 9, "T": 12,
}
# RKM letters that stand for the decimal point with multiplier 1.
_UNITY = ("R", "r")  # (E, also allowed by IEC 60062, would clash with 1E3)

# SPICE scale factors (case-insensitive), longest first.
_SPICE_SCALE: tuple[tuple[str, int | Decimal], ...] = (
    ("meg", 6), ("mil", Decimal("25.4e-6")), ("t", 12), ("g", 9), ("k", 3),
    ("m", -3), ("u", -6), ("\u00b5", -6), ("n", -9), ("p", -12), ("f", -15),
)


def _scaled(num: str | Decimal, mult) -> float:
    """Exact decimal scaling: Decimal(num) times 10**mult (or times a Decimal)."""
    d = Decimal(num)
    if isinstance(mult, Decimal):
        return float(d * mult)
    return float(d.scaleb(mult))

# Unit words accepted after a value in our files (stripped, not checked
# against the caller's unit unless one is given).
_UNIT_WORDS: dict[str, str] = {
    "ohms": "ohm", "ohm": "ohm", "\u03a9": "ohm", "\u2126": "ohm",
    "F": "F", "H": "H", "V": "V", "A": "A", "s": "s", "Hz": "Hz", "W": "W",
}
_UNIT_ALIASES = {"ohm": "ohm", "ohms": "ohm", "\u03a9": "ohm", "\u2126": "ohm",
                 "r": "ohm", "R": "ohm"}

# IEC 60062 tolerance letters (symmetric tolerances).
_TOL_LETTERS: dict[str, float] = {
    "B": 0.001, "C": 0.0025, "D": 0.005, "F": 0.01, "G": 0.02,
    "J": 0.05, "K": 0.10, "M": 0.20,
}

_NUM = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
_INT = re.compile(r"\d+")

_EXAMPLES = ("write a number with an optional multiplier, e.g. 4k7, 4.7k, "
             "470R, R47, 100n, 2.2uF, 10 kOhm, 1M (mega), 1m (milli), "
             "1meg, 1.5e-3")
_SPICE_EXAMPLES = ("write a SPICE number, e.g. 4.7k, 470, 100n, 2.2u, "
                   "1meg (mega), 1m (milli), 1.5e-3")


def _unit_key(unit: str | None) -> str | None:
    if not unit:
        return None
    return _UNIT_ALIASES.get(unit, unit)


def _fail(text, spice, file, line, part, why=""):
    msg = f"cannot read {text!r} as a value"
    if why:
        msg += f": {why}"
    raise ValueFormatError(msg, file=file, line=line, part=part,
                           hint=_SPICE_EXAMPLES if spice else _EXAMPLES)


def _strip_unit(rest: str, unit: str | None, text, spice, file, line, part):
    """Remove a trailing unit word from ``rest``; return what is left."""
    rest = rest.strip()
    if not rest:
        return rest
    want = _unit_key(unit)
    for word, key in sorted(_UNIT_WORDS.items(), key=lambda kv: -len(kv[0])):
        if rest.endswith(word) or (key == "ohm" and rest.lower().endswith(word)):
            if want is not None and key != want:
                _fail(text, spice, file, line, part,
                      f"the unit '{word}' does not fit here (expected {unit})")
            return rest[: len(rest) - len(word)].strip()
    return rest


def parse_value(text, *, unit: str | None = None, spice: bool = False,
                file: str | None = None, line: int | None = None,
                part: str | None = None) -> float:
    """Read a component value written by a person and return it in SI units.

    Accepts plain numbers (``1.5e-3``), SI multipliers (``100n``, ``1meg``),
    IEC 60062 RKM marking (``4k7``, ``R47``, ``4R7``, ``470R``, ``47K3``,
    ``1u0``, ``1µ0``, with an optional tolerance letter such as ``4k7J``,
    which is ignored here; see :func:`parse_tolerance`), and a trailing unit
    (``100nF``, ``10 kΩ``, ``10kohm``). ``int``/``float`` pass through.

    In Solderless files ``M`` means mega and ``m`` milli. With ``spice=True``
    SPICE rules apply: case-insensitive scale factors, ``M`` = milli,
    ``MEG`` = mega, ``MIL`` = 25.4 µ, and letters after the scale factor are
    ignored (``10uF`` = 10e-6). RKM marking is read in SPICE mode too, but
    ``2M2`` is refused there because SPICE and the marking disagree on ``M``.

    Zero and negative values are returned as written; the caller decides
    whether they make sense.

    Raises :class:`solderless.engine.errors.ValueFormatError` naming ``file``, ``line``
    and ``part`` with examples of valid values.
    """
    if isinstance(text, bool):
        _fail(text, spice, file, line, part, "a yes/no is not a value")
    if isinstance(text, (int, float)):
        x = float(text)
        if not math.isfinite(x):
            _fail(text, spice, file, line, part, "the value is not finite")
        return x
    if not isinstance(text, str):
        _fail(text, spice, file, line, part)
    s = text.strip()
    if not s:
        _fail(text, spice, file, line, part, "the value is empty")
    x = _parse_spice(s, text, file, line, part) if spice else \
        _parse_ours(s, unit, text, file, line, part)
    if not math.isfinite(x):
        _fail(text, spice, file, line, part, "the value is not finite")
    return x


def _rkm(s: str, letters: dict, text, spice, file, line, part,
         unit):
    """Try the RKM form: [sign] digits? LETTER digits [tol] [unit]."""
    sign = 1.0
    body = s
    if body[:1] in "+-":
        sign = -1.0 if body[0] == "-" else 1.0
        body = body[1:]
    m = re.match(r"(\d*)([A-Za-z\u00b5\u03bc])(\d+)(.*)$", body)
    if not m:
        return None
    head, letter, tail, rest = m.groups()
    if letter in _UNITY:
        mult = 0
    elif letter in letters:
        mult = letters[letter]
    else:
        return None
    if not head and letter not in _UNITY and letter not in letters:
        return None
    rest = rest.strip()
    if rest:
        if unit and rest == unit:
            rest = ""
        elif rest == "F" and letter in ("p", "n", "u", "\u00b5", "\u03bc"):
            rest = ""  # capacitor value written with its unit (common practice)
        elif len(rest) == 1 and rest in _TOL_LETTERS:
            rest = ""  # IEC 60062 tolerance letter; read by parse_tolerance
        else:
            rest = _strip_unit(rest, unit, text, spice, file, line, part)
        if rest:
            return None
    return sign * _scaled(f"{head or '0'}.{tail}", mult)


def _parse_ours(s, unit, text, file, line, part) -> float:
    r = _rkm(s, _SI_PREFIX, text, False, file, line, part, unit)
    if r is not None:
        return r
    m = _NUM.match(s)
    if not m:
        _fail(text, False, file, line, part)
    num = m.group(0)
    x = float(num)
    rest = s[m.end():].lstrip()
    if not rest:
        return x
    # 'meg' (any case) is accepted as mega in our files too.
    if rest[:3].lower() == "meg":
        x = _scaled(num, 6)
        rest = rest[3:]
    elif rest[0] in _UNITY and not rest[1:].strip():
        rest = rest[1:]  # 470R
    elif rest[0] in _SI_PREFIX:
        after = rest[1:].strip()
        # a lone 'F'/'H'/... after a number is the unit, not a prefix, when
        # nothing follows ('1F' farad vs '1f' femto are told apart by case).
        is_unit_only = rest in _UNIT_WORDS or rest.lower() in ("ohm", "ohms")
        if not is_unit_only and (not after or _strip_unit(
                after, unit, text, False, file, line, part) == ""):
            x = _scaled(num, _SI_PREFIX[rest[0]])
            rest = after
    rest = _strip_unit(rest, unit, text, False, file, line, part)
    if rest:
        _fail(text, False, file, line, part, f"'{rest}' is not a multiplier or unit")
    return x


def _parse_spice(s, text, file, line, part) -> float:
    low = s.lower()
    # RKM marking in a netlist (exported schematics often carry '4k7').
    m = re.match(r"[+-]?\d+([a-z\u00b5])\d+", low)
    if m and not re.match(r"[+-]?\d+e[+-]?\d", low):
        letter = m.group(1)
        if letter == "m":
            _fail(text, True, file, line, part,
                  "'M' is milli in SPICE but mega in RKM marking; write "
                  "the value as e.g. 2.2meg or 2.2m")
        scale = dict(_SPICE_SCALE)
        scale["r"] = 0
        r = _rkm(low, scale, text, True, file, line, part, None)
        if r is not None:
            return r
    mnum = _NUM.match(s)
    if not mnum:
        _fail(text, True, file, line, part)
    x = float(mnum.group(0))
    rest = low[mnum.end():]
    for word, mult in _SPICE_SCALE:
        if rest.startswith(word):
            x = _scaled(mnum.group(0), mult)
            rest = rest[len(word):]
            break
    # SPICE ignores letters that follow (units); anything else is a mistake.
    if rest and not re.fullmatch(r"[a-z\u00b5\u03a9\u2126]*", rest):
        _fail(text, True, file, line, part, f"'{rest}' cannot follow a number")
    return x


def parse_tolerance(text, *, file: str | None = None, line: int | None = None,
                    part: str | None = None) -> float:
    """Return a tolerance as a fraction: ``'5%'``, ``'±1 %'``, ``'J'``
    (IEC 60062 letter code), ``0.05`` (a number is already a fraction)."""
    hint = "write e.g. 5%, 1 %, 0.05 or an IEC 60062 letter (F = 1%, J = 5%, K = 10%)"
    if isinstance(text, bool):
        raise ValueFormatError(f"cannot read {text!r} as a tolerance",
                               file=file, line=line, part=part, hint=hint)
    if isinstance(text, (int, float)):
        x = float(text)
    elif isinstance(text, str):
        s = text.strip().replace("\u00b1", "").replace("+/-", "").strip()
        if s.upper() in _TOL_LETTERS and len(s) == 1:
            return _TOL_LETTERS[s.upper()]
        try:
            if s.endswith("%"):
                x = float(s[:-1].strip()) / 100.0
            else:
                x = float(s)
        except ValueError:
            raise ValueFormatError(f"cannot read {text!r} as a tolerance",
                                   file=file, line=line, part=part,
                                   hint=hint) from None
    else:
        raise ValueFormatError(f"cannot read {text!r} as a tolerance",
                               file=file, line=line, part=part, hint=hint)
    if not (0.0 <= x < 1.0) or not math.isfinite(x):
        raise ValueFormatError(
            f"tolerance {text!r} is outside 0..100 %", file=file, line=line,
            part=part, hint=hint)
    return x


# --------------------------------------------------------------------------
# Formatting

_FMT_PREFIX = {-15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "",
               3: "k", 6: "M", 9: "G", 12: "T"}


def _round_sig(x: float, digits: int) -> float:
    if x == 0:
        return 0.0
    return float(f"{x:.{max(1, digits) - 1}e}")


def format_value(x: float, unit: str = "", style: str = "rkm",
                 digits: int = 3) -> str:
    """Write ``x`` for people, rounded to ``digits`` significant digits.

    ``style='rkm'`` gives IEC 60062 marking without a unit: 4700 -> ``4k7``,
    4.7e-9 -> ``4n7``, 470 -> ``470R`` (``R`` marks the unity multiplier when
    ``unit`` is empty or ohm; otherwise a plain decimal), 0.47 ohm -> ``R47``.
    ``style='eng'`` gives engineering notation with a space and the unit:
    ``4.7 kΩ``, ``100 nF``, ``4.7 k`` (micro is written ``µ``).
    The result reads back with :func:`parse_value` (outside 1e-15..1e15 a
    plain exponent form is used).
    """
    if style not in ("rkm", "eng"):
        raise ValueError(f"style must be 'rkm' or 'eng', not {style!r}")
    x = float(x)
    if not math.isfinite(x):
        raise ValueError(f"cannot format {x!r}")
    ohm = _unit_key(unit) == "ohm"
    if unit and ohm and style == "eng":
        unit = "\u03a9"
    if x == 0:
        return "0" if style == "rkm" else ("0 " + unit if unit else "0")
    sign = "-" if x < 0 else ""
    a = _round_sig(abs(x), digits)
    exp3 = 3 * math.floor(math.log10(a) / 3)
    # guard against log10 rounding at exact powers of ten
    if a / 10.0 ** exp3 >= 1000:
        exp3 += 3
    elif a / 10.0 ** exp3 < 1:
        exp3 -= 3
    if exp3 not in _FMT_PREFIX:
        s = f"{sign}{a:.{max(1, digits) - 1}e}"
        return s if style == "rkm" or not unit else f"{s} {unit}"
    mant = float(f"{a / 10.0 ** exp3:.{max(digits, 1) + 2}g}")
    mant = _round_sig(mant, digits)
    mstr = f"{mant:.{max(digits, 1)}f}".rstrip("0").rstrip(".")
    if style == "eng":
        prefix = "\u00b5" if exp3 == -6 else _FMT_PREFIX[exp3]
        if unit or prefix:
            return f"{sign}{mstr} {prefix}{unit}"
        return f"{sign}{mstr}"
    # RKM
    letter = _FMT_PREFIX[exp3]
    use_r = not unit or ohm
    if exp3 == -3 and use_r and a >= 0.1:
        # 0.1 .. 1 ohm is written R47 (IEC 60062)
        digits_str = f"{a:.{max(digits, 1)}f}".split(".")[1].rstrip("0")
        return f"{sign}R{digits_str or '0'}"
    if exp3 == 0:
        if use_r:
            letter = "R"
        elif "." in mstr:
            return f"{sign}{mstr}"
        else:
            return f"{sign}{mstr}"
    if "." in mstr:
        ip, fp = mstr.split(".")
        return f"{sign}{ip}{letter}{fp}"
    return f"{sign}{mstr}{letter}"


def format_reading(x, unit: str = "") -> str:
    """A reading for a console or report line: :func:`format_value` in
    engineering style, or ``%.4g`` and the unit for a value it cannot write
    (not finite)."""
    try:
        return format_value(x, unit=unit, style="eng")
    except Exception:
        return f"{x:.4g} {unit}"


# --------------------------------------------------------------------------
# Preferred values

def _series_key(series) -> str:
    key = f"E{series}" if isinstance(series, int) else str(series).upper()
    if key not in _STEP_TABLES:
        raise ValueFormatError(
            f"unknown preferred-value series {series!r}",
            hint="use one of " + ", ".join(_STEP_TABLES))
    return key


def _check_positive(x, what):
    x = float(x)
    if not (x > 0) or not math.isfinite(x):
        raise ValueFormatError(
            f"{what} needs a positive value, got {x!r}",
            hint="preferred values exist only for values above zero")
    return x


def _at(table, g: int) -> float:
    n = len(table)
    d, i = divmod(g, n)
    # build from the decimal text so 4.7 * 1e3 gives exactly 4700.0
    return float(f"{table[i]!r}e{d}")


def _floor_index(table, x: float) -> tuple[int, bool]:
    """Global index of the largest series value <= x, and whether x is on it."""
    n = len(table)
    d = math.floor(math.log10(x))
    g = d * n + bisect_right(table, x / 10.0 ** d * (1 + 1e-12)) - 1
    # fix floating edge cases at decade boundaries
    while _at(table, g + 1) <= x * (1 + 1e-12):
        g += 1
    while _at(table, g) > x * (1 + 1e-12):
        g -= 1
    return g, abs(_at(table, g) - x) <= 1e-9 * x


def series_values(series="E24", lo: float = 1.0, hi: float = 10.0) -> list[float]:
    """All values of ``series`` in the closed range [lo, hi]."""
    table = _STEP_TABLES[_series_key(series)]
    lo = _check_positive(lo, "series_values")
    g, _ = _floor_index(table, lo)
    if _at(table, g) < lo * (1 - 1e-12):
        g += 1
    out = []
    while _at(table, g) <= hi * (1 + 1e-12):
        out.append(_at(table, g))
        g += 1
    return out


def nearest_preferred(x: float, series="E24") -> float:
    """The IEC 60063 value of ``series`` nearest to ``x`` on a log scale
    (smallest ratio to ``x``), looking across decade boundaries."""
    table = _STEP_TABLES[_series_key(series)]
    x = _check_positive(x, "nearest_preferred")
    g, _ = _floor_index(table, x)
    lo, hi = _at(table, g), _at(table, g + 1)
    return lo if math.log(x / lo) <= math.log(hi / x) else hi


def step_preferred(x: float, series="E24", steps: int = +1) -> float:
    """The value ``steps`` places up (positive) or down (negative) from ``x``
    in ``series``, across decades. From a value between two series values,
    one step up is the next value above it, one step down the next below;
    ``steps=0`` gives :func:`nearest_preferred`."""
    table = _STEP_TABLES[_series_key(series)]
    x = _check_positive(x, "step_preferred")
    steps = int(steps)
    if steps == 0:
        return nearest_preferred(x, series)
    g, on = _floor_index(table, x)
    if steps > 0:
        return _at(table, g + steps)
    return _at(table, g + steps + (0 if on else 1))


POT_SERIES = "POT"
"""A pot's track steps through the values pots are made in
(:data:`POT_DECADE`: 10k, 20k, 25k, 50k, 100k ...), the same values the build
sheet snaps a pot to, not through E12/E24 resistor values."""


def stepping_series(part_type: str) -> str:
    """The series a part's value steps through unless the user picks one:
    :data:`POT_SERIES` for a pot's track, E12 for a capacitor, E24 for the
    rest (common practice)."""
    if part_type == "pot":
        return POT_SERIES
    return "E12" if part_type == "capacitor" else "E24"


def preferred_deviation(x: float, series="E24") -> float:
    """Signed relative distance from the nearest preferred value:
    ``(x - nearest) / nearest``; positive when ``x`` is above it."""
    n = nearest_preferred(x, series)
    return (float(x) - n) / n
