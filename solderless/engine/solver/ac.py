"""Small-signal AC response at the DC operating point.

Devices are replaced by their port conductances dI/dv at the operating point
and their junction capacitances there (each device module's
``capacitances``: depletion, diffusion and transcapacitances as SPICE's AC
analysis takes them); capacitors become admittances sC and inductors
impedances sL (exact s, no discretisation).  The input is a unit AC voltage at the circuit's input
source.

Input impedance: seen at the input jack, looking into the circuit.  If the
flattened input is a V source plus a series resistor named ``<input>.rs``,
the jack is that resistor's far end and Zin = v(jack) / i(rs), i.e. the
source's own series resistance is excluded; otherwise Zin = v(p, n) / (current
delivered by the source).
"""
from __future__ import annotations

import numpy as np

from solderless.engine.circuit import Circuit, GROUND, canonical_net
from solderless.engine.errors import DesignError
from solderless.engine.solver.dcop import solve_dc
from solderless.engine.solver.mna import Network

#: The frequency range ``solderless ac`` and the workbench use by default:
#: 10 Hz to 40 kHz (the audio band and an octave above it, where a stage
#: that peaks or rings shows), log-spaced.
DEFAULT_FMIN_HZ = 10.0
DEFAULT_FMAX_HZ = 40e3
DEFAULT_POINTS = 200


def default_frequencies() -> np.ndarray:
    """The default frequency grid (Hz): DEFAULT_POINTS log-spaced points."""
    return np.geomspace(DEFAULT_FMIN_HZ, DEFAULT_FMAX_HZ, DEFAULT_POINTS)


def small_signal(net: Network, values: dict):
    """(dc, Y0, Ys): the MNA matrix linearised at the operating point is
    Y0 + s*Ys: devices by their port conductances, C as sC, L as sL, and
    each device's junction capacitances at the operating point (SPICE's
    small-signal model). The AC response and the noise analysis both solve
    with it."""
    dc = solve_dc(net, values)
    Y0 = net.build_S(values, None).astype(complex)
    if net.np_:
        Y0 -= net._bn @ dc.G @ net.port_rows()
    Ys = np.zeros((net.nw, net.nw))

    def cap(a, b, ca, cb, val):
        for r, sr in ((a, 1.0), (b, -1.0)):
            if r < 0:
                continue
            for c, sc in ((ca, 1.0), (cb, -1.0)):
                if c >= 0:
                    Ys[r, c] += sr * sc * val

    for s in net.states:
        if s.junction >= 0:
            continue  # taken below at this operating point, whatever the setting
        val = s.value if s.value is not None else values[s.name]
        if s.kind == "C":
            cap(s.a, s.b, *s.ctrl, val)
        else:
            Ys[s.branch, s.branch] -= val
    if net.junctions:
        for j, c in zip(net.junctions, net.junction_caps(dc.w, dc.v)):
            cap(j.a, j.b, j.ca, j.cb, c)
    return dc, Y0, Ys


def ac_response(circuit: Circuit | Network, freqs, values: dict | None = None):
    """Frequency response from the input source to the output, and Zin.

    Parameters
    ----------
    circuit : flat circuit (with ``input_source``) or a prepared Network.
    freqs : frequencies in Hz (array-like, > 0).
    values : element values overriding the circuit's (optional).

    Returns
    -------
    freqs : float64 array, H : complex array (V/V), Zin : complex array (ohm).

    Example
    -------
    >>> f, H, Zin = ac_response(circuit, np.geomspace(20, 20e3, 50))
    """
    net = circuit if isinstance(circuit, Network) else Network(circuit)
    values = dict(net.values if values is None else values)
    if net.input_index < 0:
        raise DesignError("the circuit has no input source for an AC response",
                          hint="name the V element that the signal drives as input_source")
    freqs = np.atleast_1d(np.asarray(freqs, dtype=np.float64))
    dc, S0, Ys = small_signal(net, values)
    sj = 2j * np.pi * freqs
    Y = S0[None] + sj[:, None, None] * Ys[None]
    rhs = np.broadcast_to(net._bu[:, net.input_index].astype(complex),
                          (freqs.size, net.nw))[..., None]
    w = np.linalg.solve(Y, rhs)[..., 0]

    def vn(n):
        k = net.net_index.get(canonical_net(n), -1) if canonical_net(n) != GROUND else -1
        return w[:, k] if k >= 0 else np.zeros(freqs.size, complex)

    a, b = net.circuit.output
    H = vn(a) - vn(b)
    src = net.sources[net.input_index]
    rs = net.elements.get(f"{src.name}.rs")
    if rs is not None and rs.kind == "R" and src.nodes[0] in rs.nodes:
        jack = rs.nodes[1] if rs.nodes[0] == src.nodes[0] else rs.nodes[0]
        i_rs = (vn(src.nodes[0]) - vn(jack)) / values[rs.name]
        with np.errstate(divide="ignore", invalid="ignore"):  # no current: Zin = inf
            Zin = (vn(jack) - vn(src.nodes[1])) / i_rs
    else:
        with np.errstate(divide="ignore", invalid="ignore"):  # no current: Zin = inf
            Zin = (vn(src.nodes[0]) - vn(src.nodes[1])) / (-w[:, net.branch_of[src.name]])
    return freqs, H, Zin
