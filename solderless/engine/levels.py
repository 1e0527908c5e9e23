"""The one level calibration every command uses.

A digital sample of full scale (1.0) stands for ``FULL_SCALE_V`` volts peak
at the jack, on the way in (a WAV file or the sound card driving the
circuit's input jack) and on the way out (the output jack written to a WAV
file or the sound card): a full-scale sine is +3 dBu (0.775 V RMS x
10^(3/20) = 1.095 V RMS, 1.548 V peak; dBu referred to 0.775 V RMS, common
practice). ``source``, ``render``, ``demo``, ``play`` and the workbench all
read it from here, so the same file gives the same volts at the jack in
every command; ``--in-full-scale`` / ``--out-full-scale`` (``play``) and
``--input-fs-volts`` / ``--output-fs-volts`` (``render``) change it for one
run, and every report states the calibration it used.
"""
from __future__ import annotations

import math

#: dBu of a full-scale sine (the calibration, chosen once).
FULL_SCALE_DBU = 3.0
#: dBu reference: 0.775 V RMS (common practice; 1 mW in 600 ohm, rounded as
#: the live meters round it, solderless/engine/live/meters.py).
DBU_REF_VRMS = 0.775
#: Peak volts at the jack for digital full scale, input and output.
FULL_SCALE_V = DBU_REF_VRMS * 10 ** (FULL_SCALE_DBU / 20) * math.sqrt(2.0)


def describe(volts: float = FULL_SCALE_V) -> str:
    """One line stating a calibration, e.g. for ``--help`` and reports."""
    dbu = 20 * math.log10(volts / math.sqrt(2.0) / DBU_REF_VRMS)
    return f"full scale = {volts:.4g} V peak at the jack ({dbu:+.1f} dBu sine)"
