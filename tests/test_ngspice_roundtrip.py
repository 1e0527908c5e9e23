"""Netlist export checked by ngspice: import a reference netlist, write it back
with ``circuit_to_netlist``, and run both texts in ngspice.

Reference: ngspice (version printed with ``-s``) on the original file. The
exported netlist must describe the same circuit: every node of the operating
point within 1 uV and the transient output within 1e-4 NRMSE (both far
below the engine tolerances, since the same simulator runs both texts).
"""
from __future__ import annotations

import numpy as np
import pytest

import spice_ref as S

spice = pytest.importorskip("engine.formats.spice")


@pytest.fixture(scope="module")
def version():
    v = S.require_ngspice()
    print(f"reference simulator: {v}")
    return v


def _exported(name: str) -> str:
    p = S.NETLIST_DIR / f"{name}.cir"
    src = "VIN" if name in S.audio_netlists() else None
    nl = spice.parse_netlist(p.read_text(), file=str(p), in_source=src, out_node="out")
    return spice.circuit_to_netlist(nl.circuit)


@pytest.mark.parametrize("name", S.netlist_names())
def test_exported_netlist_runs_the_same_in_ngspice(name, version):
    orig = S.load_netlist(name)
    text = _exported(name)
    a, b = S.run_op(orig), S.run_op(text)
    for node, v in a.items():
        if node.startswith("i("):
            continue
        assert node in b, f"{name}: node {node!r} lost in export:\n{text}"
        assert b[node] == pytest.approx(v, abs=1e-6), f"{name}: node {node}"
    if name in S.audio_netlists():
        ra = S.run_tran(orig, 1 / 48000, 0.01, nodes=("out",))
        rb = S.run_tran(text, 1 / 48000, 0.01, nodes=("out",))
        err, lag = S.nrmse(ra.v["out"], rb.v["out"], max_lag=0)
        assert err < 1e-4, f"{name}: exported netlist differs, NRMSE {err:.2e}"
