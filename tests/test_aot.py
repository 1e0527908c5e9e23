"""The ahead-of-time kernel module (solderless/engine/solver/aot.py).

The reference is the JIT kernel: the same source compiled by numba at run
time.  The module must render what the JIT renders (within 1e-6 of the
output's peak, the tolerance tests/test_render_fingerprints.py allows across
CPUs; on the CPU it is built on they agree bit for bit), must never be used
when it is stale or foreign, and a plain render through it must not import
numba at all (the point of it: start-up).

The module is built here if no fresh one exists (``bash .ci/setup`` builds
it, so in CI this finds it); without a C compiler the tests skip, saying so.
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from solderless.engine.design import load_design
from solderless.engine.solver import Simulator, aot, kernel_sources

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def module():
    if shutil.which(os.environ.get("CC", "gcc")) is None and shutil.which("cc") is None:
        pytest.skip("no C compiler: the ahead-of-time kernel module cannot be built")
    import importlib.util
    if importlib.util.find_spec("numba.pycc") is None:
        pytest.skip("this numba has no numba.pycc: the kernel module cannot be built")
    aot.build(quiet=True)            # nothing to do when .ci/setup built it
    mod = aot.load()
    assert mod is not None, "a fresh module was built but does not load"
    return mod


def _render(source, kern, monkeypatch, x=None, seconds=0.25, fs=48000.0):
    monkeypatch.setattr(aot, "_kernels", kern)
    d = load_design(str(source))
    sim = Simulator(d.flatten(), fs=fs, oversample=d.oversample)
    assert sim._K is kern
    if x is None:
        t = np.arange(int(seconds * fs)) / fs
        x = 0.5 * np.sin(2 * np.pi * 220.0 * t) * np.minimum(1.0, 8.0 * t)
    y = sim.process(x)
    return sim, y


# a many-port design, the start-up bench's clipper (four ports: the lean
# runner's four-port loop), a one-port diode clipper and a two-port JFET
# stage (its two-port loop), a design that oversamples (the filters are in
# the module too) and one that runs on the reduced lane with its op-amp
# clamps dormant (solver/dormant.py: both runners, handovers between them)
CASES = [
    ("flagship", "flagship"),
    ("clipper2", ROOT / "bench" / "netlists" / "clipper2.cir"),
    ("diode_clipper", ROOT / "tests" / "netlists" / "diode_clipper.cir"),
    ("njfet_follower", ROOT / "tests" / "netlists" / "njfet_follower.cir"),
    ("booster", "booster"),
    ("octave-up", "octave-up"),
]


@pytest.mark.parametrize("name,source", CASES, ids=[c[0] for c in CASES])
def test_module_renders_what_the_jit_renders(module, monkeypatch, name, source):
    sim_a, ya = _render(source, aot.Kernels(module), monkeypatch)
    sim_j, yj = _render(source, aot.jit_kernels(), monkeypatch)
    assert all(sim_a._run_aot), "the render fell back to the JIT kernel"
    assert all(r is getattr(module, n) for r, n in zip(sim_a._run, sim_a._runner))
    assert not any(sim_j._run_aot)
    if name in ("diode_clipper", "njfet_follower", "clipper2"):
        assert sim_a._runner[0] == "run_block_small"
    if name == "clipper2":
        assert sim_a.n_ports == 4
    if name == "octave-up":
        assert sim_a.stats["reduced_samples"] > 0
    if name == "flagship":
        assert sim_a.n_ports > 8
    if name == "booster":
        assert sim_a.oversample > 1 and sim_a._rs._aot
    peak = float(np.max(np.abs(yj)))
    assert peak > 0
    # the JIT kernel is the reference; 1e-6 of the peak as across CPUs
    assert np.max(np.abs(ya - yj)) <= 1e-6 * peak
    assert sim_a.stats == sim_j.stats


def test_value_changes_and_dc_point_through_the_module(module, monkeypatch):
    """convert_states (a live value change), eval_devices/limit_devices (the
    operating point) and wave_value (sources at t = 0) from the module give
    the JIT's results."""
    src = ROOT / "bench" / "netlists" / "clipper2.cir"
    out = []
    for kern in (aot.Kernels(module), aot.jit_kernels()):
        monkeypatch.setattr(aot, "_kernels", kern)
        d = load_design(str(src))
        sim = Simulator(d.flatten(), fs=48000.0)
        x = 0.3 * np.sin(2 * np.pi * 330.0 * np.arange(4800) / 48000.0)
        y1 = sim.process(x)
        r = next(n for n, e in sim.net.elements.items() if e.kind == "R")
        sim.set_values({r: sim.values[r] * 1.5})
        y2 = sim.process(x)
        op = sim.operating_point()
        assert op is not None
        out.append((y1, y2, sim._dc.v,
                    sim.net.source_values(0.0)))
    for a, j in zip(out[0], out[1]):
        assert np.allclose(a, j, rtol=0, atol=1e-9 * max(1.0, float(np.max(np.abs(j)))))


def test_arguments_the_module_does_not_take_run_through_the_jit(module, monkeypatch):
    """The module's functions check nothing (a float32 array would be read as
    float64, a strided one as contiguous), so a call that does not fit its
    signature runs the JIT kernel: same result as the JIT given the same
    arrays.  (A six-port fuzz, on the generic runner: each misfit compiles
    the JIT runner for its types, and the generic one compiles in a fraction
    of the lean runner's time.)"""
    src = ROOT / "tests" / "netlists" / "gp_fuzz.cir"
    x = (0.4 * np.sin(2 * np.pi * 440.0 * np.arange(2000) / 48000.0))
    res = []
    for kern in (aot.Kernels(module), aot.jit_kernels()):
        monkeypatch.setattr(aot, "_kernels", kern)
        sim = Simulator(load_design(str(src)).flatten(), fs=48000.0)
        y = np.zeros(2000)
        sim.process_into(x.astype(np.float32), y)            # not float64
        y2 = np.zeros(4000)[::2]                             # strided output
        sim.process_into(np.ascontiguousarray(x[::-1]), y2)
        res.append((y.copy(), y2.copy(), sim._run_aot))
    assert np.array_equal(res[0][0], res[1][0])
    assert np.array_equal(res[0][1], res[1][1])
    k = aot.Kernels(module)
    assert not k.fits("eval_devices", (np.zeros(2, np.int32),), 0)
    assert k.fits("eval_devices", (np.zeros(2, np.int64),), 0)
    assert not k.fits("run_block", (np.zeros((4, 4))[:, ::2],), 7)   # Pz not contiguous
    assert res[0][2], "one misfit block must not move the simulator off the module"


def test_a_stale_or_foreign_module_is_never_loaded(module, monkeypatch, tmp_path):
    good = aot.key()
    assert aot.find(good) is not None
    # an edited device or kernel source: another key, so no module is found
    monkeypatch.setattr(kernel_sources, "sources_hash", lambda files=None: "edited")
    stale = aot.key()
    assert stale != good and aot.find(stale) is None and aot.load(stale) is None
    monkeypatch.undo()
    # built on another CPU: another key as well
    monkeypatch.setattr(aot, "_cpu", lambda: "another CPU")
    assert aot.key() != good and aot.find() is None
    monkeypatch.undo()
    # the right file name holding another build, or a damaged file: not loaded
    monkeypatch.setattr(aot, "search_dirs", lambda: [tmp_path])
    fake = "0" * 40
    target = tmp_path / aot._file_name(aot.module_name(fake))
    shutil.copyfile(module.__file__, target)
    assert aot.find(fake) == target and aot.load(fake) is None
    # (another file: the copy stays mapped once dlopen has read it)
    fake2 = "1" * 40
    (tmp_path / aot._file_name(aot.module_name(fake2))).write_bytes(b"not a shared object")
    assert aot.find(fake2) is not None and aot.load(fake2) is None
    # and the simulator then runs the JIT kernel, silently
    monkeypatch.setattr(aot, "key", lambda: fake)
    monkeypatch.setattr(aot, "_kernels", None)
    assert aot.kernels().aot is False


def _child(code: str, env_extra: dict) -> str:
    env = dict(os.environ)
    env.pop(aot.JIT_ENV, None)
    env.update(env_extra)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    r = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                       text=True, cwd=ROOT, timeout=600)
    assert r.returncode == 0, r.stderr[-3000:]
    return r.stdout.strip().splitlines()[-1]


def test_a_plain_render_imports_no_numba(module, tmp_path):
    import soundfile as sf
    wav = tmp_path / "in.wav"
    t = np.arange(4800) / 48000.0
    sf.write(wav, (0.5 * np.sin(2 * np.pi * 220.0 * t)).astype(np.float32), 48000,
             subtype="FLOAT")
    code = (
        "import sys\n"
        "from solderless.app import cli\n"
        f"rc = cli.main(['render', {str(ROOT / 'bench' / 'netlists' / 'clipper2.cir')!r}, "
        f"{str(wav)!r}, {str(tmp_path / 'out.wav')!r}])\n"
        "print(rc, 'numba' in sys.modules,"
        " any(m.startswith('_solderless_kernels_') for m in sys.modules))\n")
    assert _child(code, {}) == "0 False True"
    # forced JIT: numba is imported and the module is not
    assert _child(code, {aot.JIT_ENV: "1"}) == "0 True False"


def test_importing_the_kernel_package_compiles_every_recorded_function():
    """lazyjit: the device and kernel functions are plain Python until the
    kernel package is imported; then numba's, under every name they were
    imported by."""
    import solderless.engine.solver.kernel  # noqa: F401
    from solderless.engine import lazyjit
    from solderless.engine.devices import _common, bjt, diode
    from solderless.engine.solver import oversample
    from solderless.engine.solver.kernel import blocks
    assert lazyjit.active()
    for f in (bjt.evaluate, bjt.junction, diode.pnjlim, _common.pnjlim, blocks.solve_ports,
              blocks.newton, oversample._up_kernel):
        assert hasattr(f, "py_func"), f
    assert bjt.junction is _common.junction
