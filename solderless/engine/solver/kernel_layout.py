"""The compiled kernel's contract with the Python side, as plain constants.

Model building (:mod:`~solderless.engine.solver.statespace`,
:mod:`~solderless.engine.solver.mna`, :mod:`~solderless.engine.solver.dcop`)
and :class:`~solderless.engine.solver.simulator.Simulator` import these;
so does the compiled kernel (:mod:`solderless.engine.solver.kernel`).  This
module imports nothing compiled, so reading a constant never loads the kernel.
numba freezes module-level numbers into the compiled code: a named slot
costs nothing at run time.

Arrays the block runners take (``RUN_BLOCK_ARGS`` lists all of them, in
order):

``ws``     float64 workspace, ``N_WS_ROWS`` x max(padded ports, padded
           states, ``WS_MIN_COLS``).  Rows ``WS_P`` ... ``WS_XT`` are
           per-sample scratch; rows ``WS_V2`` ... ``WS_MEM`` and ``WS_QN`` persist from
           sample to sample (Simulator.reset sets them).
``state``  int64 solver state, ``N_STATE`` slots ``STATE_*``: what the next
           sample needs (sample index, probe phase, whether the kept inverse
           is valid, ...).  Never reported.
``stats``  int64 run statistics, ``N_STATS`` slots ``STAT_*``: only counted,
           read by Simulator.stats; the solver reads STAT_FACTOR and
           STAT_UPDATE within a sample (their difference over the sample is
           its number of fresh Jacobians).
"""
#: Conductance placed across every device port in the linear network (and
#: taken off the device currents, so the model is exact).  It keeps the
#: linear network regular when a net touches only device ports (a Darlington
#: base, a diode string, an OTA bias pin fed by a current source).
PORT_G0 = 1e-3

#: Chord iterations stop when the estimated error left, th/(1-th)*|step|
#: (th: contraction rate), is below ERR_TOL (+RELTOL*|v|): SPICE's default
#: absolute voltage tolerance VNTOL, 1 uV (ngspice manual, .options), here
#: applied to the error left rather than to the last step.  1 uV at a
#: junction is 4e-5 relative in its current (-88 dB); on the built-in
#: designs' guitar phrase the output stays within -95 dB (RMS) of runs with
#: the tolerance (and RELTOL with it) at 1e-11 V (bench/bench_accuracy.py).
ERR_TOL = 1e-6  # V
#: Relative part of every convergence test (of |v|, the port voltage), at
#: the default tolerance; it scales with Simulator's tolerance.
RELTOL = 1e-6

#: Circuits with at most this many nonlinear ports run the lean block runner
#: (:func:`solderless.engine.solver.kernel.run_block_small`).
SMALL_PORTS = 4

#: Largest number of ports whose Jacobian blocks a low-rank update of the
#: inverse takes on (and at most half the padded ports); more, and the
#: Jacobian is refactored (at 16 padded ports an update of 6 ports still
#: costs about two thirds of a Gauss-Jordan inversion).
UPDATE_PORTS = 6
#: Rows the Jacobian scratch J needs beyond the n + 1 of Gauss-Jordan (the
#: low-rank update's workspace: its small system, W^T, one column).
J_EXTRA_ROWS = 2 * UPDATE_PORTS + 1

# --- source waveform codes (mna.source_wave -> kernel.wave_value) ----------
WAVE_DC = 0       # constant (folded into the model's offsets)
WAVE_SIN = 1      # SIN(VO VA FREQ TD THETA PHASE)
WAVE_PULSE = 2    # PULSE(V1 V2 TD TR TF PW PER)
WAVE_PWL = 3      # PWL(t0 v0 t1 v1 ...)
WAVE_NOISE = 4    # live noise: samples fed per block, [dt, k0, s0, s1 ...]
                  # (solderless/engine/solver/livenoise.py)

# --- rows of the workspace ws ----------------------------------------------
WS_P = 0          # scratch: p, this sample's linear part of the port voltages
WS_VPREV = 1      # scratch: the previous sample's solution v
WS_STEP = 2       # scratch: residual / step of the port solve (F)
WS_VNEW = 3       # scratch: candidate v of a step (vn)
WS_PTMP = 4       # scratch: p of the current continuation sub-step
WS_XT = 5         # scratch: the state update x' before its finiteness check
WS_V2 = 6         # persists: v two samples back (Simulator.reset: the DC v)
WS_LPREV = 7      # persists: the predictor's last linear step
WS_VEVAL = 8      # persists: bypass memory, v at each port's last evaluation
WS_IEVAL = 9      # persists: bypass memory, i at that evaluation
WS_MEM = 10       # persists: the scalars MEM_* below
WS_WATCH = 11     # out: the watched ports' voltages at the last solved sample
WS_QN = 12        # persists: the charge currents' history per port (with
                  # MEM_CHARGE set), taken into p: BDF2's
                  # -(4*q[n] - q[n-1])/(2T) from the device charges at the
                  # last two samples' solutions (computed afresh after a
                  # reset or a device edit, see MEM_CHARGE; Simulator maps
                  # it across a lane handover)
WS_QR = 13        # persists: -CHARGE_A0*q[n]/T per port at the last sample,
                  # the older term of the next sample's history (as WS_QN)
N_WS_ROWS = 14
WS_MIN_COLS = 5   # row WS_MEM needs its MEM_* slots whatever the port count

# --- slots of the workspace row ws[WS_MEM] (float) --------------------------
MEM_THETA = 0     # last measured chord contraction rate
MEM_REFACTOR = 1  # 1.0: refactor the Jacobian before the next sample
MEM_ATOL = 2      # absolute error tolerance, volts (Simulator's tolerance)
MEM_RTOL = 3      # relative error tolerance (RELTOL scaled with MEM_ATOL)
MEM_CHARGE = 4    # CHARGE_ON: devices integrate junction charges (row WS_QN
                  # in use); CHARGE_AFRESH: and the runner computes WS_QN
                  # afresh from v before its first sample (then CHARGE_ON)
CHARGE_ON = 1.0
CHARGE_AFRESH = 2.0
#: the devices' charge laws integrate by BDF2 (the second-order backward
#: differentiation formula, ngspice's ``method=gear maxord=2`` at a fixed
#: step): i = (3 q[n] - 4 q[n-1] + q[n-2])/(2T); their CHARGE_SLOT holds
#: CHARGE_A0/T, the coefficient of q[n]
CHARGE_A0 = 1.5

# --- slots of the solver state (int64) --------------------------------------
STATE_INDEX = 0   # kernel samples since reset (a waveform's time is INDEX*dt)
STATE_PHASE = 1   # probe decimation phase: a frame is taken at 0
STATE_JI_OK = 2   # 1: the kept inverse Jacobian Ji is valid
STATE_HARD = 3    # fresh Jacobians the last sample's port solve needed
STATE_CHAIN = 4   # low-rank updates since the last factorisation
STATE_PLIST = 5   # UPDATE_PORTS slots: the devices of the last low-rank update
# the dormant-port lanes (solver/dormant.py): which lane runs, and when to
# hand over to the other one
STATE_WATCH = STATE_PLIST + UPDATE_PORTS  # WATCH_* below: what the runner watches
STATE_QUIET = STATE_WATCH + 1  # full lane: samples in a row with every watched port dead
STATE_DONE = STATE_WATCH + 2   # samples the last runner call committed
STATE_HANDOVER = STATE_WATCH + 3  # 1: the runner stopped to hand over to the other lane
N_STATE = STATE_WATCH + 4

# --- values of state[STATE_WATCH] -------------------------------------------
WATCH_NONE = 0    # no dormant ports: run the whole block
WATCH_REDUCED = 1  # the reduced lane: stop before committing a sample at which
#                    a watched (removed) port's voltage left its dead zone
WATCH_FULL = 2    # the full lane: stop after WATCH_HOLD samples in a row with
#                   every watched port inside its dead zone
#: Samples in a row with every dormant-capable port dead before the full
#: lane hands over to the reduced one (each handover costs a fresh
#: Jacobian and a sample without the predictor, so a signal hovering at the
#: edge of a dead zone hands over at most twice per this many samples).
WATCH_HOLD = 256

# --- slots of the run statistics (int64) ------------------------------------
STAT_SAMPLES = 0   # kernel samples run
STAT_NONCONV = 1   # samples whose port solve failed (previous solution kept)
STAT_FALLBACK = 2  # samples that needed the continuation fallback
STAT_MAXIT = 3     # most iterations a direct solve took
STAT_ITERS = 4     # iterations, all samples
STAT_FACTOR = 5    # Jacobian factorisations (lean path: fresh closed-form inverses)
STAT_UPDATE = 6    # low-rank updates of the inverse Jacobian
STAT_REDUCED = 7   # samples run on the reduced lane (dormant ports removed)
STAT_HANDOVER = 8  # handovers between the full and the reduced lane
STAT_PSEUDO = 9    # samples solved by pseudo-transient continuation (last resort)
N_STATS = 10

#: The block runners' positional arguments (run_block and run_block_small
#: take the same), in order; Simulator._args passes those after ``pdec``.
#: tests/test_kernel_paths.py checks both runners' signatures against it.
RUN_BLOCK_ARGS = (
    # the block: input, length, output, probe frames
    "xin", "nin", "yout", "pbuf", "pstart", "pcap", "pdec",
    # the model (statespace.Model): p = p0 + Pz z, y = y0 + Yz z + Fy i + Vy v,
    # x' = x0 + Az z + C i, v = p + K i(v); kc: column scales of K
    "Pz", "p0", "Az", "x0", "C", "K", "Yz", "y0", "Fy", "Vy", "kc",
    # the watched dormant-capable ports (solver/dormant.py): their voltages
    # w = w0 + Wz z + Wk i, dead while wlim[r, 0] < w[r] < wlim[r, 1]
    "Wz", "w0", "Wk", "wlim",
    # the devices (mna.device_arrays)
    "dcode", "dpo", "dnp", "dpa", "par", "dqs",
    # the varying sources and the step
    "uvar", "skind", "sptr", "spar", "inp", "dt",
    # state and scratch (Simulator's own arrays)
    "z", "xp", "v", "i", "pprev", "ws", "G", "Gf", "J", "Ji", "yrow",
    "state", "stats",
)
