"""Device dispatch: every device evaluated and limited by its type code.

Devices live in one flat parameter array and are told apart by the integer
``CODE`` of their module (solderless/engine/devices/*.py), so one compiled
kernel serves every circuit.  numba needs each device's call site spelled
out: a new device adds one branch to :func:`eval_rare` (and to
:func:`limit_rare` if it limits its steps), comparing against its module's
``CODE`` (numba folds the module attribute into a constant); a common
device with a small law goes to :func:`eval_common` (:func:`limit_common`)
instead, inlined into the per-sample paths.  :func:`eval_one` and
:func:`limit_one` are the same dispatch as one call.
"""
from __future__ import annotations

from solderless.engine.devices import behav, bjt, diode, jfet, mosfet, opamp, ota, switch
from solderless.engine.solver.kernel.params import BYPASS_RATIO, kernel_jit
from solderless.engine.solver.kernel_layout import MEM_ATOL, PORT_G0


@kernel_jit()
def eval_rare(c, par, pa, v, po, i, G):
    """The rarer devices' laws (MOSFET, behavioural source, switch), one
    real call: kept out of line so the compiled per-sample code stays
    small."""
    if c == mosfet.CODE:
        mosfet.evaluate(par, pa, v, po, i, G)
    elif c == behav.CODE:
        behav.evaluate(par, pa, v, po, i, G)
    elif c == switch.CODE:
        switch.evaluate(par, pa, v, po, i, G)


@kernel_jit(inline="always")
def eval_common(c, par, pa, v, po, i, G):
    """Evaluate one device by type code, the common devices' laws (BJT,
    diode, op-amp, OTA, JFET) inlined at the call site, the rest through
    :func:`eval_rare`.  The per-sample paths (:func:`eval_ports`) call it
    directly: a real call passes each array as about seven machine words,
    at the designs' sizes 50-70 cycles per device call, as much as a
    junction's law itself (the CPU's cycle counter around each call: an
    op-amp clamp 100 -> 30 cycles, a diode 80 -> 35, a BJT 130 -> 80)."""
    if c == bjt.CODE:
        bjt.evaluate(par, pa, v, po, i, G)
    elif c == diode.CODE:
        diode.evaluate(par, pa, v, po, i, G)
    elif c == opamp.CODE:
        opamp.evaluate(par, pa, v, po, i, G)
    elif c == ota.CODE:
        ota.evaluate(par, pa, v, po, i, G)
    elif c == jfet.CODE:
        jfet.evaluate(par, pa, v, po, i, G)
    else:
        eval_rare(c, par, pa, v, po, i, G)


@kernel_jit()
def eval_one(c, par, pa, v, po, i, G):
    """Evaluate one device by type code: port currents into i[po:], its
    Jacobian block into G[po:, po:] (:func:`eval_common` as one call: the
    operating point's solver)."""
    eval_common(c, par, pa, v, po, i, G)


@kernel_jit()
def limit_rare(c, par, pa, vn, vo, po):
    """The limits of the devices :func:`limit_common` does not inline."""
    if c == jfet.CODE:
        jfet.limit(par, pa, vn, vo, po)
    elif c == ota.CODE:
        ota.limit(par, pa, vn, vo, po)
    elif c == mosfet.CODE:
        mosfet.limit(par, pa, vn, vo, po)


@kernel_jit(inline="always")
def limit_common(c, par, pa, vn, vo, po):
    """Junction limiting of one device's step vo -> vn by type code (in
    place on vn; devices without a limit take the step as it is), the
    common limits inlined (see :func:`eval_common`)."""
    if c == bjt.CODE:
        bjt.limit(par, pa, vn, vo, po)
    elif c == diode.CODE:
        diode.limit(par, pa, vn, vo, po)
    elif c == opamp.CODE:
        opamp.limit(par, pa, vn, vo, po)
    else:
        limit_rare(c, par, pa, vn, vo, po)


@kernel_jit()
def limit_one(c, par, pa, vn, vo, po):
    """:func:`limit_common` as one call (the operating point's solver)."""
    limit_common(c, par, pa, vn, vo, po)


@kernel_jit()
def charge_history(dcode, dpo, dpa, par, v, q, qr, afresh):
    """Each charge-storing device's -q(v)/T per port into q, at the
    sample's solution v; the next sample takes them into p as the charge
    currents' history.  Per sample (afresh False) by its ``history``: the
    charge its last evaluation computed, continued to v, so no second
    evaluation.  Afresh (the runners' first sample after a reset or new
    device parameters, kernel_layout.CHARGE_AFRESH: the solver has no
    evaluation to continue) by its law, ``charges``, with every port of
    other devices set to 0; otherwise those are left as they are (zero)."""
    if afresh:
        for r in range(q.size):
            q[r] = 0.0
    for d in range(dcode.size):
        c = dcode[d]
        if c == bjt.CODE:
            if afresh:
                bjt.charges(par, dpa[d], v, dpo[d], q)
            else:
                bjt.history(par, dpa[d], v, dpo[d], q)
        elif c == diode.CODE:
            if afresh:
                diode.charges(par, dpa[d], v, dpo[d], q)
            else:
                diode.history(par, dpa[d], v, dpo[d], q)
        elif c == jfet.CODE:
            if afresh:
                jfet.charges(par, dpa[d], v, dpo[d], q)
            else:
                jfet.history(par, dpa[d], v, dpo[d], q)
        elif c == mosfet.CODE:
            if afresh:
                mosfet.charges(par, dpa[d], v, dpo[d], q)
            else:
                mosfet.history(par, dpa[d], v, dpo[d], q)
    # BDF2's history from the two last samples' r = -a0*q/T (qr: the older;
    # afresh, the circuit is taken at rest, so both are the same)
    for r in range(q.size):
        rn = q[r]
        if afresh:
            qr[r] = rn
        q[r] = (4.0 * rn - qr[r]) * (1.0 / 3.0)
        qr[r] = rn


@kernel_jit()
def eval_devices(dcode, dpo, dpa, par, v, i, G):
    """Port currents i(v) and Jacobian blocks G of all devices (no bypass,
    no port offset: the operating point's solver)."""
    for d in range(dcode.size):
        eval_one(dcode[d], par, dpa[d], v, dpo[d], i, G)


@kernel_jit(inline="always")
def limit_devices(dcode, dpo, dpa, par, vn, vo):
    """Junction limiting of a Newton step vo -> vn, in place on vn."""
    for d in range(dcode.size):
        limit_one(dcode[d], par, dpa[d], vn, vo, dpo[d])


@kernel_jit(inline="always")
def limit_moved(dcode, dpo, dnp, dpa, par, dqs, vn, vo):
    """:func:`limit_devices` for the per-sample path: a device's limit is
    called only when one of its port voltages moved by its quiet step dqs
    or more (smaller steps it would return unchanged), which spares most
    calls once the solution tracks the signal."""
    for d in range(dcode.size):
        po = dpo[d]
        q = dqs[d]
        m = dnp[d]
        if m == 2:
            if not (abs(vn[po] - vo[po]) < q and abs(vn[po + 1] - vo[po + 1]) < q):
                limit_common(dcode[d], par, dpa[d], vn, vo, po)
        elif m == 1:
            if not abs(vn[po] - vo[po]) < q:
                limit_common(dcode[d], par, dpa[d], vn, vo, po)
        else:
            for a in range(m):
                if not abs(vn[po + a] - vo[po + a]) < q:
                    limit_common(dcode[d], par, dpa[d], vn, vo, po)
                    break


@kernel_jit(inline="always")
def eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem):
    """Device port currents less the port offset conductance PORT_G0 that the
    linear network carries (see kernel_layout.PORT_G0): i - PORT_G0*v,
    G - PORT_G0.

    Bypass (as SPICE's BYPASS option): a device whose port voltages moved
    less than BYPASS_RATIO times the error tolerance mem[MEM_ATOL] since its
    last evaluation (veval, ieval) is not re-evaluated; its currents are
    continued linearly with its last Jacobian block (error below the
    tolerance: see BYPASS_RATIO).
    One- and two-port devices (diode; BJT, JFET, op-amp) take straight-line
    paths: loops with a trip count of 1 or 2 cost more in overhead than in
    arithmetic.
    """
    btol = BYPASS_RATIO * mem[MEM_ATOL]
    for d in range(dcode.size):
        po = dpo[d]
        m = dnp[d]
        if m == 2:
            d0 = v[po] - veval[po]
            d1 = v[po + 1] - veval[po + 1]
            far = not (abs(d0) < btol and abs(d1) < btol)
        elif m == 1:
            d0 = v[po] - veval[po]
            far = not abs(d0) < btol
        else:
            far = False
            for a in range(m):
                if not abs(v[po + a] - veval[po + a]) < btol:
                    far = True
        if far:
            eval_common(dcode[d], par, dpa[d], v, po, i, G)
            if m == 2:
                v0 = v[po]
                v1 = v[po + 1]
                i0 = i[po] - PORT_G0 * v0
                i1 = i[po + 1] - PORT_G0 * v1
                i[po] = i0
                i[po + 1] = i1
                G[po, po] -= PORT_G0
                G[po + 1, po + 1] -= PORT_G0
                veval[po] = v0
                veval[po + 1] = v1
                ieval[po] = i0
                ieval[po + 1] = i1
            else:
                for a in range(m):
                    r = po + a
                    i[r] -= PORT_G0 * v[r]
                    G[r, r] -= PORT_G0
                    veval[r] = v[r]
                    ieval[r] = i[r]
        elif m == 2:
            i[po] = ieval[po] + G[po, po] * d0 + G[po, po + 1] * d1
            i[po + 1] = ieval[po + 1] + G[po + 1, po] * d0 + G[po + 1, po + 1] * d1
        elif m == 1:
            i[po] = ieval[po] + G[po, po] * d0
        else:
            for a in range(m):
                s = ieval[po + a]
                for b in range(m):
                    s += G[po + a, po + b] * (v[po + b] - veval[po + b])
                i[po + a] = s


@kernel_jit()
def eval_ports_outlined(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem):
    """:func:`eval_ports` as a real call (rare paths)."""
    eval_ports(dcode, dpo, dnp, dpa, par, v, i, G, veval, ieval, mem)


@kernel_jit(inline="always")
def correct_currents(dcode, dpo, dnp, G, dv, i):
    """First-order correction of the port currents for the last step dv."""
    for d in range(dcode.size):
        po = dpo[d]
        m = dnp[d]
        if m == 2:
            d0 = dv[po]
            d1 = dv[po + 1]
            i[po] += G[po, po] * d0 + G[po, po + 1] * d1
            i[po + 1] += G[po + 1, po] * d0 + G[po + 1, po + 1] * d1
        elif m == 1:
            i[po] += G[po, po] * dv[po]
        else:
            for a in range(m):
                s = 0.0
                for b in range(m):
                    s += G[po + a, po + b] * dv[po + b]
                i[po + a] += s
