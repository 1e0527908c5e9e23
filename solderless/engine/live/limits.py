"""The one place that says which output level, limiter ceiling, sample rate
and calibration the live path accepts.

Every front end (``solderless play`` options, the terminal console, the
workbench, :class:`solderless.engine.live.host.LiveHost` itself) calls these checks, so
a value that could send NaN, infinity or more than full scale to the sound
card is refused before it reaches the audio thread, with one clear line
(:class:`solderless.engine.errors.AudioError`).

Ranges (common practice for audio interfaces and monitoring):

* output level: -120 dB (silence for any practical purpose; the workbench's
  mute) to +40 dB (more gain than any monitoring chain needs; the limiter
  still holds the ceiling).
* limiter ceiling: -60 dBFS to 0 dBFS. Above 0 dBFS a converter clips, so a
  ceiling there protects nothing.
* sample rate: 8 kHz to 192 kHz, the span audio interfaces offer.
* calibration (full-scale peak volts at a jack): 1 mV to 1 kV.

Loud output can damage hearing and speakers: the ceiling is the last line
before the converter, so it is never allowed to be non-finite or above 0 dBFS.
"""
from __future__ import annotations

import math

from solderless.engine.errors import AudioError

LEVEL_DB_MIN = -120.0
LEVEL_DB_MAX = 40.0
CEILING_DBFS_MIN = -60.0
CEILING_DBFS_MAX = 0.0
RATE_MIN_HZ = 8000.0
RATE_MAX_HZ = 192000.0
FULL_SCALE_V_MIN = 1e-3
FULL_SCALE_V_MAX = 1e3


def _number(value, what: str, unit: str, hint: str) -> float:
    """``value`` as a float, or AudioError if it is not a number at all or is
    NaN or infinite."""
    try:
        x = float(value)
    except (TypeError, ValueError, OverflowError):
        raise AudioError(f"the {what} '{value}' is not a number", hint=hint) from None
    if not math.isfinite(x):
        raise AudioError(f"the {what} must be a finite number of {unit}, not {value}",
                         hint=hint)
    return x


def _in_range(value, what: str, unit: str, lo: float, hi: float, hint: str) -> float:
    """``value`` as a finite float from ``lo`` to ``hi``, or AudioError."""
    x = _number(value, what, unit, hint)
    if not lo <= x <= hi:
        raise AudioError(f"the {what} {x:g} {unit} is out of range", hint=hint)
    return x


def check_level_db(value) -> float:
    """Output level in dB: finite and from ``LEVEL_DB_MIN`` to ``LEVEL_DB_MAX``.
    Returns it as a float; raises AudioError otherwise."""
    return _in_range(value, "output level", "dB", LEVEL_DB_MIN, LEVEL_DB_MAX,
                     f"give a level from {LEVEL_DB_MIN:g} to {LEVEL_DB_MAX:+g} dB")


def check_ceiling_dbfs(value) -> float:
    """Limiter ceiling in dBFS: finite and from ``CEILING_DBFS_MIN`` to 0."""
    return _in_range(value, "limiter ceiling", "dBFS", CEILING_DBFS_MIN, CEILING_DBFS_MAX,
                     f"give a ceiling from {CEILING_DBFS_MIN:g} to {CEILING_DBFS_MAX:g} "
                     "dBFS (default -6)")


def check_rate(value) -> float:
    """Live sample rate in Hz: finite and from ``RATE_MIN_HZ`` to ``RATE_MAX_HZ``."""
    return _in_range(value, "sample rate", "Hz", RATE_MIN_HZ, RATE_MAX_HZ,
                     f"give a rate from {RATE_MIN_HZ:g} to {RATE_MAX_HZ:g} Hz (48000 is usual)")


def check_full_scale_v(value, what: str = "output") -> float:
    """Calibration: peak volts at the jack for digital full scale."""
    return _in_range(value, f"{what} calibration", "V", FULL_SCALE_V_MIN, FULL_SCALE_V_MAX,
                     f"give the {what} calibration from {FULL_SCALE_V_MIN:g} V to "
                     f"{FULL_SCALE_V_MAX:g} V peak (1.55V), or as dBu (+3dBu)")
