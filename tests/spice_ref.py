"""Run the reference simulator (Debian's ``ngspice``, batch mode) on a netlist.

The netlists in ``tests/netlists`` hold circuit cards only (no analysis and
no ``.control`` block). This module appends explicit simulator options and a
``.control`` block, runs ``ngspice -b`` in a temporary directory, and reads
the ASCII raw file it writes back into numpy arrays.

Run options are explicit so that the comparison is fair and repeatable:

* ``reltol=1e-6 abstol=1e-12 vntol=1e-7`` (much tighter than the SPICE
  defaults of 1e-3 / 1e-12 / 1e-6), ``method=trap`` (trapezoidal rule, as our
  engine uses), default ``gmin=1e-12`` (ngspice adds it across every junction).
* Transient, "same step" mode (``fixed_step=True``): the maximum internal step
  is the sample period ``h`` and the truncation-error control is disabled in
  practice (``trtol=1e6``), so after its start-up ramp ngspice integrates with
  the trapezoidal rule at exactly ``h``: the same discretisation as a fixed-
  step engine at ``fs = 1/h``. ngspice's own points are then offset from the
  sample grid by a constant fraction of ``h`` (its first step is h/100 and
  doubles), so the result is resampled onto ``k*h`` with a cubic spline.
* "Accurate" mode (``fixed_step=False``): ngspice's normal error control with
  a maximum step of ``h / refine``; use it to see how far a fixed step ``h``
  is from the continuous-time answer.

Nothing here is specific to Solderless: it only needs ngspice on PATH. When
ngspice is missing the helpers call ``pytest.skip`` with the install command.
"""
from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np

NETLIST_DIR = Path(__file__).resolve().parent / "netlists"

#: Options used for every reference run (see module docstring).
OPTIONS = "reltol=1e-6 abstol=1e-12 vntol=1e-7 gmin=1e-12 method=trap"
#: Extra options for the "same step" transient mode.
FIXED_STEP_OPTIONS = "trtol=1e6"


class NgspiceError(RuntimeError):
    """ngspice ran but failed (bad netlist, no convergence): carries its log."""


def ngspice_path() -> str | None:
    """Return the path of the ngspice executable, or None when not installed."""
    return shutil.which("ngspice")


@lru_cache(maxsize=1)
def ngspice_version() -> str:
    """Return ngspice's version string, e.g. ``"ngspice-39"`` (from ``ngspice -v``)."""
    exe = ngspice_path()
    if exe is None:
        return "not installed"
    out = subprocess.run([exe, "-v"], capture_output=True, text=True,
                         timeout=30).stdout
    m = re.search(r"(ngspice-[\w.]+)", out)
    return m.group(1) if m else out.strip().splitlines()[0]


def require_ngspice() -> str:
    """Skip the calling test when ngspice is missing; return its version."""
    if ngspice_path() is None:
        import pytest
        pytest.skip("ngspice not installed: apt-get install ngspice")
    return ngspice_version()


def load_netlist(name: str) -> str:
    """Return the text of ``tests/netlists/<name>`` (``.cir`` added if absent)."""
    p = NETLIST_DIR / name
    if not p.suffix:
        p = p.with_suffix(".cir")
    return p.read_text()


def netlist_names() -> list[str]:
    """Stems of every netlist in ``tests/netlists``, sorted."""
    return sorted(p.stem for p in NETLIST_DIR.glob("*.cir"))


def circuit_cards(text: str) -> str:
    """Return the netlist without ``.control`` blocks, analyses and ``.end``.

    The title line (first line) is kept. Continuation lines (``+``) are kept.
    """
    out: list[str] = []
    in_control = False
    for i, line in enumerate(text.splitlines()):
        s = line.strip().lower()
        if i > 0 and s.startswith(".control"):
            in_control = True
            continue
        if in_control:
            if s.startswith(".endc"):
                in_control = False
            continue
        word = s.split()[0] if s.split() else ""
        if i > 0 and (word == ".end" or s.startswith(".tran")
                      or s.startswith(".op") or s.startswith(".dc")
                      or s.startswith(".ac") or s.startswith(".options")
                      or s.startswith(".option")):
            continue
        out.append(line)
    return "\n".join(out) + "\n"


@dataclass
class RawPlot:
    """One plot of an ngspice raw file: vector names (lower case) and data."""
    name: str
    vectors: dict[str, np.ndarray] = field(default_factory=dict)


def parse_ascii_raw(text: str) -> list[RawPlot]:
    """Parse an ngspice ASCII raw file (real data) into plots."""
    plots: list[RawPlot] = []
    blocks = re.split(r"^Title:", text, flags=re.M)
    for blk in blocks:
        if "Values:" not in blk:
            continue
        head, values = blk.split("Values:", 1)
        m = re.search(r"^Plotname:\s*(.*)$", head, flags=re.M)
        pname = m.group(1).strip() if m else ""
        nvar = int(re.search(r"No\. Variables:\s*(\d+)", head).group(1))
        npts = int(re.search(r"No\. Points:\s*(\d+)", head).group(1))
        var_part = re.split(r"^Variables:", head, flags=re.M)[1]
        names = []
        for ln in var_part.strip().splitlines()[:nvar]:
            parts = ln.split()
            names.append(parts[1].lower())
        tok = values.split()
        if re.search(r"^Flags:.*complex", head, flags=re.M | re.I):
            # complex data (an AC plot): each value is 're,im'
            tok = tok[: npts * (nvar + 1)]
            arr = np.array([complex(*(float(x) for x in t.split(","))) if "," in t
                            else complex(float(t)) for t in tok])
            arr = arr.reshape(npts, nvar + 1)[:, 1:]
            plots.append(RawPlot(pname, {n: arr[:, k].copy()
                                         for k, n in enumerate(names)}))
            continue
        arr = np.array(tok[: npts * (nvar + 1)], dtype=float)
        arr = arr.reshape(npts, nvar + 1)[:, 1:]
        plots.append(RawPlot(pname, {n: arr[:, k].copy()
                                     for k, n in enumerate(names)}))
    return plots


@dataclass
class SpiceRun:
    """The outcome of one ngspice batch run."""
    plots: list[RawPlot]
    log: str
    wall_time: float          # seconds, whole ngspice process


def run_ngspice(cards: str, control: str, options: str = OPTIONS,
                timeout: float = 300.0) -> SpiceRun:
    """Run ``ngspice -b`` on circuit cards plus a control block.

    ``control`` is the body of the ``.control`` block; it must ``write`` the
    wanted plots to ``out.raw`` (the file is ASCII). Raises NgspiceError with
    ngspice's log when it reports an error or writes no data.
    """
    exe = ngspice_path()
    if exe is None:
        raise NgspiceError("ngspice not installed: apt-get install ngspice")
    text = circuit_cards(cards)
    text += f".options {options}\n" if options else ""
    text += ".control\nset filetype=ascii\n" + control.strip() + "\n.endc\n.end\n"
    with tempfile.TemporaryDirectory(prefix="sl_ngspice_") as d:
        cir = Path(d) / "run.cir"
        cir.write_text(text)
        env = dict(os.environ, HOME=d)      # no user .spiceinit side effects
        t0 = time.perf_counter()
        proc = subprocess.run([exe, "-b", str(cir)], cwd=d, capture_output=True,
                              text=True, timeout=timeout, env=env)
        wall = time.perf_counter() - t0
        log = proc.stdout + proc.stderr
        raw = Path(d) / "out.raw"
        bad = re.search(r"^\s*(Error|error:|.*singular matrix|.*Timestep too small"
                        r"|.*simulation\(s\) aborted)", log, flags=re.M)
        if not raw.exists() or bad:
            raise NgspiceError(f"ngspice failed:\n--- netlist ---\n{text}"
                               f"--- log ---\n{log}")
        plots = parse_ascii_raw(raw.read_text())
    return SpiceRun(plots, log, wall)


def run_op(cards: str, options: str = OPTIONS) -> dict[str, float]:
    """DC operating point: node voltages keyed by net name, branch currents
    keyed ``i(<source>)`` (all names lower case). Internal device nodes
    (names with ``#``, and the ``<source>_int<k>`` nodes ngspice-39 adds
    when it rewrites E/G VALUE and TABLE sources) are left out."""
    res = run_ngspice(cards, "op\nwrite out.raw all", options)
    vecs = res.plots[0].vectors
    out: dict[str, float] = {}
    for name, v in vecs.items():
        if "#" in name or re.search(r"_int\d+\)?$", name):
            continue
        m = re.fullmatch(r"v\((.*)\)", name)
        out[m.group(1) if m else name] = float(v[0])
    return out


@dataclass
class TranResult:
    """A transient result resampled onto the sample grid ``t = k*h``."""
    t: np.ndarray
    v: dict[str, np.ndarray]       # net name (lower case) or 'i(src)' -> samples
    raw_t: np.ndarray              # ngspice's own time points
    raw: dict[str, np.ndarray]
    wall_time: float


def tran_control(step: float, stop: float, *, fixed_step: bool = True,
                 refine: int = 16) -> tuple[str, str]:
    """Return (control block, options) for a transient run (see module doc)."""
    if fixed_step:
        tmax = step
        opts = OPTIONS + " " + FIXED_STEP_OPTIONS
    else:
        tmax = step / refine
        opts = OPTIONS
    ctl = f"tran {step:.12g} {stop:.12g} 0 {tmax:.12g}\nwrite out.raw all"
    return ctl, opts


def run_tran(cards: str, step: float, stop: float, *, fixed_step: bool = True,
             refine: int = 16, nodes: tuple[str, ...] | None = None) -> TranResult:
    """Transient from the operating point, resampled onto ``k*step``.

    ``fixed_step=True`` gives ngspice the same trapezoidal step as a fixed-rate
    engine at ``fs = 1/step`` (see module docstring). Returns node voltages
    (and source currents) sampled at ``t = 0, step, 2*step, ... <= stop``.
    """
    from scipy.interpolate import CubicSpline

    ctl, opts = tran_control(step, stop, fixed_step=fixed_step, refine=refine)
    res = run_ngspice(cards, ctl, opts)
    vecs = res.plots[0].vectors
    rt = vecs["time"]
    # ngspice can repeat a time point at a breakpoint; keep the last value
    keep = np.concatenate([np.diff(rt) > 0, [True]])
    rt = rt[keep]
    n = int(np.floor(stop / step + 1e-9)) + 1
    t = np.arange(n) * step
    raw: dict[str, np.ndarray] = {}
    v: dict[str, np.ndarray] = {}
    for name, arr in vecs.items():
        if name == "time" or "#" in name:
            continue
        m = re.fullmatch(r"v\((.*)\)", name)
        key = m.group(1) if m else name
        if nodes is not None and key not in nodes:
            continue
        raw[key] = arr[keep]
        v[key] = CubicSpline(rt, arr[keep])(t)
    return TranResult(t, v, rt, raw, res.wall_time)


def run_ac(cards: str, node: str, f_start: float, f_stop: float,
           per_decade: int = 10) -> tuple[np.ndarray, np.ndarray]:
    """Small-signal AC analysis (``ac dec``): (frequencies, complex v(node)).
    The netlist's input source must carry ``AC 1``."""
    res = run_ngspice(cards, f"ac dec {per_decade} {f_start:.12g} {f_stop:.12g}\n"
                             f"write out.raw v({node})")
    vecs = res.plots[0].vectors
    return vecs["frequency"].real, vecs[f"v({node.lower()})"]


def run_dc_sweep(cards: str, source: str, start: float, stop: float,
                 step: float) -> dict[str, np.ndarray]:
    """DC sweep of one source; returns vectors keyed as in run_op plus the
    sweep values under ``"sweep"`` (or the source's name in lower case)."""
    res = run_ngspice(cards, f"dc {source} {start:.12g} {stop:.12g} "
                             f"{step:.12g}\nwrite out.raw all")
    out: dict[str, np.ndarray] = {}
    for name, arr in res.plots[0].vectors.items():
        m = re.fullmatch(r"v\((.*)\)", name)
        out[m.group(1) if m else name] = arr
    return out


def startup_time(repeats: int = 5) -> float:
    """Median wall time of ngspice running an empty (one-resistor) operating
    point: the fixed cost to subtract from batch timings."""
    cards = "* empty\nR1 a 0 1k\nI1 0 a DC 1m\n"
    times = [run_ngspice(cards, "op\nwrite out.raw all").wall_time
             for _ in range(repeats)]
    return float(np.median(times))


def align_lag(ref: np.ndarray, y: np.ndarray, max_lag: int = 8) -> int:
    """Integer lag L (|L| <= max_lag) maximizing the cross-correlation of the
    AC parts, so that ``y[n + L]`` best matches ``ref[n]``."""
    r = ref - ref.mean()
    s = y - y.mean()
    best, best_c = 0, -np.inf
    n = len(r)
    for lag in range(-max_lag, max_lag + 1):
        if lag >= 0:
            c = float(np.dot(r[: n - lag], s[lag:]))
        else:
            c = float(np.dot(r[-lag:], s[: n + lag]))
        if c > best_c:
            best, best_c = lag, c
    return best


def nrmse(ref: np.ndarray, y: np.ndarray, max_lag: int = 8,
          skip: int = 0) -> tuple[float, int]:
    """Normalized RMS error: rms(y - ref) / rms(ref), after aligning a fixed
    integer latency of ``y`` found by cross-correlation. ``skip`` leading
    samples are left out. Returns (nrmse, lag)."""
    ref = np.asarray(ref, float)
    y = np.asarray(y, float)
    n = min(len(ref), len(y))
    ref, y = ref[:n], y[:n]
    lag = align_lag(ref[skip:], y[skip:], max_lag)
    if lag >= 0:
        a, b = ref[: n - lag], y[lag:]
    else:
        a, b = ref[-lag:], y[: n + lag]
    a, b = a[skip:], b[skip:]
    den = float(np.sqrt(np.mean(a ** 2)))
    return float(np.sqrt(np.mean((b - a) ** 2)) / den), lag


# ---------------------------------------------------------------------------
# Source waveforms, evaluated independently of Solderless (ngspice manual,
# "Independent sources": SIN, PULSE, PWL definitions).

def source_wave(cards: str, source: str = "VIN") -> tuple[float, str | None, list[float]]:
    """Read a V source's card: (DC value, wave kind or None, wave numbers).

    Only plain numbers and the engineering suffixes ngspice accepts are read.
    """
    for line in cards.splitlines():
        tok = line.split()
        if tok and tok[0].upper() == source.upper():
            rest = " ".join(tok[3:])
            dc = 0.0
            m = re.search(r"\bDC\s+(\S+)", rest, flags=re.I)
            if m:
                dc = spice_number(m.group(1))
            m = re.search(r"\b(SIN|PULSE|PWL)\s*\(([^)]*)\)", rest, flags=re.I)
            if not m:
                return dc, None, []
            nums = [spice_number(x) for x in re.split(r"[\s,]+", m.group(2).strip()) if x]
            return dc, m.group(1).upper(), nums
    raise KeyError(source)


_SUFFIX = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "m": 1e-3, "u": 1e-6,
           "n": 1e-9, "p": 1e-12, "f": 1e-15, "mil": 25.4e-6}


def spice_number(text: str) -> float:
    """A SPICE number with an optional scale suffix (``4.7k``, ``1Meg``, ``10u``)."""
    m = re.fullmatch(r"([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)([a-zA-Z]*)", text)
    if not m:
        raise ValueError(text)
    v = float(m.group(1))
    s = m.group(2).lower()
    for suf in ("meg", "mil", "t", "g", "k", "m", "u", "n", "p", "f"):
        if s.startswith(suf):
            return v * _SUFFIX[suf]
    return v


def wave_samples(kind: str | None, nums: list[float], t: np.ndarray,
                 dc: float = 0.0) -> np.ndarray:
    """Value of a SIN / PULSE / PWL source at times t (ngspice definitions;
    in a transient the DC value is ignored when a wave is given)."""
    t = np.asarray(t, float)
    if kind is None:
        return np.full_like(t, dc)
    if kind == "SIN":
        vo, va, f, td, theta, ph = (list(nums) + [0, 0, 0, 0, 0, 0])[:6]
        tt = np.maximum(t - td, 0.0)
        return vo + va * np.exp(-tt * theta) * np.sin(2 * np.pi * f * tt + np.deg2rad(ph))
    if kind == "PWL":
        tp, vp = np.array(nums[0::2]), np.array(nums[1::2])
        return np.interp(t, tp, vp)
    if kind == "PULSE":
        v1, v2, td, tr, tf, pw, per = (list(nums) + [0] * 7)[:7]
        tr = tr or 1e-12
        tf = tf or 1e-12
        per = per or np.inf
        tt = np.where(t < td, -1.0, np.mod(t - td, per) if np.isfinite(per) else t - td)
        out = np.full_like(t, v1)
        rise = (tt >= 0) & (tt < tr)
        out[rise] = v1 + (v2 - v1) * tt[rise] / tr
        top = (tt >= tr) & (tt < tr + pw)
        out[top] = v2
        fall = (tt >= tr + pw) & (tt < tr + pw + tf)
        out[fall] = v2 + (v1 - v2) * (tt[fall] - tr - pw) / tf
        return out
    raise ValueError(kind)


# ---------------------------------------------------------------------------
# The Solderless side of a comparison (imports the engine lazily so that the
# ngspice-only helpers above work without it).

#: Reference netlists with an audio input VIN and an output node ``out``.
def audio_netlists() -> list[str]:
    """Netlists in tests/netlists that have a VIN source and an ``out`` node."""
    names = []
    for n in netlist_names():
        text = load_netlist(n)
        if re.search(r"^VIN\s", text, flags=re.M | re.I) and re.search(
                r"\sout(\s|$)", text, flags=re.M):
            names.append(n)
    return names


def engine_circuit(name: str, keep_wave: bool = False):
    """Parse ``tests/netlists/<name>.cir`` with Solderless' SPICE importer.

    The input source VIN becomes the circuit's input; unless ``keep_wave``,
    its SIN/PWL wave is removed so that the test feeds the samples itself
    (from :func:`wave_samples`, i.e. independently of the engine).
    """
    from solderless.engine.formats.spice import parse_netlist
    p = NETLIST_DIR / f"{name}.cir"
    src = "VIN" if name in audio_netlists() else None
    nl = parse_netlist(p.read_text(), file=str(p), in_source=src, out_node="out")
    circ = nl.circuit
    if not keep_wave and circ.input_source:
        circ.element(circ.input_source).params.pop("wave", None)
    return circ


def engine_input(name: str, fs: float, duration: float) -> tuple[np.ndarray, np.ndarray]:
    """(t, x): sample times and the input samples for VIN at rate fs (x is the
    wave minus VIN's DC value, because the engine adds x to the DC value)."""
    text = load_netlist(name)
    dc, kind, nums = source_wave(text, "VIN")
    n = int(np.floor(duration * fs + 1e-9)) + 1
    t = np.arange(n) / fs
    return t, wave_samples(kind, nums, t, dc) - dc


def engine_simulator():
    """Return Solderless' Simulator class, or skip the test if it is not built yet."""
    import pytest
    try:
        from solderless.engine.solver import Simulator
    except ImportError as exc:
        pytest.skip(f"solderless.engine.solver.Simulator not available: {exc}")
    return Simulator
