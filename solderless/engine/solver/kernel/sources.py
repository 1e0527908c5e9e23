"""Independent sources per sample: SPICE-style waveforms and the input."""
from __future__ import annotations

import math

from solderless.engine.solver.kernel.params import kernel_jit
from solderless.engine.solver.kernel_layout import WAVE_NOISE, WAVE_PULSE, WAVE_PWL, WAVE_SIN


@kernel_jit(inline="always")
def wave_value(kind, par, t):
    """SPICE-style source waveform value at time t (kind: a WAVE_* code of
    kernel_layout; anything else is 0).  par holds this source's parameters
    only."""
    if kind == WAVE_SIN:  # SIN(VO VA FREQ TD THETA PHASE)
        vo, va, f, td, th, ph = par[0], par[1], par[2], par[3], par[4], par[5]
        phr = ph * math.pi / 180.0
        if t < td:
            return vo + va * math.sin(phr)
        tt = t - td
        return vo + va * math.exp(-tt * th) * math.sin(2.0 * math.pi * f * tt + phr)
    if kind == WAVE_PULSE:  # PULSE(V1 V2 TD TR TF PW PER)
        v1, v2, td, tr, tf, pw, per = par[0], par[1], par[2], par[3], par[4], par[5], par[6]
        if t <= td:  # V1 up to and at TD, the rise starts there (as ngspice)
            return v1
        tt = t - td
        if per > 0.0 and per < 1e300:
            tt = tt - per * math.floor(tt / per)
        if tt < tr:
            return v1 + (v2 - v1) * tt / tr
        tt -= tr
        if tt < pw:
            return v2
        tt -= pw
        if tt < tf:
            return v2 + (v1 - v2) * tt / tf
        return v1
    if kind == WAVE_PWL:  # PWL(t0 v0 t1 v1 ...)
        n = par.size // 2
        if t <= par[0]:
            return par[1]
        for k in range(1, n):
            t1 = par[2 * k]
            if t <= t1:
                t0 = par[2 * k - 2]
                v0 = par[2 * k - 1]
                v1 = par[2 * k + 1]
                if t1 <= t0:
                    return v1
                return v0 + (v1 - v0) * (t - t0) / (t1 - t0)
        return par[2 * n - 1]
    if kind == WAVE_NOISE:  # live noise (solver/livenoise.py), par = [dt, k0, s0 ...]:
        # kernel sample round(t/dt) reads s[round(t/dt) - k0]; 0 outside
        if par[0] <= 0.0:
            return 0.0
        j = int(t / par[0] + 0.5) - int(par[1])
        if j < 0 or j >= par.size - 2:
            return 0.0
        return par[2 + j]
    return 0.0


@kernel_jit(inline="always")
def load_sources(z, nx, uvar, inp, xk, skind, sptr, spar, t):
    """This sample's varying sources into z[nx:]: the input takes xk, a
    waveform source its value at time t."""
    for j in range(uvar.size):
        s = uvar[j]
        if s == inp:
            z[nx + j] = xk
        else:
            z[nx + j] = wave_value(skind[s], spar[sptr[s]:sptr[s + 1]], t)
