"""The generic parts library: loading, lookup, user models, and the typical
values checked against handbook formulas and ngspice (Debian, batch mode)."""
import math
import re
import shutil
import subprocess

import pytest
from scipy import constants

from solderless.engine.circuit import Circuit, Element
from solderless.engine.errors import DesignError
from solderless.engine.formats.spice import circuit_to_netlist
from solderless.engine.parts import KINDS, Model, PartsLibrary, load_library

NGSPICE = shutil.which("ngspice")
VT = constants.k * 300.15 / constants.e   # kT/q at TNOM 27 degC (docs/references.md)

EXPECTED = {
    "npn-general": "NPN", "pnp-general": "PNP", "npn-low-noise-hi-gain": "NPN",
    "diode-si-switching": "D", "diode-germanium": "D", "diode-schottky": "D",
    "led-red": "D", "led-green": "D", "njfet-low-cutoff": "NJF",
    "njfet-mid-cutoff": "NJF", "pjfet-general": "PJF",
    "opamp-general": "OPAMP", "opamp-low-power": "OPAMP",
    "ota-bipolar": "OTA", "ota-bipolar-2j": "OTA",
}


@pytest.fixture(scope="module")
def lib():
    return load_library()


def test_builtin_models(lib):
    for name, kind in EXPECTED.items():
        m = lib.get(name)
        assert m.kind == kind and m.note, name
        assert m.element_kind == KINDS[kind]
    assert lib.get("ota-bipolar").params["JUNCTIONS"] == 1
    assert lib.get("ota-bipolar-2j").params["JUNCTIONS"] == 2
    assert lib.names("OTA") == ["ota-bipolar", "ota-bipolar-2j"]
    assert set(lib.names("Q")) == {"npn-general", "pnp-general", "npn-low-noise-hi-gain"}
    assert lib.get("NPN-General") is lib.get("npn-general")


def test_unknown_name_lists_close_matches(lib):
    with pytest.raises(DesignError) as ei:
        lib.get("npn-genral")
    assert "npn-general" in str(ei.value)


def test_element_params_fit_device_modules(lib):
    # every model can build an element the device module accepts
    devices = pytest.importorskip("solderless.engine.devices._common")
    for name in lib.names():
        m = lib.get(name)
        p = m.element_params(supply=9.0)
        from solderless.engine.devices import REGISTRY
        mod = REGISTRY[m.element_kind]
        el = Element(name, m.element_kind, ("a",) * 5, 0.0, p)
        devices.read_params(el, mod.DEFAULTS)   # raises on unknown names
        if m.element_kind in ("Q", "J", "M"):
            assert p["TYPE"] == m.kind


def _vf(m, i):
    # Shockley law plus series resistance: V = N*VT*ln(I/IS + 1) + I*RS
    p = m.params
    return p["N"] * VT * math.log(i / p["IS"] + 1) + i * p.get("RS", 0.0)


@pytest.mark.parametrize("name, current, lo, hi", [
    # forward voltages of the device classes, common practice
    ("diode-si-switching", 5e-3, 0.6, 0.8),
    ("diode-germanium", 1e-3, 0.15, 0.35),
    ("diode-schottky", 1e-3, 0.2, 0.4),
    ("led-red", 10e-3, 1.7, 2.0),
    ("led-green", 10e-3, 1.9, 2.3),
])
def test_diode_forward_voltage(lib, name, current, lo, hi):
    assert lo <= _vf(lib.get(name), current) <= hi


def test_ota_control_pin_voltage(lib):
    # docs/references.md (bipolar OTA): control pin one junction drop above the
    # negative supply, about 0.54-0.66 V over 1-100 uA, about 60 mV/decade;
    # two junctions for the second variant
    for name, nj in [("ota-bipolar", 1), ("ota-bipolar-2j", 2)]:
        p = lib.get(name).params
        v1 = nj * p["N"] * VT * math.log(1e-6 / p["IS"])
        v100 = nj * p["N"] * VT * math.log(100e-6 / p["IS"])
        assert 0.52 * nj <= v1 <= 0.58 * nj and 0.62 * nj <= v100 <= 0.68 * nj
        assert (v100 - v1) / 2 == pytest.approx(nj * 0.0596, rel=0.02)


def test_jfet_idss_matches_notes(lib):
    # Shichman-Hodges: IDSS = BETA * VTO^2 (IEEE JSSC 3(3), 1968)
    for name, idss in [("njfet-low-cutoff", 1.6e-3), ("njfet-mid-cutoff", 6e-3),
                       ("pjfet-general", 6.25e-3)]:
        p = lib.get(name).params
        assert p["BETA"] * p["VTO"] ** 2 == pytest.approx(idss, rel=0.05)


@pytest.mark.skipif(NGSPICE is None, reason="ngspice not installed")
@pytest.mark.parametrize("name, current", [("led-red", 10e-3),
                                           ("diode-si-switching", 5e-3),
                                           ("diode-germanium", 1e-3)])
def test_diode_models_in_ngspice(lib, name, current, tmp_path):
    # ngspice operating point of the library model fed by a current source
    # agrees with the closed-form Shockley + RS voltage (to GMIN's effect)
    m = lib.get(name)
    c = Circuit([Element("I1", "I", ("0", "a"), current),
                 Element("D1", "D", ("a", "0"), 0.0, m.element_params())])
    text = circuit_to_netlist(c).replace(".end\n", ".control\nop\nprint v(a)\n.endc\n.end\n")
    path = tmp_path / "d.cir"
    path.write_text(text)
    out = subprocess.run([NGSPICE, "-b", str(path)], capture_output=True, text=True,
                         timeout=60).stdout
    v = float(re.search(r"v\(a\) = ([-+0-9.eE]+)", out).group(1))
    assert v == pytest.approx(_vf(m, current), abs=1e-4)


def test_model_cards(lib, tmp_path):
    lib2 = load_library()
    m = lib2.add_model_card(".model MyDiode D(IS=1e-9 N=1.9\n+ RS=0.5 CJO=2p)",
                            file="user.lib", line=4)
    assert m.params == {"IS": 1e-9, "N": 1.9, "RS": 0.5, "CJO": 2e-12}
    assert lib2.get("mydiode") is m
    with pytest.raises(DesignError, match=r"user.lib:7.*VDMOS"):
        lib2.add_model_card(".model M1 VDMOS(VTO=1)", file="user.lib", line=7)
    assert lib2.add_model_card(".model M2 NMOS(VTO=1 KP=50u)").element_kind == "M"
    with pytest.raises(DesignError, match="BF"):
        lib2.add_model_card(".model Q9 NPN(BFF=100)", file="user.lib", line=8)
    with pytest.raises(DesignError, match="not a .model"):
        lib2.add_model_card("R1 a b 1k")
    assert "mydiode" not in lib            # the shared library is untouched


def test_extra_files(tmp_path):
    t = tmp_path / "mine.toml"
    t.write_text('[npn-general]\nkind = "NPN"\nnote = "mine"\nBF = 50\n\n'
                 '[fuzzy-diode]\nkind = "D"\nnote = "x"\nIS = "10n"\nN = 2\n')
    s = tmp_path / "mine.lib"
    s.write_text("* models\n.model QX PNP(BF=80 VAF=50)\nR1 a b 1\n")
    lib = load_library([t, s])
    assert lib.get("npn-general").params == {"BF": 50.0}   # user replaces
    assert lib.get("fuzzy-diode").params["IS"] == 10e-9
    assert lib.get("QX").kind == "PNP" and lib.get("QX").line == 2
    bad = tmp_path / "bad.toml"
    bad.write_text('[ok]\nkind = "D"\nIS = 1e-14\n\n[broken]\nkind = "D"\nIS = "4x"\n')
    with pytest.raises(DesignError, match=r"bad.toml:5.*broken"):
        load_library([bad])
    bad.write_text('[nokind]\nIS = 1\n')
    with pytest.raises(DesignError, match="kind"):
        load_library([bad])
    bad.write_text('[a\nkind=1\n')
    with pytest.raises(DesignError, match="TOML"):
        load_library([bad])


def test_macromodels_need_their_parameters():
    with pytest.raises(DesignError, match="GBW"):
        PartsLibrary([Model("u", "OPAMP", {"A0": 1e5, "ROUT": 50, "VHEAD": 1})])
    with pytest.raises(DesignError, match="JUNCTIONS"):
        PartsLibrary([Model("o", "OTA", {"IS": 1e-15, "N": 1, "JUNCTIONS": 3,
                                         "IABC_MAX": 1e-3, "VHEAD": 1})])


def test_library_models_read_the_spellings_the_netlist_reader_reads():
    # SPICE accepts VA for VAF and JS for IS (ngspice manual, BJT and diode
    # model tables); a library card with them is simulated as the netlist
    # reader simulates it (the two once kept separate tables: a library
    # VA was accepted and then dropped, a library JS refused)
    lib2 = load_library()
    q = lib2.add_model_card(".model QA NPN(BF=80 VA=50)")
    assert q.element_params()["VAF"] == 50.0 and "VA" not in q.element_params()
    d = lib2.add_model_card(".model DJ D(JS=2n N=1.5)")
    assert d.element_params()["IS"] == 2e-9
    from solderless.engine.formats.spice import parse_netlist
    nl = parse_netlist("t\nV1 a 0 1\nR1 a b 1k\nQ1 b b 0 QA\nD1 b 0 DJ\n"
                       ".model QA NPN(BF=80 VA=50)\n.model DJ D(JS=2n N=1.5)\n.end\n")
    assert nl.circuit.element("Q1").params["VAF"] == 50.0
    assert nl.circuit.element("D1").params["IS"] == 2e-9
