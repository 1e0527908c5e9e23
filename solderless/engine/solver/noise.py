"""Noise sources of a circuit at its DC operating point.

Every source is a current source between two nets of the network (as
ngspice's ``.noise`` places them; ngspice-39 source files resnoise.c,
dionoise.c, bjtnoise.c, jfetnoise.c, mos1noise.c), with a one-sided power
spectral density in A^2/Hz:

* thermal noise of a resistance R (Johnson-Nyquist): ``4 k T / R`` -- every
  R element (pots are two resistors) and every series resistance a device
  adds (diode RS, BJT RB/RC/RE, JFET and MOSFET RD/RS).  A BJT base
  resistance that depends on the current counts as rbb = v/i at the
  operating point (ngspice's gx).
* shot noise of a junction current I: ``2 q |I|`` -- a diode's current
  across its junction, a BJT's base current (B'-E') and collector current
  (C'-E').
* channel thermal noise of a FET: ``4 k T * (2/3) |gm|`` between drain and
  source (JFET, MOSFET level 1).
* flicker noise where the model card gives KF: ``KF * |I|**AF / f``
  (AF default 1): the diode current, the BJT base current (B'-E'), the
  JFET drain current; a MOSFET's drain current over W*M*Leff*Cox^2 as
  ngspice-39's level 1 (Cox = 3.9*eps0/TOX; without TOX on the card it is
  left out and named in ``NoiseSources.notes``).

T is the circuit temperature (27 degC unless the circuit says otherwise),
k and q the SI's exact Boltzmann constant and elementary charge.
Macromodels (op-amp, OTA), behavioural sources and switches are
noiseless here: their parameters describe no physical noise, and the
noise a real op-amp adds at its input is not part of the macromodel.

Shot and flicker noise are taken from the DC operating point current
(small-signal noise, as ngspice's ``.noise``); the live simulation uses the
same figures (:mod:`solderless.engine.solver.livenoise`), so it does not
follow a junction current that moves with the signal.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from solderless.engine.devices._common import K_BOLTZMANN, Q_ELEMENTARY, circuit_temp

THERMAL = "thermal"
SHOT = "shot"
FLICKER = "flicker"

#: Vacuum permittivity, F/m (as ngspice-39 writes it: 8.854214871e-12).
EPS0 = 8.854214871e-12

#: Device kinds whose noise is modelled (the rest are noiseless macromodels).
NOISY_DEVICES = ("D", "Q", "J", "M")


@dataclass
class NoiseSource:
    """One noise current between nets ``a`` and ``b`` (names as the network
    has them; ground is "0").  PSD(f) = white + flicker / f, A^2/Hz."""
    name: str          # e.g. "R1", "Q1.ic", "Q1.rb", "D1.flicker"
    owner: str         # the element it belongs to
    kind: str          # THERMAL, SHOT or FLICKER
    a: str
    b: str
    white: float = 0.0     # A^2/Hz, frequency independent part
    flicker: float = 0.0   # A^2 (PSD flicker / f)

    def psd(self, f) -> np.ndarray:
        """One-sided PSD at frequencies f (Hz), A^2/Hz."""
        f = np.asarray(f, dtype=np.float64)
        return self.white + self.flicker / f


@dataclass
class NoiseSources:
    sources: list[NoiseSource]
    temperature_k: float
    #: what is left out, one line each (e.g. a MOSFET's KF)
    notes: list[str] = field(default_factory=list)


def _param(el, name: str, default: float) -> float:
    for k, v in (el.params or {}).items():
        if str(k).upper() == name:
            try:
                return float(v)
            except (TypeError, ValueError):
                return default
    return default


def thermal_psd(r_ohm: float, temp_k: float) -> float:
    """4kT/R, A^2/Hz (Johnson-Nyquist)."""
    return 4.0 * K_BOLTZMANN * temp_k / r_ohm


def shot_psd(i_amp: float) -> float:
    """2q|I|, A^2/Hz (Schottky)."""
    return 2.0 * Q_ELEMENTARY * abs(i_amp)


def noise_sources(net, dc, values: dict | None = None) -> NoiseSources:
    """The noise sources of a :class:`~solderless.engine.solver.mna.Network`
    at its DC solution ``dc`` (:func:`solderless.engine.solver.dcop.solve_dc`)."""
    values = net.values if values is None else values
    temp = circuit_temp(getattr(net.circuit, "temperature", None))
    out: list[NoiseSource] = []
    notes: list[str] = []
    for el in net.elements.values():
        if el.kind == "R":
            a, b = el.nodes
            out.append(NoiseSource(el.name, el.name, THERMAL, a, b,
                                   white=thermal_psd(values[el.name], temp)))
    for el, mod, lay, po in net.devices:
        if el.kind not in NOISY_DEVICES:
            continue
        for k, st in enumerate(lay.stamps):
            if st[0] == "R" and st[3] > 0:
                tag = str(st[2]).rsplit("#", 1)[-1] if "#" in str(st[2]) else str(k)
                out.append(NoiseSource(f"{el.name}.r{tag}", el.name, THERMAL, st[1], st[2],
                                       white=thermal_psd(st[3], temp)))
        ports = lay.ports
        i = dc.i[po:po + len(ports)]
        v = dc.v[po:po + len(ports)]
        G = dc.G[po:po + len(ports), po:po + len(ports)]
        kf = _param(el, "KF", 0.0)
        af = _param(el, "AF", 1.0)
        if el.kind == "D":
            a, b = ports[0]
            out.append(NoiseSource(f"{el.name}.id", el.name, SHOT, a, b, white=shot_psd(i[0])))
            if kf > 0:
                out.append(NoiseSource(f"{el.name}.flicker", el.name, FLICKER, a, b,
                                       flicker=kf * abs(i[0]) ** af))
        elif el.kind == "Q":
            (bi, ei), (ci, _) = ports[0], ports[1]
            out.append(NoiseSource(f"{el.name}.ib", el.name, SHOT, bi, ei, white=shot_psd(i[0])))
            out.append(NoiseSource(f"{el.name}.ic", el.name, SHOT, ci, ei, white=shot_psd(i[1])))
            if lay.par[mod.RB_PORT] > 0:  # current-dependent base resistance: rbb = v/i
                rbb = v[2] / i[2] if i[2] != 0 else 0.0
                if not rbb > 0:
                    rbb = _param(el, "RB", 0.0)
                if rbb > 0:
                    out.append(NoiseSource(f"{el.name}.rb", el.name, THERMAL, *ports[2],
                                           white=thermal_psd(rbb, temp)))
            if kf > 0:
                out.append(NoiseSource(f"{el.name}.flicker", el.name, FLICKER, bi, ei,
                                       flicker=kf * abs(i[0]) ** af))
        else:  # J, M: channel thermal noise (2/3) gm, between drain and source
            d, s = ports[1]
            gm = abs(G[1, 0])
            out.append(NoiseSource(f"{el.name}.id", el.name, THERMAL, d, s,
                                   white=4.0 * K_BOLTZMANN * temp * 2.0 / 3.0 * gm))
            if kf > 0:
                if el.kind == "J":
                    out.append(NoiseSource(f"{el.name}.flicker", el.name, FLICKER, d, s,
                                           flicker=kf * abs(i[1]) ** af))
                else:
                    # ngspice-39 mos1noise.c: KF*|Id|^AF / (f * W * M * Leff * Cox^2),
                    # Cox = 3.9*eps0/TOX; without TOX it has no oxide capacitance
                    tox = _param(el, "TOX", 0.0)
                    w, m = _param(el, "W", 100e-6), _param(el, "M", 1.0)
                    leff = _param(el, "L", 100e-6) - 2.0 * _param(el, "LD", 0.0)
                    if tox > 0 and leff > 0:
                        cox = 3.9 * EPS0 / tox
                        out.append(NoiseSource(f"{el.name}.flicker", el.name, FLICKER, d, s,
                                               flicker=kf * abs(i[1]) ** af
                                               / (w * m * leff * cox * cox)))
                    else:
                        notes.append(f"{el.name}: MOSFET flicker noise (KF) needs TOX on the "
                                     "model card (the oxide capacitance); left out")
    return NoiseSources(out, temp, notes)
