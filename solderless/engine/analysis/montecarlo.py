"""Tolerance Monte Carlo and the trial machinery shared with value sweeps.

One :class:`TrialRunner` per process holds a compiled :class:`Simulator` of
the design; a trial changes element values through the simulator's
value-edit path (``set_values``: new matrices, the same compiled kernel, no
recompilation) and device parameters in place in the device parameter
vector, then measures:

* the DC operating point: every device's region (``in_region``: every
  transistor, op-amp and gain cell in the same region as at nominal
  values) and the smallest transistor headroom (|Vce| - 0.3 V for a BJT,
  |Vds| for a FET; common practice; each device's ``headroom`` hook,
  solderless/engine/devices/registry.py);
* the small-signal gain and input impedance at 1 kHz
  (:func:`solderless.engine.solver.ac.ac_response`);
* for designs with a control (``[meters] control``): the threshold (input
  level, dBV RMS, of 1 dB gain reduction on an upward stepped tone), the
  gain reduction at a reference level (a 220 Hz burst of
  ``REFERENCE_PEAK_V`` volts peak), and the attack and release time
  constants (63 %, Giannoulis et al. JAES 2012; solderless.engine.analysis.compression).

Draws: every resistor, capacitor, inductor and pot track is scaled by
``1 + e`` with ``e`` uniform on [-tol, +tol] or normal with sigma = tol/3
(``dist``); a part without a tolerance takes the common-practice default of
its type (solderless.engine.analysis.build.DEFAULT_TOLERANCE).  Device parameters with
a ``spread`` in the parts library are drawn over [low, high] (log scale
when the range is wider than 3:1).  Trial ``k`` of seed ``s`` draws from
``numpy.random.SeedSequence(s, spawn_key=(k,))`` -- the ``k``-th child of a
``spawn`` -- so its numbers do not depend on which worker runs it or in
what order; every operating point is solved from the same cold start.
"""
from __future__ import annotations

import hashlib
import math
import pickle
import threading
from dataclasses import dataclass, field

import numpy as np

from solderless.engine.analysis import compression as cp
from solderless.engine.derived import LiveSet
from solderless.engine.errors import DesignError, SolderlessError

FS = 48000.0
#: Peak volts of the reference burst: a hard-picked note at the jack (tens of
#: mV peak; docs/references.md, guitar pickups, common practice).
REFERENCE_PEAK_V = 0.05
#: Default yield limit: gain within this many dB of nominal.
GAIN_LIMIT_DB = 1.0
#: Metrics a trial reports (name -> unit).
METRICS = {"gain_db": "dB", "zin": "Ω", "headroom": "V", "threshold_db": "dBV",
           "gr_ref_db": "dB", "attack": "s", "release": "s"}
DISTRIBUTIONS = ("uniform", "normal")
#: Longest tail (s) rendered after the burst to see a slow release.
MAX_TAIL = 8.0
#: Devices whose region at rest must match the nominal design's for a trial
#: to pass: transistors, op-amps and gain cells (diodes switch by design).
REGION_KINDS = LiveSet(lambda: [d.kind for d in _devices() if d.steady_region])


def _devices():
    from solderless.engine.devices.registry import devices
    return devices()


def burst_timing(sim, fs: float, law: str = "linear", lead: float = 0.15,
                 burst: float = 0.35, tail: float = 0.5, amplitude: float = REFERENCE_PEAK_V):
    """(attack, release, gain reduction at the reference level) from a tone
    burst, read from the simulator's first probe (the control quantity).
    The simulator is reset to its operating point first."""
    x, t0, t1 = cp.tone_burst(fs, 220.0, amplitude, lead=lead, burst=burst, tail=tail)
    sim.reset()
    _, pdata = sim.run(x)
    ctl = pdata[0]
    rest = float(np.median(ctl[: max(1, int(0.8 * lead * fs))]))
    if law == "linear" and not rest > 0:
        return float("nan"), float("nan"), float("nan")
    gr = cp.gain_reduction_from_control(ctl, rest, law)
    n = max(1, int(0.01 * fs))
    # 10 ms moving average against the detector's ripple; the ends are
    # padded with their own values (zero padding would fake a recovery at
    # the end of the trace)
    grs = np.convolve(np.pad(gr, (n // 2, n - 1 - n // 2), mode="edge"), np.ones(n) / n,
                      mode="valid")
    i1 = int(t1 * fs)
    ref = float(np.mean(grs[i1 - int(0.05 * fs):i1 - n]))
    if ref > -0.1:          # no gain reduction at this level: no time constants
        return float("nan"), float("nan"), ref
    att = cp.attack_time(grs, fs, start=t0, final=ref)
    rel = cp.release_time(grs, fs, start=t1, final=0.0)
    return float(att), float(rel), ref


def stepped_threshold(sim, fs: float, law: str = "linear", hold: float = 0.08,
                      levels_db=np.arange(-64.0, -7.9, 4.0), reduction_db: float = 1.0):
    """Input level (dBV RMS) where an upward stepped 220 Hz tone first gets
    ``reduction_db`` of gain reduction, read from the control quantity at
    the end of each step (interpolated; NaN when it never does)."""
    x = cp.stepped_tone(np.asarray(levels_db, float), fs, 220.0, hold)
    sim.reset()
    _, pdata = sim.run(x)
    ctl = pdata[0]
    rest = float(ctl[0])
    if law == "linear" and not rest > 0:
        return float("nan")
    gr = cp.gain_reduction_from_control(ctl, rest, law)
    n = int(round(hold * fs))
    m = int(round(fs / 220.0))
    ends = np.array([-float(np.mean(gr[(k + 1) * n - m:(k + 1) * n]))
                     for k in range(len(levels_db))])
    curve = cp.StaticCurve(np.asarray(levels_db, float), np.asarray(levels_db, float) - ends,
                           220.0)
    return curve.threshold_db(reduction_db)


@dataclass
class TrialSpec:
    """What every worker needs to run trials (picklable)."""
    design: object
    seed: int = 0
    dist: str = "uniform"
    control: bool = True       # measure threshold, gain reduction, attack, release
    threshold: bool = True
    fs: float = FS
    render_seconds: float = 1.0   # length of the burst render (lead+burst+tail)
    device_spread: bool = True
    key: str = ""

    def __post_init__(self):
        if self.dist not in DISTRIBUTIONS:
            raise DesignError(f"unknown distribution '{self.dist}'",
                              hint="use uniform or normal (sigma = tolerance/3)")
        if not self.key:
            blob = pickle.dumps((self.design.to_toml() if self.design.doc is not None
                                 else repr(self.design.flatten()), self.seed, self.dist,
                                 self.control,
                                 self.threshold, self.fs, self.render_seconds,
                                 self.device_spread))
            self.key = hashlib.sha1(blob).hexdigest()


@dataclass
class Draw:
    label: str           # stage.part, or stage.part:PARAM for a device spread
    elements: list[str]  # element names scaled together (a pot's two halves)
    tol: float = 0.0     # relative tolerance (value parts)
    lo: float = 0.0      # device spread
    hi: float = 0.0
    nominal: float = 0.0
    log: bool = False


def tolerance_draws(design) -> list[Draw]:
    """Every value part (resistor, capacitor, inductor, pot) with its tolerance."""
    from solderless.engine.analysis.build import DEFAULT_TOLERANCE, _kind_of
    out = []
    for info in design.parts():
        kind = _kind_of(info)
        if kind not in DEFAULT_TOLERANCE or not info.value:
            continue
        tol = info.tolerance if info.tolerance is not None else DEFAULT_TOLERANCE[kind]
        if not 0.0 < tol < 1.0:
            w = design.part(info.qualname).where
            raise DesignError(f"tolerance must lie between 0 and 100 % (exclusive), not "
                              f"{tol * 100:g} %", part=info.qualname,
                              file=w.file or (str(design.path) if design.path else None),
                              line=w.line, hint="write e.g. tolerance = \"5%\"")
        q = info.qualname if info.stage else info.name
        if design.netlist is not None:
            q = info.name
        els = [f"{q}.a", f"{q}.b"] if info.is_pot else [q]
        out.append(Draw(info.qualname, els, tol=tol))
    return out


class TrialRunner:
    """Runs trials of one spec in this process (one compiled simulator)."""

    def __init__(self, spec: TrialSpec):
        from solderless.engine.parts import load_library
        from solderless.engine.solver import Simulator
        self.spec = spec
        d = spec.design
        circ = d.flatten()
        self.law = d.meters.get("control_law", "linear")
        ctl = d.control_probe() if spec.control else None
        probes = (d.resolve_probe(ctl),) if ctl else ()
        self.has_control = bool(ctl)
        self.sim = Simulator(circ, fs=spec.fs, probes=probes)
        self.net = self.sim.net
        self.nominal = dict(self.sim.values)
        self.draws = tolerance_draws(d)
        for dr in self.draws:
            missing = [e for e in dr.elements if e not in self.nominal]
            if missing:
                dr.elements = [e for e in dr.elements if e in self.nominal]
        self.draws = [dr for dr in self.draws if dr.elements]
        self.dev_index = {el.name: k for k, (el, _, _, _) in enumerate(self.net.devices)}
        self.kinds = {el.name: el.kind for el, _, _, _ in self.net.devices}
        self.base_params = {el.name: dict(el.params) for el, _, _, _ in self.net.devices}
        self.base_par = [lay.par.copy() for _, _, lay, _ in self.net.devices]
        self.base_dead = [lay.dead for _, _, lay, _ in self.net.devices]
        if spec.device_spread:
            lib = load_library()
            for el, _, _, _ in self.net.devices:
                m = lib.find(str(el.params.get("MODEL", "")))
                if m is None:
                    continue
                for p, (lo, hi) in m.spread.items():
                    if p in el.params and p in self.base_params[el.name]:
                        self.draws.append(Draw(f"{el.name}:{p}", [el.name], lo=lo, hi=hi,
                                               nominal=float(el.params[p]),
                                               log=lo > 0 and hi / lo > 3.0))
        self.nominal_result = None
        self.nominal_result = self.measure({}, {})

    # ------------------------------------------------------------ draws
    def draw(self, index: int) -> dict[str, float]:
        """Trial ``index``'s draws: relative deviation for value parts, the
        parameter value for device spreads."""
        rng = np.random.default_rng(np.random.SeedSequence(int(self.spec.seed),
                                                           spawn_key=(int(index),)))
        out = {}
        normal = self.spec.dist == "normal"
        for dr in self.draws:
            if dr.elements and dr.tol:
                if normal:
                    e = float(np.clip(rng.normal(0.0, dr.tol / 3.0), -0.99, 10.0))
                else:
                    e = float(rng.uniform(-dr.tol, dr.tol))
                out[dr.label] = e
            else:
                a, b = (math.log(dr.lo), math.log(dr.hi)) if dr.log else (dr.lo, dr.hi)
                if normal:
                    u = float(np.clip(rng.normal((a + b) / 2, (b - a) / 6), a, b))
                else:
                    u = float(rng.uniform(a, b))
                out[dr.label] = math.exp(u) if dr.log else u
        return out

    def apply(self, draws: dict[str, float]) -> tuple[dict, dict]:
        """Split draws into element value changes and device parameters."""
        values, devparams = {}, {}
        for dr in self.draws:
            if dr.label not in draws:
                continue
            if dr.tol:
                for e in dr.elements:
                    values[e] = self.nominal[e] * (1.0 + draws[dr.label])
            else:
                devparams.setdefault(dr.elements[0], {})[dr.label.split(":")[1]] = \
                    draws[dr.label]
        return values, devparams

    def circuit_for(self, draws: dict[str, float]):
        """The flat circuit with one trial's exact values and device
        parameters (for writing a netlist of that trial)."""
        values, devparams = self.apply(draws)
        circ = self.spec.design.flatten()
        for el in circ.elements:
            if el.name in values:
                el.value = values[el.name]
            if el.name in devparams:
                el.params = {**el.params, **devparams[el.name]}
        return circ

    def _set_devices(self, devparams: dict[str, dict]) -> None:
        from solderless.engine.circuit import Element
        for k, (el, mod, lay, _) in enumerate(self.net.devices):
            ch = devparams.get(el.name)
            if not ch:
                lay.par[:] = self.base_par[k]
                lay.dead = self.base_dead[k]
                continue
            params = dict(self.base_params[el.name])
            params.update(ch)
            new = self.net.layout_of(mod, Element(el.name, el.kind, el.nodes, el.value, params,
                                                      el.where))
            if new.par.shape != lay.par.shape or len(new.stamps) != len(lay.stamps):
                raise DesignError(f"a spread of {sorted(ch)} changes the structure of "
                                  f"device {el.name}", part=el.name,
                                  hint="spread only parameters of the device law")
            lay.par[:] = new.par
            lay.dead = new.dead       # an op-amp's dead zone follows VHR, VSOFT
        # the kernel reads the concatenated parameter vector
        self.sim.refresh_devices()

    # ------------------------------------------------------------ measure
    def measure(self, values: dict[str, float], devparams: dict[str, dict]) -> dict:
        """Set element values and device parameters and measure everything."""
        from solderless.engine.solver.ac import ac_response
        from solderless.engine.solver.dcop import report, solve_dc
        sim = self.sim
        full = dict(self.nominal)
        full.update(values)
        self._set_devices(devparams)
        if self.has_control:
            # renders follow: the kernel's matrices for these values
            sim.set_values(full)
            # a cold start for every operating point: results do not depend
            # on which trial ran before in this process
            sim._dc = None
            sim._dc_values = None
            sim._op = None
            op = sim.operating_point()
        else:
            # no render: the operating point alone, from the same cold start
            op = report(self.net, solve_dc(self.net, full), full)
        res = {}
        regions = {name: q.get("region", "") for name, q in op.devices.items()}
        res["regions"] = regions
        head = float("inf")
        from solderless.engine.devices.registry import DEVICES
        for el, _, _, _ in self.net.devices:
            q = op.devices.get(el.name, {})
            hook = DEVICES[el.kind].headroom      # the device's own (registry)
            h = hook(q) if hook is not None else None
            if h is not None:
                head = min(head, h)
        res["headroom"] = head if math.isfinite(head) else float("nan")
        res["nets"] = dict(op.nets)
        _, H, Z = ac_response(self.net, [1000.0], full)
        res["gain_db"] = float(20.0 * math.log10(max(abs(H[0]), 1e-30)))
        res["zin"] = float(abs(Z[0]))
        if self.has_control:
            spec = self.spec
            total = spec.render_seconds
            tail = 0.5 * total
            a, r, g = burst_timing(sim, spec.fs, self.law, lead=0.15 * total,
                                   burst=0.35 * total, tail=tail)
            # a release longer than the tail: render again with a longer one
            while not math.isfinite(r) and g < -0.1 and tail < MAX_TAIL:
                tail *= 4.0
                a, r, g = burst_timing(sim, spec.fs, self.law, lead=0.15 * total,
                                       burst=0.35 * total, tail=tail)
            res.update(attack=a, release=r, gr_ref_db=g)
            res["threshold_db"] = (stepped_threshold(sim, spec.fs, self.law)
                                   if spec.threshold else float("nan"))
        nom = self.nominal_result
        if nom is not None:
            # transistors and gain cells (not diodes, which switch by design)
            res["in_region"] = all(regions.get(k) == v for k, v in nom["regions"].items()
                                   if self.kinds.get(k) in REGION_KINDS)
        else:
            res["in_region"] = True
        return res

    def run(self, index: int) -> dict:
        """One trial: draws, then measurements (an unsolvable trial is
        recorded with its error and fails the yield)."""
        draws = self.draw(index)
        values, devparams = self.apply(draws)
        try:
            res = self.measure(values, devparams)
            res["error"] = ""
        except SolderlessError as exc:
            res = {"error": exc.message, "in_region": False, "regions": {}, "nets": {}}
        res["index"] = int(index)
        res["draws"] = draws
        return res


# ---------------------------------------------------------------- running many

_local = threading.local()


def runner_for(spec: TrialSpec) -> TrialRunner:
    """This thread's runner for ``spec`` (built once per worker)."""
    cache = getattr(_local, "runners", None)
    if cache is None:
        cache = _local.runners = {}
    r = cache.get(spec.key)
    if r is None:
        cache.clear()
        r = cache[spec.key] = TrialRunner(spec)
    return r


def run_chunk(spec: TrialSpec, indices: list[int], job=None) -> list[dict]:
    """Run trials ``indices`` in this worker. ``job`` (optional) is a
    callable (runner, index) -> result used by sweeps instead of
    :meth:`TrialRunner.run`."""
    r = runner_for(spec)
    return [job(r, i) if job is not None else r.run(i) for i in indices]


_WORKER_SPEC = None


def _pool_init(spec_bytes: bytes) -> None:
    global _WORKER_SPEC
    import signal
    # Ctrl-C reaches the whole process group: only the parent handles it
    # (it keeps the finished trials and stops the workers)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _WORKER_SPEC = pickle.loads(spec_bytes)


def _pool_chunk(indices, job=None):
    return run_chunk(_WORKER_SPEC, indices, job)


@dataclass
class RunResult:
    results: list[dict]
    interrupted: bool = False
    requested: int = 0
    where: str = "serial"


def _chunks(indices: list[int], size: int) -> list[list[int]]:
    return [indices[i:i + size] for i in range(0, len(indices), size)]


def run_trials(spec: TrialSpec, indices, workers: int | None = 1, cluster=None,
               progress=None, job=None, chunk: int | None = None,
               mp_context: str | None = None, stop: threading.Event | None = None) -> RunResult:
    """Run trials serially (``workers=1``), in a local process pool
    (``workers`` > 1, or None for every core) or on a Dask cluster
    (``cluster``: a scheduler address or a ``dask.distributed.Client``).
    ``progress(done, total)`` is called as trials finish.  Ctrl-C (or
    ``stop`` set) ends the run early: the results so far are returned with
    ``interrupted=True``. Results come back sorted by trial index."""
    import os
    indices = [int(i) for i in indices]
    total = len(indices)
    results: list[dict] = []
    interrupted = False
    tick = progress or (lambda done, total: None)
    if cluster is not None:
        where = "dask"
        interrupted = _run_dask(spec, indices, cluster, results, tick, job, chunk, stop)
    elif workers is not None and workers <= 1:
        where = "serial"
        try:
            r = runner_for(spec)
            for i in indices:
                if stop is not None and stop.is_set():
                    interrupted = True
                    break
                results.append(job(r, i) if job is not None else r.run(i))
                tick(len(results), total)
        except KeyboardInterrupt:
            interrupted = True
    else:
        import multiprocessing as mp
        from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
        n = workers or os.cpu_count() or 1
        where = f"pool x{n}"
        size = chunk or max(1, min(4, total // (4 * n) or 1))
        ctx = mp.get_context(mp_context) if mp_context else None
        ex = ProcessPoolExecutor(max_workers=n, mp_context=ctx, initializer=_pool_init,
                                 initargs=(pickle.dumps(spec),))
        pending = set()
        try:
            pending = {ex.submit(_pool_chunk, c, job) for c in _chunks(indices, size)}
            while pending:
                done, pending = wait(pending, timeout=0.5, return_when=FIRST_COMPLETED)
                for f in done:
                    results.extend(f.result())
                tick(len(results), total)
                if stop is not None and stop.is_set():
                    interrupted = True
                    break
        except KeyboardInterrupt:
            interrupted = True
        finally:
            if interrupted:
                # chunks not started are dropped; the few running ones (at
                # most `size` trials each) finish and are kept
                for f in pending:
                    f.cancel()
                try:
                    for f in pending:
                        if not f.cancelled():
                            try:
                                results.extend(f.result())
                            except Exception:  # noqa: BLE001 - a lost chunk is not kept
                                pass
                except KeyboardInterrupt:
                    pass
            ex.shutdown(wait=True, cancel_futures=True)
    results.sort(key=lambda r: r["index"])
    return RunResult(results, interrupted, total, where)


def _run_dask(spec, indices, cluster, results, tick, job, chunk, stop) -> bool:
    try:
        from dask.distributed import Client, as_completed
    except ImportError as exc:
        raise SolderlessError(f"--cluster needs dask.distributed: {exc}",
                              hint="pip install 'dask[distributed]'") from None
    own = not hasattr(cluster, "submit")
    try:
        client = Client(cluster, timeout="10s") if own else cluster
    except (OSError, TimeoutError, ValueError) as exc:
        raise SolderlessError(f"cannot reach the Dask scheduler at {cluster!r}: {exc}",
                              hint="start one with 'dask scheduler' and workers with "
                                   "'dask worker ADDRESS'") from None
    interrupted = False
    futs = []
    try:
        nworkers = max(1, len(client.scheduler_info().get("workers", {})))
        size = chunk or max(1, min(4, len(indices) // (4 * nworkers) or 1))
        sfut = client.scatter(spec, broadcast=True)
        futs = [client.submit(run_chunk, sfut, c, job, pure=False)
                for c in _chunks(indices, size)]
        for f in as_completed(futs):
            results.extend(f.result())
            tick(len(results), len(indices))
            if stop is not None and stop.is_set():
                interrupted = True
                break
    except KeyboardInterrupt:
        interrupted = True
    finally:
        if interrupted:
            for f in futs:
                if not f.done():
                    f.cancel()
        if own:
            client.close()
    return interrupted


# ---------------------------------------------------------------- analysis

@dataclass
class Limits:
    """Yield limits: a trial passes when every one holds."""
    gain_db: float = GAIN_LIMIT_DB         # |gain - nominal| at 1 kHz
    regions: bool = True                   # every device in its nominal region
    extra: dict = field(default_factory=dict)  # metric -> (low, high)


def passes(res: dict, nominal: dict, limits: Limits) -> bool:
    if res.get("error"):
        return False
    if limits.regions and not res.get("in_region", False):
        return False
    if limits.gain_db is not None and not abs(res["gain_db"] - nominal["gain_db"]) \
            <= limits.gain_db:
        return False
    for m, (lo, hi) in limits.extra.items():
        v = res.get(m, float("nan"))
        if not (lo <= v <= hi):
            return False
    return True


def summary(results: list[dict], nominal: dict, limits: Limits,
            draws: list[Draw]) -> dict:
    """Yield, per-metric statistics and ranked sensitivity."""
    ok = [r for r in results if not r.get("error")]
    out = {"trials": len(results), "failed_to_solve": len(results) - len(ok),
           "passed": sum(passes(r, nominal, limits) for r in results)}
    out["yield"] = out["passed"] / len(results) if results else float("nan")
    stats = {}
    for m in METRICS:
        v = np.array([r.get(m, np.nan) for r in ok], float)
        v = v[np.isfinite(v)]
        if v.size == 0:
            continue
        stats[m] = {"nominal": nominal.get(m, float("nan")), "mean": float(v.mean()),
                    "std": float(v.std(ddof=1)) if v.size > 1 else 0.0,
                    "min": float(v.min()), "max": float(v.max()),
                    "p05": float(np.percentile(v, 5)), "p95": float(np.percentile(v, 95))}
    out["stats"] = stats
    out["sensitivity"] = {m: sensitivity(ok, m, draws) for m in stats
                          if m in ("gain_db", "zin", "threshold_db", "release", "attack",
                                   "headroom", "gr_ref_db")}
    return out


def sensitivity(results: list[dict], metric: str, draws: list[Draw], top: int = 8):
    """Which draws drive a metric's spread most: standardised regression
    coefficients of a linear least-squares fit of the metric on every draw,
    as a share of the explained variance (largest first)."""
    rows = [r for r in results if math.isfinite(r.get(metric, float("nan")))]
    labels = [d.label for d in draws]
    if len(rows) < len(labels) + 3 or not labels:
        return []
    X = np.array([[r["draws"].get(lab, 0.0) for lab in labels] for r in rows], float)
    y = np.array([r[metric] for r in rows], float)
    sx = X.std(axis=0)
    keep = sx > 0
    if not keep.any() or y.std() == 0:
        return []
    Xs = (X[:, keep] - X[:, keep].mean(axis=0)) / sx[keep]
    ys = (y - y.mean()) / y.std()
    coef, *_ = np.linalg.lstsq(np.column_stack([Xs, np.ones(len(ys))]), ys, rcond=None)
    c = coef[:-1]
    share = c * c / max(float(np.sum(c * c)), 1e-300)
    kl = [lab for lab, k in zip(labels, keep) if k]
    order = np.argsort(-share)[:top]
    return [{"part": kl[i], "coefficient": float(c[i]), "share": float(share[i])}
            for i in order]


def plots(results: list[dict], nominal: dict, out, prefix: str = "mc") -> dict[str, str]:
    """Histograms of every metric (PNG)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    files = {}
    ok = [r for r in results if not r.get("error")]
    ms = [m for m in METRICS if any(math.isfinite(r.get(m, float("nan"))) for r in ok)]
    if not ms:
        return files
    cols = 3
    rows = (len(ms) + cols - 1) // cols
    fig, axes = plt.subplots(rows, cols, figsize=(10, 2.6 * rows), squeeze=False)
    for ax, m in zip(axes.flat, ms):
        v = np.array([r.get(m, np.nan) for r in ok], float)
        v = v[np.isfinite(v)]
        ax.hist(v, bins=max(5, min(40, v.size // 5 or 5)), color="#888")
        if math.isfinite(nominal.get(m, float("nan"))):
            ax.axvline(nominal[m], color="k", lw=1)
        ax.set_title(f"{m} ({METRICS[m]})", fontsize=9)
    for ax in list(axes.flat)[len(ms):]:
        ax.axis("off")
    fig.tight_layout()
    name = f"{prefix}_distributions.png"
    fig.savefig(out / name, dpi=90)
    plt.close(fig)
    files["distributions"] = name
    return files
