"""The level-1 MOSFET against ngspice's level 1, point by point.

Reference: ngspice (version printed with ``-s``), a DC sweep of the drain
voltage through both normal and inverse mode (Vds < 0), with the bulk on its
own supply (body effect through GAMMA and PHI, and the bulk-drain junction
forward-biased at the far end).  Tolerance: 1 nA + 1e-6 of the current, far
below the 1 mV / 1 % the project asks of whole circuits; ngspice's sweep runs
at reltol 1e-6 (tests/spice_ref.py).
"""
from __future__ import annotations

import numpy as np
import pytest

import spice_ref as S

from solderless.engine.circuit import Circuit, Element as E
from solderless.engine.solver import Simulator

CASES = {
    "nmos": ("NMOS", 3.0, -1.0, -1.5, 5.0,
             "VTO=1 KP=40u LAMBDA=0.05 GAMMA=0.5 PHI=0.7 IS=1e-14"),
    "pmos": ("PMOS", -3.0, 1.0, 1.5, -5.0,
             "VTO=-1 KP=15u LAMBDA=0.04 GAMMA=0.4 PHI=0.65 IS=1e-14"),
}


@pytest.fixture(scope="module")
def version():
    v = S.require_ngspice()
    print(f"reference simulator: {v}")
    return v


@pytest.mark.parametrize("case", sorted(CASES))
def test_drain_current_matches_ngspice_level1(case, version):
    mtype, vg, vb, start, stop, model = CASES[case]
    cards = (f"{case} sweep\nVD d 0 DC 0\nVG g 0 DC {vg}\nVB b 0 DC {vb}\n"
             f"M1 d g 0 b MT W=50u L=5u\n.model MT {mtype}(LEVEL=1 {model})\n")
    step = 0.05 if stop > start else -0.05
    ref = S.run_dc_sweep(cards, "VD", start, stop, step)
    vd = ref["d"]
    i_ng = -ref["i(vd)"]          # ngspice: current into VD's + terminal
    params = {"TYPE": mtype, "W": 50e-6, "L": 5e-6}
    for kv in model.split():
        k, v = kv.split("=")
        params[k] = float(v.replace("u", "e-6"))
    ours = []
    for v in vd:
        c = Circuit([E("VD", "V", ("d", "0"), float(v)), E("VG", "V", ("g", "0"), vg),
                     E("VB", "V", ("b", "0"), vb),
                     E("M1", "M", ("d", "g", "0", "b"), 0.0, params)], output=("d", "0"))
        ours.append(-Simulator(c).operating_point().currents["VD"])
    ours = np.array(ours)
    err = np.abs(ours - i_ng)
    worst = int(np.argmax(err / (1e-9 + 1e-6 * np.abs(i_ng))))
    print(f"{case}: worst at Vd={vd[worst]:+.2f} V: ours {ours[worst]:.6e} A, "
          f"ngspice {i_ng[worst]:.6e} A [{version}]")
    assert np.all(err <= 1e-9 + 1e-6 * np.abs(i_ng))
    # the sweep covered cut-off, both modes and a conducting bulk junction
    assert i_ng.min() < -1e-6 and i_ng.max() > 1e-4 if mtype == "NMOS" else \
        i_ng.max() > 1e-6 and i_ng.min() < -1e-4
