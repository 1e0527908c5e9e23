"""Simulator: a flat circuit running sample by sample, with live part changes.

Build once per topology; :meth:`Simulator.process_into` is the audio-thread
entry (no allocation, compiled kernel, GIL released); everything else runs on
other threads.  Value changes (:meth:`Simulator.set_values`) re-derive the
model in the calling thread and hand it over at the next block boundary by a
reference swap -- the audio thread takes no lock.
"""
from __future__ import annotations

import threading

import numpy as np

from solderless.engine.circuit import Circuit, GROUND, canonical_net
from solderless.engine.errors import DesignError
from solderless.engine.probes import parse_probe
from solderless.engine.solver import dormant
from solderless.engine.solver import kernel_layout as KL
from solderless.engine.solver.dcop import OperatingPoint, report, solve_dc
from solderless.engine.solver.mna import VALUE_KINDS, Network, device_arrays, source_wave
from solderless.engine.solver.statespace import Model, ProbeRow, derive, padded

#: Key of a live change that sets the circuit temperature (degrees Celsius)
#: instead of an element value: ``sim.set_values({TEMPERATURE_KEY: 45.0})``.
TEMPERATURE_KEY = "@temperature"


def _net_col(net: Network, name: str, probe: str) -> int:
    n = canonical_net(name)
    if n == GROUND:
        return -1
    if n not in net.net_index:
        # SPICE names are case-insensitive (a netlist's nets are read in
        # lower case): take a name that differs only in case, if just one
        same = [k for k in net.net_index if k.lower() == n.lower()]
        if len(same) == 1:
            return net.net_index[same[0]]
        raise DesignError(f"probe {probe!r}: no net named {name!r}", part=probe,
                          hint="use a net name of the circuit, e.g. v(out)")
    return net.net_index[n]


def make_probe(net: Network, text: str) -> ProbeRow:
    """Parse a probe name (``v(net)``, ``v(a,b)``, ``i(R1)``, ``ic(Q1)`` ...)."""
    parts = parse_probe(text)
    if parts is None:
        raise DesignError(f"cannot read probe {text!r}", part=text,
                          hint="write e.g. v(out), v(a,b), i(R1), ic(Q1), gm(U1)")
    q, names = parts[0].lower(), parts[1]
    a, b = names[0], names[1] if len(names) == 2 else None
    nw, nx, nu, npt = net.nw, net.nx, net.nu, net.np_
    z = lambda k: np.zeros(k)  # noqa: E731
    if q == "v":
        ca = _net_col(net, a, text)
        cb = _net_col(net, b, text) if b else -1

        def build(values, g, ca=ca, cb=cb):
            cw = z(nw)
            if ca >= 0:
                cw[ca] += 1.0
            if cb >= 0:
                cw[cb] -= 1.0
            return cw, z(nx), z(nu), z(npt), z(npt)
        return ProbeRow(text, "V", build)
    if b is not None:
        raise DesignError(f"probe {text!r} takes one name", part=text)
    if q == "i":
        el = net.elements.get(a)
        if el is None or el.kind not in ("R", "C", "L", "V", "E", "H", "I"):
            raise DesignError(f"probe {text!r}: no R, C, L, V, E, H or I element named {a!r}",
                              part=text, hint="device currents: ic(Q1), id(D1), iout(U1)")
        if el.kind == "R":
            na, nb = net._node(el.nodes[0]), net._node(el.nodes[1])

            def build(values, g, na=na, nb=nb, name=a):
                cw = z(nw)
                if na >= 0:
                    cw[na] += 1.0 / values[name]
                if nb >= 0:
                    cw[nb] -= 1.0 / values[name]
                return cw, z(nx), z(nu), z(npt), z(npt)
        elif el.kind == "C":
            k = net.state_index[a]
            st = net.states[k]

            def build(values, g, k=k, st=st):
                cw = z(nw)
                if st.a >= 0:
                    cw[st.a] += g[k]
                if st.b >= 0:
                    cw[st.b] -= g[k]
                cx = z(nx)
                cx[k] = -1.0
                return cw, cx, z(nu), z(npt), z(npt)
        elif el.kind == "I":
            k = net.source_index[a]

            def build(values, g, k=k):
                cu = z(nu)
                cu[k] = 1.0
                return z(nw), z(nx), cu, z(npt), z(npt)
        else:
            j = net.branch_of[a]

            def build(values, g, j=j):
                cw = z(nw)
                cw[j] = 1.0
                return cw, z(nx), z(nu), z(npt), z(npt)
        return ProbeRow(text, "A", build)
    for el, mod, lay, po in net.devices:
        if el.name == a:
            if q not in lay.probes:
                raise DesignError(f"probe {text!r}: a {el.kind} device has no quantity {q!r}",
                                  part=text, hint="available: " + ", ".join(sorted(lay.probes)))
            ci, cv = lay.probes[q]

            def build(values, g, ci=ci, cv=cv, po=po):
                vi, vv = z(npt), z(npt)
                for k, c in ci.items():  # kernel currents are i - PORT_G0*v
                    vi[po + k] = c
                    vv[po + k] += c * KL.PORT_G0
                for k, c in cv.items():
                    vv[po + k] += c
                return z(nw), z(nx), z(nu), vi, vv
            # the unit each device declares for its probes (the registry)
            from solderless.engine.devices.registry import DEVICES
            return ProbeRow(text, DEVICES[el.kind].probes.get(q, ""), build)
    raise DesignError(f"probe {text!r}: no device named {a!r}", part=text,
                      hint="probe a transistor, diode, JFET, OTA or op-amp by its name")


def source_rate_warnings(net: Network, step: float) -> list[str]:
    """Warnings for waveform sources the simulation step cannot carry: a SIN
    at or above the kernel's Nyquist frequency 1/(2*step) folds back
    (aliases) to a lower frequency, a PULSE repeating in under two steps
    is not a pulse train any more.  The input source is not played from its
    waveform and is not checked."""
    out = []
    nyq = 0.5 / step
    for k, el in enumerate(net.sources):
        if k == net.input_index:
            continue
        kind, par = source_wave(el)
        where = el.where
        at = (f"{where.file}:{where.line}: " if where and where.file and where.line
              else "")
        if kind == KL.WAVE_SIN and abs(par[2]) >= nyq:
            out.append(f"{at}source {el.name}: SIN frequency {par[2]:g} Hz is at or above "
                       f"the simulation's Nyquist frequency {nyq:g} Hz and aliases; raise "
                       "the sample rate or the oversampling")
        elif kind == KL.WAVE_PULSE and 0 < par[6] < 2.0 * step:
            out.append(f"{at}source {el.name}: PULSE period {par[6]:g} s is shorter than two "
                       f"simulation steps ({2 * step:g} s) and aliases; raise the sample "
                       "rate or the oversampling")
    return out


_F8 = np.dtype(np.float64)


def _block_fits(x, y, pb) -> bool:
    """The block's own arrays fit the ahead-of-time runners (C-contiguous
    float64)."""
    return (x.dtype == _F8 and y.dtype == _F8 and pb.dtype == _F8 and x.ndim == 1
            and y.ndim == 1 and pb.ndim == 2 and x.flags.c_contiguous
            and y.flags.c_contiguous and pb.flags.c_contiguous)


class Simulator:
    """Real-time simulation of a flat circuit.

    Parameters
    ----------
    circuit : the flat circuit; ``circuit.input_source`` is driven by the
        input samples (added to its DC value; a waveform on it is ignored),
        ``circuit.output`` is read.  Other sources play their SIN/PULSE/PWL
        waveforms from t = 0 at the first processed sample.
    fs : outer sample rate, Hz.
    oversample : 1, 2, 4 or 8 (polyphase resampling around the kernel).
    probes : probe names, e.g. ``("v(out)", "ic(Q1)", "gm(U1)")``.
    probe_decimate : one probe frame every this many outer samples.
    block_max : largest block given to :meth:`process_into`.
    tolerance : error (volts) left in the nonlinear port voltages each
        sample; default the kernel's ERR_TOL (1 uV, SPICE's VNTOL).  The
        relative tolerance (kernel RELTOL, 1e-6 of the port voltage) scales
        with it.
    dormant_ports : solve without the ports of devices that draw nothing while
        they draw nothing (an op-amp's clamps away from the rails), where
        that makes the solve smaller (solver/dormant.py); False: always the
        full port solve (the same answers within the tolerance).

    The simulation starts at the DC operating point (no thump), solved with
    every source at its t = 0 value (the input source at its DC value), as
    ngspice starts a transient.  ``warnings`` lists waveform sources above
    the simulation's Nyquist frequency (:func:`source_rate_warnings`).
    """

    def __init__(self, circuit: Circuit, fs: float = 48000.0, oversample: int = 1,
                 probes=(), probe_decimate: int = 1, block_max: int = 4096,
                 tolerance: float | None = None, dormant_ports: bool = True):
        if not float(fs) > 0:
            raise DesignError(f"sample rate {fs!r} must be positive", part="simulator")
        if int(probe_decimate) < 1:
            raise DesignError("probe_decimate must be >= 1", part="simulator")
        self.tolerance = KL.ERR_TOL if tolerance is None else float(tolerance)
        if not self.tolerance > 0:
            raise DesignError(f"tolerance {tolerance!r} must be positive volts",
                              part="simulator")
        self.net = net = Network(circuit)
        self.circuit = circuit
        self.fs = float(fs)
        self.oversample = int(oversample)
        self.block_max = int(block_max)
        # the compiled entry points: the ahead-of-time module when a fresh
        # one exists, else the JIT kernel (solver/aot.py)
        from solderless.engine.solver.aot import kernels
        self._K = kernels()
        from solderless.engine.solver.oversample import Resampler
        self._rs = Resampler(self.oversample, self.block_max, self.fs)
        self.latency_samples = float(self._rs.latency)
        # Probes are read inside the kernel, behind the upsampling filter
        # only, which delays by half the round trip: latency*L/2 kernel
        # samples.  A probe frame is taken at the kernel sample whose phase
        # makes that delay a whole number of outer samples (for an odd
        # latency, half an outer sample after the sample's own instant), so
        # the frames line up with the audio exactly.
        L = self.oversample
        dk = int(round(self.latency_samples * L / 2))
        self._probe_phase = dk % L
        #: delay of probe frames behind the input, whole outer samples
        self.probe_latency_samples = float((dk - self._probe_phase) // L)
        self._T = 1.0 / (self.fs * self.oversample)
        out_a, out_b = circuit.output
        rows = [make_probe(net, f"v({out_a},{out_b})")]
        rows += [make_probe(net, p) for p in probes]
        self._rows = rows
        self.probe_names = [r.name for r in rows[1:]]
        self.probe_units = [r.unit for r in rows[1:]]
        self._pdec = int(probe_decimate) * self.oversample
        self._lock = threading.Lock()
        self._values = dict(net.values)
        #: the dormant-port plan (None: one lane, the full port solve)
        self._plan = dormant.plan(net) if dormant_ports else None
        self._arr = self._devices()
        self._arr_next = self._arr
        #: circuit temperature, degrees Celsius (None: 27)
        self.temperature = circuit.temperature
        # at most SMALL_PORTS nonlinear ports: the lean path (same state and counters);
        # lane 0 is the full port solve, lane 1 the reduced one (dormant.py)
        nred = self._plan.active.size if self._plan is not None else net.np_
        self._runner = ["run_block_small" if 0 < n <= KL.SMALL_PORTS else "run_block"
                        for n in (net.np_, nred)]
        self._run = [self._K.raw(r) for r in self._runner]
        #: whether _run[lane] is the ahead-of-time module's (it checks no
        #: argument: _args checks the simulator's arrays, process_into the
        #: block's)
        self._run_aot = [self._K.aot, self._K.aot]
        self._acache = [None, None]
        self._lane = 0
        skind, spars = [], []
        for k, el in enumerate(net.sources):
            kd, par = source_wave(el, self._T)
            if k == net.input_index:
                kd, par = KL.WAVE_DC, np.zeros(0)
            skind.append(kd)
            spars.append(par)
        self.warnings = source_rate_warnings(net, self._T)
        self._skind = np.array(skind, dtype=np.int64)
        self._sptr = np.zeros(len(spars) + 1, dtype=np.int64)
        self._sptr[1:] = np.cumsum([p.size for p in spars]) if spars else []
        self._spar = np.ascontiguousarray(np.concatenate(spars) if spars else np.zeros(0))
        self._op: OperatingPoint | None = None
        self._dc = None
        self._dc_values = None
        self._refresh_junctions(self._values)
        self._model: Model = self._derive(self._values)
        self._next: Model = self._model
        nx, nu, ny = net.nx, net.nu, len(rows)
        # kernel vector z = [x; varying sources; padding]; self._x is a view
        # of its head.  The kernel's port vectors are padded too (their
        # first net.np_ entries are the device ports).
        self._z = np.zeros(padded(nx + self._model.uvar.size))
        self._x = self._z[:nx]
        self._xp = np.zeros(nx)
        npt = padded(net.np_)
        self._u = np.zeros(nu)
        # each lane's port vectors and solver workspace: (v, i, pprev, ws,
        # G, Gf, J, Ji); the full lane's are also self._v, self._i ...
        self._work = [self._lane_work(npt, nx)]
        if self._plan is not None:
            # its row WS_WATCH takes the watched ports' voltages
            self._work.append(self._lane_work(padded(nred), max(nx, padded(net.np_))))
        (self._v, self._i, self._pprev, self._ws, self._G, self._Gf, self._J,
         self._Ji) = self._work[0]
        self._nowatch = (np.zeros((0, self._z.size)), np.zeros(0), np.zeros((0, npt)),
                         np.zeros((0, 2)))
        self._yrow = np.zeros(ny)
        self._state = np.zeros(KL.N_STATE, dtype=np.int64)
        self._stats = np.zeros(KL.N_STATS, dtype=np.int64)
        self._nopb = np.zeros((0, 0))
        self._xin_up = np.zeros(self.block_max * self.oversample)
        self._y_up = np.zeros(self.block_max * self.oversample)
        self.reset()

    @staticmethod
    def _lane_work(npt: int, nx: int):
        """One lane's port vectors and solver workspace for ``npt`` padded
        ports and ``nx`` states (the workspace is at least that wide):
        (v, i, pprev, ws, G, Gf, J, Ji)."""
        ws = np.zeros((KL.N_WS_ROWS, max(npt, padded(nx), KL.WS_MIN_COLS)))
        # J: [J | I], a pivot row, and the low-rank update's workspace
        return (np.zeros(npt), np.zeros(npt), np.zeros(npt), ws, np.zeros((npt, npt)),
                np.zeros((npt, npt)), np.zeros((npt + 1 + KL.J_EXTRA_ROWS, 2 * npt)),
                np.zeros((npt, npt)))

    def _derive(self, values: dict) -> Model:
        """The model for ``values``, with its two lanes when ports can go
        dormant (``model.lanes``: full, reduced; dormant.py)."""
        m = derive(self.net, values, self._T, self._rows)
        if self._plan is not None:
            m.lanes = (dormant.full_lane(m, self._plan), dormant.reduce(m, self._plan))
        return m

    def _devices(self):
        """The kernel's device arrays (mna.device_arrays) of the full lane,
        the reduced lane's (None without one) and the watched ports' dead
        zones."""
        arr = device_arrays(self.net, self._T)
        if self._plan is None:
            return arr, None, None
        return (arr, dormant.reduce_devices(arr, self._plan),
                dormant.limits(self.net, self._plan))

    def refresh_devices(self) -> None:
        """Take the devices' parameters again from the network's layouts
        (after a caller changed them in place, as a Monte Carlo trial does);
        not while another thread is inside :meth:`process_into`."""
        self._arr = self._arr_next = self._devices()
        self._charge_history(self._lane)

    # ------------------------------------------------------------ state
    def _refresh_junctions(self, values: dict) -> None:
        """Take the devices' junction capacitances at the operating point of
        ``values`` (and the current temperature) as the values of the
        time-domain junction states; the operating point is kept for
        :meth:`reset`.  A circuit whose operating point cannot be solved
        keeps the capacitances it had (reset reports the failure)."""
        net = self.net
        if not net.junction_states:
            return
        from solderless.engine.errors import SolveError
        try:
            dc = solve_dc(net, values, v0=None if self._dc is None else self._dc.v)
        except SolveError:
            return
        net.set_junction_caps(net.junction_caps(dc.w, dc.v))
        self._dc, self._dc_values, self._op = dc, dict(values), None

    def reset(self) -> None:
        """Return to the DC operating point of the current values.

        Not for use while another thread is inside :meth:`process_into`
        (call it from the audio thread, or with the stream stopped)."""
        m = self._next
        net = self.net
        if self._dc is None or self._dc_values != m.values:
            self._dc = solve_dc(net, m.values, v0=None if self._dc is None else self._dc.v)
            self._dc_values = dict(m.values)
            self._op = None
        dc = self._dc
        if getattr(net.circuit, "ic", None):
            # a render starts from the operating point with the .ic nets
            # held (ngspice's transient operating point)
            dc = solve_dc(net, m.values, initial=True)
        r = net.state_read_rows() @ dc.w
        self._x[:] = m.g * r  # capacitor: Gc*v with zero current; inductor: RL*i
        self._xp[:] = self._x
        n = net.np_
        self._v[:n] = dc.v
        self._i[:n] = dc.i - KL.PORT_G0 * dc.v
        self._pprev[:n] = m.Dv @ self._x + m.Ev @ m.udc
        for w in self._work:
            ws = w[3]
            ws[:] = 0.0
            ws[KL.WS_MEM, KL.MEM_ATOL] = self.tolerance
            ws[KL.WS_MEM, KL.MEM_RTOL] = KL.RELTOL * self.tolerance / KL.ERR_TOL
            ws[KL.WS_MEM, KL.MEM_CHARGE] = KL.CHARGE_ON if net.kernel_charge else 0.0
        self._fresh_lane(0)
        self._state[:] = 0
        self._lane = 0        # a reset starts on the full lane (dormant.py)
        self._state[KL.STATE_PHASE] = (self._pdec - self._probe_phase) % self._pdec
        self._stats[:] = 0
        self._model = m
        self._arr = self._arr_next
        self._charge_history(0)
        self._ydc = float(m.Dy[0] @ self._x + m.Ey[0] @ m.udc + m.Fy[0] @ self._i[:n]
                          + m.Vy[0] @ dc.v)
        self._rs.reset()

    def _charge_history(self, lane: int) -> None:
        """Have the lane's runner compute its charge history afresh at the
        start of its next block (workspace rows WS_QN, WS_QR: the charge
        history of each charge-storing device, taken at rest at the lane's
        port voltages, with the device parameters of that block;
        kernel_layout.MEM_CHARGE), where the
        solver has no evaluation to continue: after a reset and after new
        device parameters.  Compiled, on the audio thread, at no cost to
        the thread that edits."""
        if self.net.kernel_charge:
            self._work[lane][3][KL.WS_MEM, KL.MEM_CHARGE] = KL.CHARGE_AFRESH

    def _fresh_lane(self, lane: int) -> None:
        """The lane's solver memory starts over from its port voltages v: no
        kept Jacobian, no predictor history, no bypass memory."""
        v, ws = self._work[lane][0], self._work[lane][3]
        ws[KL.WS_V2, :v.size] = v
        ws[KL.WS_LPREV, :] = 0.0
        ws[KL.WS_VEVAL, :] = 1e300  # bypass memory: force a first evaluation
        ws[KL.WS_IEVAL, :] = 0.0
        ws[KL.WS_MEM, KL.MEM_THETA] = 0.0
        ws[KL.WS_MEM, KL.MEM_REFACTOR] = 0.0
        st = self._state
        st[KL.STATE_JI_OK] = 0
        st[KL.STATE_HARD] = 0
        st[KL.STATE_CHAIN] = 0
        st[KL.STATE_QUIET] = 0

    def _handover(self) -> None:
        """Switch lanes at the sample the runner stopped at (dormant.py):
        the lane taking over starts from the other's port solution (the
        dormant ports' voltages from the watch, their device currents
        zero) with fresh solver memory."""
        pl = self._plan
        A, D = pl.active, pl.dormant
        na = A.size
        fv, fi, fpp = self._work[0][:3]
        rv, ri, rpp, rws = self._work[1][:4]
        if self._lane == 1:
            # reduced -> full, at the sample the watch refused: its reduced
            # solution and the dormant ports' voltages are the warm start
            fv[A] = rv[:na]
            fi[A] = ri[:na]
            w = rws[KL.WS_WATCH, :D.size]
            fv[D] = w
            fi[D] = -KL.PORT_G0 * w
            m = self._model
            fpp[:] = m.p0 + m.Pz @ self._z   # used only by a first-sample fallback
            for row in (KL.WS_QN, KL.WS_QR):   # the charge history (dormant-capable
                fq, rq = self._work[0][3][row], rws[row]   # ports have none)
                fq[A] = rq[:na]
                fq[D] = 0.0
            self._lane = 0
        else:
            # full -> reduced after a committed sample
            rv[:na] = fv[A]
            ri[:na] = fi[A]
            rpp[:na] = fpp[A] - self._model.lanes[1].Rp @ fpp[D]
            for row in (KL.WS_QN, KL.WS_QR):
                rws[row, :na] = self._work[0][3][row][A]
            self._lane = 1
        self._fresh_lane(self._lane)
        self._stats[KL.STAT_HANDOVER] += 1

    def operating_point(self) -> OperatingPoint:
        """DC operating point report for the current part values (any thread;
        computed off the audio path)."""
        m = self._next
        if self._op is None or self._dc_values != m.values:
            dc = solve_dc(self.net, m.values, v0=self._dc.v if self._dc else None)
            self._op = report(self.net, dc, m.values)
            self._dc, self._dc_values = dc, dict(m.values)
        return self._op

    @property
    def values(self) -> dict[str, float]:
        """Current element values (SI), including pending live changes."""
        return dict(self._values)

    def set_values(self, changes: dict[str, float]) -> None:
        """Change element values (R, C, L, V, I, E, G) live; thread-safe.

        The new model is derived in the calling thread and picked up by the
        audio thread at its next block boundary, with capacitor voltages and
        currents and inductor currents carried over.
        """
        net = self.net
        changes = dict(changes)
        with self._lock:
            if TEMPERATURE_KEY in changes:
                self._set_temperature(changes.pop(TEMPERATURE_KEY))
            new = dict(self._values)
            for name, val in changes.items():
                el = net.elements.get(name)
                if el is None or el.kind not in VALUE_KINDS:
                    raise DesignError(f"no R, C, L, V, I, E, G, F or H element named {name!r}",
                                      part=name, hint="live changes take element values; "
                                                      "a pot is '<pot>.a' and '<pot>.b'")
                new[name] = net.check_value(el, val)
            # a supply edit moves the op-amps' clamp thresholds (their
            # parameters hold the fixed rail potentials)
            rails = any(net.elements[n].kind == "V" for n in changes) and net.refresh_rails(new)
            # junction capacitances follow the operating point of the new values
            kept = [s.value for s in net.states]
            try:
                self._refresh_junctions(new)
                model = self._derive(new)
            except Exception:
                for s, v in zip(net.states, kept):  # a refused edit changes nothing
                    s.value = v
                if rails:
                    net.refresh_rails(self._values)
                raise
            self._values = new
            self._next = model
            if rails:
                self._arr_next = self._devices()
                self._dc_values = None

    def _set_temperature(self, temp_c) -> None:
        """Re-derive every device's parameters at a new circuit temperature
        (degrees Celsius); the audio thread takes them at its next block."""
        net = self.net
        t = float(temp_c)
        if not -100.0 <= t <= 250.0:
            raise DesignError(f"temperature {t:g} degC is out of range (-100 to 250)",
                              part="temperature")
        devs = []
        for el, mod, lay, po in net.devices:
            if getattr(mod, "TEMPERATURE", False):
                new = net.layout_of(mod, el, temp=t)
                if new.ports != lay.ports or new.par.size != lay.par.size:
                    raise DesignError("a temperature change moved a device's ports",
                                      part=el.name)
                lay = new
            devs.append((el, mod, lay, po))
        net.devices = devs
        net.temperature = t
        self.temperature = t
        self._arr_next = self._devices()
        self._dc_values = None  # the operating point moved

    # ------------------------------------------------------------ audio thread
    def _swap(self):
        a = self._arr_next
        if a is not self._arr:
            self._arr = a
            # new device parameters (a temperature or supply edit): the
            # charge history at the same voltages with the new laws, so the
            # edit itself drives no charge current
            self._charge_history(self._lane)
        m = self._next
        if m is not self._model:
            self._K.convert_states(self._x, self._xp, self._model.g, m.g, m.a, m.b)
            self._model = m
        return m

    def process_into(self, x: np.ndarray, y: np.ndarray, probe_buf: np.ndarray | None = None,
                     probe_start: int = 0) -> int:
        """Process one block: x (input volts, float64) -> y (output volts).

        Audio-thread safe: no array allocation, no locks; the kernel releases
        the GIL.  ``len(x) <= block_max``.  probe_buf is float64
        (n_probes, capacity) or None; frames go to columns probe_start ...
        capacity-1; returns the number of probe frames written.
        """
        m = self._swap()
        n = x.shape[0]
        pb = self._nopb if probe_buf is None else probe_buf
        pcap = pb.shape[1] if pb.shape[0] else 0
        fits = _block_fits(x, y, pb)
        if self.oversample == 1:
            return self._run_lanes(m, x, n, y, pb, probe_start, pcap, fits)
        L = self.oversample
        xu, yu = self._xin_up, self._y_up
        self._rs.up_into(x, xu)
        frames = self._run_lanes(m, xu, n * L, yu, pb, probe_start, pcap, fits)
        yv = yu[:n * L]
        yv -= self._ydc
        self._rs.down_into(yv, y)
        y[:n] += self._ydc
        return frames

    def _run_lanes(self, m: Model, xin, nin: int, yout, pb, pstart: int, pcap: int,
                   fits: bool) -> int:
        """Run nin kernel samples, on the lane the watch asks for from
        sample to sample (one call when there is one lane); returns the
        probe frames written."""
        if self._plan is None:
            run, args = self._call(m, 0, fits)
            return run(xin, nin, yout, pb, pstart, pcap, self._pdec, *args)
        st = self._state
        done = frames = 0
        while True:
            lane = self._lane
            st[KL.STATE_WATCH] = KL.WATCH_REDUCED if lane else KL.WATCH_FULL
            run, args = self._call(m, lane, fits)
            if done:
                xin, yout = xin[done:], yout[done:]
            frames += run(xin, nin, yout, pb, pstart + frames, pcap, self._pdec, *args)
            k = int(st[KL.STATE_DONE])
            nin -= k
            done = k
            if st[KL.STATE_HANDOVER]:
                self._handover()
            if nin <= 0:
                return frames

    def _call(self, m: Model, lane: int, fits: bool):
        """The runner and its arguments after ``pdec`` for a lane; the JIT
        runner where the block's arrays do not fit the ahead-of-time one."""
        args = self._args(m, lane)
        run = self._run[lane]
        if self._run_aot[lane] and not fits:
            run = getattr(self._jit(), self._runner[lane])
        return run, args

    def _args(self, m: Model, lane: int = 0):
        """A lane's runner arguments after ``pdec``, in the order of
        kernel_layout.RUN_BLOCK_ARGS.  Made (and, for the ahead-of-time
        module, checked against its signature) once per model, device
        arrays and source arrays; a misfit runs the JIT kernel instead."""
        c = self._acache[lane]
        if (c is not None and c[0] is m and c[1] is self._arr and c[2] is self._spar
                and c[3] is self._sptr and c[4] is self._skind):
            return c[5]
        arr, rarr, wlim = self._arr
        if self._plan is None:
            dev = arr
            L = dormant.Lane(m.Pz, m.p0, m.Az, m.x0, m.Ck, m.Kk, m.Yz, m.y0, m.Fyk, m.Vyk,
                             m.kc, *self._nowatch[:3])
        else:
            L = m.lanes[lane]
            dev = rarr if lane else arr
        watch = (L.Wz, L.w0, L.Wk, self._nowatch[3] if wlim is None else wlim)
        t = (L.Pz, L.p0, L.Az, L.x0, L.Ck, L.Kk, L.Yz, L.y0, L.Fyk, L.Vyk, L.kc, *watch,
             *dev, m.uvar, self._skind, self._sptr, self._spar, self.net.input_index,
             self._T, self._z, self._xp, *self._work[lane], self._yrow, self._state,
             self._stats)
        if self._run_aot[lane] and not self._K.fits(self._runner[lane], t, start=7):
            self._run[lane] = getattr(self._jit(), self._runner[lane])
            self._run_aot[lane] = False
        self._acache[lane] = (m, self._arr, self._spar, self._sptr, self._skind, t)
        return t

    @staticmethod
    def _jit():
        from solderless.engine.solver.aot import jit_kernels
        return jit_kernels()

    def process(self, x, probe_buf: np.ndarray | None = None) -> np.ndarray:
        """Offline convenience: process any length of input; allocates y."""
        x = np.ascontiguousarray(x, dtype=np.float64).ravel()
        y = np.empty_like(x)
        B = self.block_max
        for s in range(0, x.shape[0], B):
            e = min(x.shape[0], s + B)
            self.process_into(x[s:e], y[s:e], None)
        return y

    def run(self, x, probe_capacity: int | None = None):
        """Offline: process x and return (y, probes) with probes of shape
        (n_probes, frames)."""
        x = np.ascontiguousarray(x, dtype=np.float64).ravel()
        cap = probe_capacity or (x.shape[0] // max(1, self._pdec // self.oversample) + 1)
        pb = np.zeros((len(self.probe_names), cap))
        y = np.empty_like(x)
        B = self.block_max
        frames = 0
        for s in range(0, x.shape[0], B):
            e = min(x.shape[0], s + B)
            frames += self.process_into(x[s:e], y[s:e], pb, frames)
        return y, pb[:, :frames]

    @property
    def stats(self) -> dict:
        """Counters since the last reset: samples (kernel rate), nonconverged,
        fallbacks, max_iterations, mean_iterations, factorizations (Jacobian
        inversions; chord iterations reuse the last one), jacobian_updates
        (low-rank updates of the inverse instead of a factorisation),
        reduced_samples and handovers (dormant ports), pseudo_transient
        (samples solved by the last-resort pseudo-transient continuation)."""
        c = self._stats
        s = int(c[KL.STAT_SAMPLES])
        return {"samples": s, "nonconverged": int(c[KL.STAT_NONCONV]),
                "fallbacks": int(c[KL.STAT_FALLBACK]), "max_iterations": int(c[KL.STAT_MAXIT]),
                "mean_iterations": float(c[KL.STAT_ITERS]) / s if s else 0.0,
                "factorizations": int(c[KL.STAT_FACTOR]),
                "jacobian_updates": int(c[KL.STAT_UPDATE]),
                "reduced_samples": int(c[KL.STAT_REDUCED]),
                "handovers": int(c[KL.STAT_HANDOVER]),
                "pseudo_transient": int(c[KL.STAT_PSEUDO])}

    @property
    def n_ports(self) -> int:
        return self.net.np_

    @property
    def n_states(self) -> int:
        return self.net.nx
