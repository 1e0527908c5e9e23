"""Output stage: A/B crossfade, loudness-match gain, output level with a
start ramp, the safety guard and the safety limiter. Runs on the audio thread.

Per sample, in this order:

1. **Guard** on the circuit's output volts: NaN/inf (reason 1,
   ``GUARD_NONFINITE``) or a magnitude above the runaway limit (reason 2,
   ``GUARD_RUNAWAY``, default 100 V: no pedal on 9-18 V rails can put that
   out; common practice) mutes at once. While muted for reason 1, 2 or 5
   (``GUARD_REARMING``) the guard watches the circuit: once both voices' outputs have
   been finite and inside the runaway limit for ``REARM_S`` it re-arms by
   itself, and the output ramps up from silence (start-up ramp). Reason 3
   latches until :func:`reset_guard` (the user's ``unmute``).
2. **Mix** A and B with a linear crossfade (the two signals are correlated, so
   a linear fade keeps the level; common practice), each scaled by its
   loudness-match gain (smoothed with a one-pole, ~50 ms).
3. **Level**: volts -> full-scale units (1 / output full-scale peak volts) times
   the output level, which moves towards its target through a one-pole
   smoother. Starting from zero this is the start-up ramp (time constant
   ``LEVEL_TAU_S``).
4. **Sustained full scale**: a one-pole mean square (time constant 50 ms)
   above that of a full-scale sine (0.5) for longer than ``FULL_SCALE_HOLD_S``
   mutes (reason 3, ``GUARD_FULL_SCALE``).
5. **Limiter**: instant attack (gain never above ceiling / |x|, so the output
   cannot exceed the ceiling), exponential release (time constant
   ``RELEASE_S``). A final clamp at the ceiling is kept as a second line.
6. **Device guard**: the sample about to go to the sound card must be finite
   and within the ceiling, and the ceiling itself must be in (0, 1]; anything
   else (a corrupted level or ceiling parameter, NaN through the mix) mutes
   with reason 5 (``GUARD_DEVICE``) instead of reaching the device. So every sample the host
   hands to the device is finite and at most the ceiling, by construction.

All state lives in float64 arrays owned by the host; nothing is allocated.
"""
from __future__ import annotations

import math

import numba
import numpy as np

LEVEL_TAU_S = 0.5
RELEASE_S = 0.100
GAIN_TAU_S = 0.050
FULL_SCALE_HOLD_S = 1.0
RUNAWAY_V = 100.0
DEFAULT_CEILING_DBFS = -6.0
XFADE_S = 0.020
REARM_S = 0.5
"""Sane circuit output needed before a guard mute (reasons 1, 2, 5) re-arms."""

# guard codes: st[S_GUARD], why the output is muted (0: it is not)
GUARD_OFF = 0
GUARD_NONFINITE = 1     # the circuit output became NaN or infinite
GUARD_RUNAWAY = 2       # the circuit output ran beyond the runaway limit
GUARD_FULL_SCALE = 3    # sustained full scale (latches until reset_guard)
GUARD_CALLBACK = 4      # set by the host when its audio callback failed
GUARD_DEVICE = 5        # a sample for the sound card was bad (device guard)
#: Mutes that re-arm by themselves once the circuit output is sane again.
GUARD_REARMING = (GUARD_NONFINITE, GUARD_RUNAWAY, GUARD_DEVICE)
GUARD_REASONS = {
    GUARD_OFF: "",
    GUARD_NONFINITE: "the circuit output became NaN or infinite",
    GUARD_RUNAWAY: "the circuit output ran away beyond the runaway limit",
    GUARD_FULL_SCALE: "the output sat at full scale for too long",
    GUARD_CALLBACK: "the audio callback failed",
    GUARD_DEVICE: "a sample for the sound card was not finite or above the ceiling",
}

# state slots
S_LEVEL, S_AB, S_LIM, S_MS, S_FS_RUN, S_GUARD, S_GA, S_GB, S_SANE, S_REARMS, \
    S_TRIPS = range(11)
N_STATE = 11
# parameter slots
(P_LEVEL, P_LEVEL_COEF, P_AB_TARGET, P_AB_STEP, P_CEILING, P_REL_COEF,
 P_RUNAWAY, P_FS_LIMIT, P_MS_COEF, P_GA, P_GB, P_GAIN_COEF, P_REARM) = range(13)
N_PARAMS = 13


def make_state() -> np.ndarray:
    """Fresh output-stage state: silent (level 0, ramps up), A selected."""
    s = np.zeros(N_STATE)
    s[S_LIM] = 1.0
    s[S_GA] = 1.0
    s[S_GB] = 1.0
    return s


def make_params(fs: float, out_full_scale_v: float, level_db: float = 0.0,
                ceiling_dbfs: float = DEFAULT_CEILING_DBFS,
                runaway_v: float = RUNAWAY_V) -> np.ndarray:
    """Parameter vector for :func:`output_stage` (see module docstring).
    Level and ceiling are checked (:mod:`solderless.engine.live.limits`): a non-finite
    or out-of-range value raises AudioError."""
    from solderless.engine.live.limits import check_ceiling_dbfs, check_level_db, check_rate
    fs = check_rate(fs)
    level_db = check_level_db(level_db)
    ceiling_dbfs = check_ceiling_dbfs(ceiling_dbfs)
    p = np.zeros(N_PARAMS)
    p[P_LEVEL] = 10.0 ** (level_db / 20.0) / out_full_scale_v
    p[P_LEVEL_COEF] = 1.0 - math.exp(-1.0 / (LEVEL_TAU_S * fs))
    p[P_AB_TARGET] = 0.0
    p[P_AB_STEP] = 1.0 / (XFADE_S * fs)
    p[P_CEILING] = 10.0 ** (ceiling_dbfs / 20.0)
    p[P_REL_COEF] = 1.0 - math.exp(-1.0 / (RELEASE_S * fs))
    p[P_RUNAWAY] = runaway_v
    p[P_FS_LIMIT] = FULL_SCALE_HOLD_S * fs
    p[P_MS_COEF] = 1.0 - math.exp(-1.0 / (0.050 * fs))
    p[P_GA] = 1.0
    p[P_GB] = 1.0
    p[P_GAIN_COEF] = 1.0 - math.exp(-1.0 / (GAIN_TAU_S * fs))
    p[P_REARM] = REARM_S * fs
    return p


@numba.njit(nogil=True, cache=True)
def output_stage(ya, yb, n, st, p, mixv, out):  # pragma: no cover - compiled
    """Mix, level, guard and limit ``n`` samples (audio thread).

    ya, yb : circuit output volts of voice A and B (pass ya twice for one voice).
    st, p : state and parameters (see module docstring).
    mixv : receives the mixed volts at the output jack (before level/limiter).
    out : receives full-scale samples for the sound card.
    Returns the deepest limiter gain in the block (linear, <= 1).
    """
    ceiling = p[P_CEILING]
    if not (ceiling > 0.0 and ceiling <= 1.0):
        # a corrupted ceiling: nothing can be trusted to the device
        if st[S_GUARD] != GUARD_DEVICE:
            st[S_TRIPS] += 1.0
        st[S_GUARD] = GUARD_DEVICE
        st[S_SANE] = 0.0
        st[S_LEVEL] = 0.0
        for i in range(n):
            mixv[i] = 0.0
            out[i] = 0.0
        return 0.0
    gmin = 1.0
    for i in range(n):
        a = ya[i]
        b = yb[i]
        sane = np.isfinite(a) and np.isfinite(b) and abs(a) <= p[P_RUNAWAY] \
            and abs(b) <= p[P_RUNAWAY]
        g0 = st[S_GUARD]
        if g0 == GUARD_OFF and not sane:
            st[S_GUARD] = (GUARD_NONFINITE if not (np.isfinite(a) and np.isfinite(b))
                           else GUARD_RUNAWAY)
            st[S_TRIPS] += 1.0
            st[S_SANE] = 0.0
        elif g0 == GUARD_NONFINITE or g0 == GUARD_RUNAWAY or g0 == GUARD_DEVICE:
            # muted by the circuit (or a bad sample): re-arm once it is sane
            if sane:
                st[S_SANE] += 1.0
                if st[S_SANE] >= p[P_REARM]:
                    st[S_GUARD] = GUARD_OFF
                    st[S_SANE] = 0.0
                    st[S_LEVEL] = 0.0       # ramp up again from silence
                    st[S_MS] = 0.0
                    st[S_FS_RUN] = 0.0
                    st[S_LIM] = 1.0
                    st[S_REARMS] += 1.0
            else:
                st[S_SANE] = 0.0
        if st[S_GUARD] != GUARD_OFF:
            mixv[i] = 0.0
            out[i] = 0.0
            st[S_LEVEL] = 0.0
            continue
        # A/B position and matching gains
        pos = st[S_AB]
        tgt = p[P_AB_TARGET]
        if pos < tgt:
            pos = min(tgt, pos + p[P_AB_STEP])
        elif pos > tgt:
            pos = max(tgt, pos - p[P_AB_STEP])
        st[S_AB] = pos
        st[S_GA] += p[P_GAIN_COEF] * (p[P_GA] - st[S_GA])
        st[S_GB] += p[P_GAIN_COEF] * (p[P_GB] - st[S_GB])
        v = (1.0 - pos) * st[S_GA] * a + pos * st[S_GB] * b
        mixv[i] = v
        # level with start ramp
        st[S_LEVEL] += p[P_LEVEL_COEF] * (p[P_LEVEL] - st[S_LEVEL])
        s = v * st[S_LEVEL]
        # sustained full scale
        st[S_MS] += p[P_MS_COEF] * (s * s - st[S_MS])
        if st[S_MS] >= 0.5:
            st[S_FS_RUN] += 1.0
            if st[S_FS_RUN] > p[P_FS_LIMIT]:
                st[S_GUARD] = GUARD_FULL_SCALE
                st[S_TRIPS] += 1.0
                out[i] = 0.0
                continue
        else:
            st[S_FS_RUN] = 0.0
        # limiter: instant attack, exponential release
        g = st[S_LIM]
        g += p[P_REL_COEF] * (1.0 - g)
        mag = abs(s)
        if mag * g > ceiling:
            g = ceiling / mag
        if not (g >= 0.0 and g <= 1.0):     # NaN or inf through level or mix
            g = 0.0
        st[S_LIM] = g
        if g < gmin:
            gmin = g
        o = s * g
        if o > ceiling:
            o = ceiling
        elif o < -ceiling:
            o = -ceiling
        # device guard: nothing non-finite or beyond the ceiling leaves here
        if not (abs(o) <= ceiling):
            st[S_GUARD] = GUARD_DEVICE
            st[S_TRIPS] += 1.0
            st[S_SANE] = 0.0
            st[S_LEVEL] = 0.0
            st[S_MS] = 0.0
            st[S_LIM] = 1.0
            mixv[i] = 0.0
            out[i] = 0.0
            continue
        out[i] = o
    return gmin


@numba.njit(nogil=True, cache=True)
def crossfade_into(y_old, y_new, n, pos, step):  # pragma: no cover - compiled
    """Linear fade from ``y_old`` to ``y_new`` written into ``y_new``; returns
    the new position (1.0 when done). Used to swap a rebuilt circuit in.
    A non-finite old sample is left out (the new circuit alone), so a rebuilt
    circuit can replace one that went NaN without carrying the NaN over."""
    for i in range(n):
        pos = min(1.0, pos + step)
        o = y_old[i]
        if np.isfinite(o):
            y_new[i] = (1.0 - pos) * o + pos * y_new[i]
    return pos


def reset_guard(st: np.ndarray) -> None:
    """Clear a guard mute; output restarts from silence with the start ramp."""
    st[S_LEVEL] = 0.0
    st[S_MS] = 0.0
    st[S_FS_RUN] = 0.0
    st[S_LIM] = 1.0
    st[S_SANE] = 0.0
    st[S_GUARD] = GUARD_OFF
