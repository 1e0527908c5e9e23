"""A tiny stand-in design and simulator with the same methods as the real
ones, for testing and benchmarking the live host's mechanics on their own.

The stand-in circuit: input -> gain (``drive.GAIN``, an ideal amplifier) ->
one-pole low-pass (``tone.R1``, ``tone.C1``; bypassable) -> level pot
(``level.VOL``, linear, divider of the signal) -> out. Its "gain cell control
current" probe ``iabc(comp.U1)`` is ``I_Q / (1 + env / 50 mV)`` with ``env`` a
peak follower of the output (1 ms attack, 100 ms release), so it moves with
the signal like a compressor's control current.

Not a circuit simulation; never used by ``solderless play`` itself.
"""
from __future__ import annotations

import math
import threading
from dataclasses import dataclass

import numba
import numpy as np

from solderless.engine.circuit import Circuit, Element
from solderless.engine.errors import DesignError

I_Q = 20e-6


@numba.njit(nogil=True, cache=True)
def _standin_kernel(x, y, n, prm, st, probe, want_probe):  # pragma: no cover
    # prm: gain, lowpass coef (or -1 = bypass), pot fraction, env att, env rel
    for i in range(n):
        v = x[i] * prm[0]
        if prm[1] >= 0.0:
            st[0] += prm[1] * (v - st[0])
            v = st[0]
        v *= prm[2]
        a = abs(v)
        c = prm[3] if a > st[1] else prm[4]
        st[1] += c * (a - st[1])
        y[i] = v
        if want_probe:
            probe[0, i] = 20e-6 / (1.0 + st[1] / 0.05)
            if probe.shape[0] > 1:
                probe[1, i] = v
    return n


@dataclass
class _Info:
    qualname: str
    type: str
    value: float | None
    unit: str
    is_pot: bool
    rotation: float | None
    taper: str | None = None
    stage: str = ""
    name: str = ""


class StandInDesign:
    """Design-shaped object for the stand-in circuit (see module doc)."""

    def __init__(self, name: str = "standin"):
        self.name = name
        self.oversample = 1
        self.values = {"drive.GAIN": 1.0, "tone.R1": 10e3, "tone.C1": 10e-9,
                       "level.VOL": 10e3}
        self.rotation = {"level.VOL": 1.0}
        self.bypass = {"tone": False}
        self.meters = {"control": "iabc(comp.U1)", "control_unit": "A",
                       "probes": ["v(out)"]}
        self.path = None
        self.saved: list[str] = []

    def control_probe(self):
        return self.meters["control"]

    def probe_exprs(self):
        return list(self.meters["probes"])

    def parts(self):
        out = []
        for q, v in self.values.items():
            t = {"drive.GAIN": "vcvs", "tone.R1": "resistor", "tone.C1": "capacitor",
                 "level.VOL": "pot"}[q]
            unit = {"vcvs": "", "resistor": "Ω", "capacitor": "F", "pot": "Ω"}[t]
            out.append(_Info(q, t, v, unit, t == "pot", self.rotation.get(q),
                             "linear" if t == "pot" else None, q.split(".")[0],
                             q.split(".")[1]))
        return out

    def _check(self, q):
        if q not in self.values:
            raise DesignError(f"no part named '{q}'", hint="parts: " + ", ".join(self.values))

    def set_value(self, q, value):
        self._check(q)
        if not value > 0:
            raise DesignError("value must be positive", part=q)
        self.values[q] = float(value)
        return {q: float(value)}

    def set_rotation(self, q, r):
        self._check(q)
        if q not in self.rotation:
            raise DesignError("only a pot can be turned", part=q)
        self.rotation[q] = float(r)
        return {q + ".a": (1 - r) * self.values[q] + 1.0, q + ".b": r * self.values[q] + 1.0}

    def set_bypass(self, stage, on):
        if stage not in self.bypass:
            raise DesignError(f"no stage named '{stage}'")
        self.bypass[stage] = bool(on)

    def flatten(self) -> Circuit:
        r = self.rotation["level.VOL"]
        els = [Element("jack", "V", ("in", "0")),
               Element("drive.GAIN", "E", ("g", "0", "in", "0"), self.values["drive.GAIN"]),
               Element("level.VOL.a", "R", ("t", "out"), (1 - r) * self.values["level.VOL"] + 1.0),
               Element("level.VOL.b", "R", ("out", "0"), r * self.values["level.VOL"] + 1.0)]
        if not self.bypass["tone"]:
            els[2:2] = [Element("tone.R1", "R", ("g", "t"), self.values["tone.R1"]),
                        Element("tone.C1", "C", ("t", "0"), self.values["tone.C1"])]
        else:
            els[2:2] = [Element("tone.bypass", "R", ("g", "t"), 1e-3)]
        return Circuit(els, input_source="jack", output=("out", "0"), title=self.name)

    def to_toml(self) -> str:
        lines = [f'name = "{self.name}"']
        lines += [f'"{k}" = {v!r}' for k, v in self.values.items()]
        lines += [f'"{k}.rotation" = {v!r}' for k, v in self.rotation.items()]
        return "\n".join(lines) + "\n"

    def save(self, path=None):
        from solderless.engine.design import atomic_write_text
        target = path or self.path
        atomic_write_text(target, self.to_toml())
        self.saved.append(str(target))
        self.path = target
        return target


class StandInSimulator:
    """Simulator-shaped object running the stand-in circuit (no allocation in
    :meth:`process_into`; :meth:`set_values` lands at the next block)."""

    def __init__(self, circuit: Circuit, fs: float = 48000.0, oversample: int = 1,
                 probes=(), probe_decimate: int = 1):
        self.fs = float(fs)
        self.latency_samples = 0.0
        self.probe_names = tuple(probes)
        for p in self.probe_names:
            if p not in ("iabc(comp.U1)", "v(out)"):
                raise DesignError(f"unknown probe {p}")
        self.probe_units = tuple("A" if p.startswith("i") else "V" for p in self.probe_names)
        self.values = {e.name: e.value for e in circuit.elements}
        self.stats = {"nonconverged": 0}
        self._lock = threading.Lock()
        self._prm = self._derive(self.values)
        self._pending = None
        self._st = np.zeros(2)
        self._dummy_probe = np.zeros((1, 1))

    def _derive(self, v):
        prm = np.zeros(5)
        prm[0] = v["drive.GAIN"]
        if "tone.R1" in v:
            fc = 1.0 / (2 * math.pi * v["tone.R1"] * v["tone.C1"])
            prm[1] = 1.0 - math.exp(-2 * math.pi * fc / self.fs)
        else:
            prm[1] = -1.0
        ra, rb = v["level.VOL.a"], v["level.VOL.b"]
        prm[2] = rb / (ra + rb)
        prm[3] = 1.0 - math.exp(-1.0 / (0.001 * self.fs))
        prm[4] = 1.0 - math.exp(-1.0 / (0.100 * self.fs))
        return prm

    def set_values(self, changes: dict) -> None:
        for k in changes:
            if k not in self.values:
                raise DesignError(f"no element named '{k}'")
        with self._lock:
            self.values.update(changes)
            self._pending = self._derive(self.values)

    def process_into(self, x, y, probe_buf=None) -> int:
        p = self._pending
        if p is not None:
            self._prm = p
            self._pending = None
        n = x.shape[0]
        want = probe_buf is not None and len(self.probe_names) > 0
        # probe order is whatever the caller asked; the kernel writes
        # (control, v(out)) -- map by name for the stand-in's two probes
        buf = probe_buf if want else self._dummy_probe
        _standin_kernel(x, y, n, self._prm, self._st, buf, want)
        if want and self.probe_names and self.probe_names[0] == "v(out)":
            buf[0, :n] = y[:n]
        return n

    def operating_point(self):
        return None
