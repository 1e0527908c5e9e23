"""The ahead-of-time compiled kernel module: built once, loaded without numba.

A one-off render spends most of its start-up in numba (importing it, about
0.3 s, and initialising its CPU target on the first call of any compiled
function, about 0.4 s) before the cached kernel itself loads.  So the entry
points a render calls are also built ahead of time into one CPython
extension module with ``numba.pycc``; importing that module imports no
numba, and its functions are the same machine code the JIT makes.

    python -m solderless.engine.solver.aot build     # (again) if not fresh
    python -m solderless.engine.solver.aot status    # key, file, fresh or not

``bash .ci/setup`` runs the build.  What is in it (:data:`ENTRIES`): the
block runners ``run_block`` and ``run_block_small``, ``convert_states``
(value changes), ``eval_devices`` and ``limit_devices`` (the DC operating
point), ``wave_value`` (source values at t = 0) and the oversampling
filters.  Each is exported through a one-line wrapper that calls the JIT
dispatcher, so numba compiles the kernel function itself with its own options
(fast-math, error model, inlining) exactly as the JIT path does, and links
it in; the wrappers release the GIL as the JIT functions do (``nogil``).
Signatures are fixed: C-contiguous float64/int64 arrays (a block that is
not contiguous runs the JIT kernel).  The module is compiled for the host
CPU with its actual feature flags, as the JIT compiles.

Freshness (:func:`key`): a SHA-1 over the sources compiled into the module
(kernel/cache.py's file list: every kernel module, kernel_layout.py and every
device module; plus oversample.py and this file), the numba and llvmlite
versions, the Python version and the CPU (model and feature flags: the
module is built for the host CPU, which on the development machine ran the
flagship 40 % faster than a generic x86-64 build and as fast as the JIT).
The key is in the module's name and file name, so a stale module, or one
built on another CPU, is never found, let alone loaded.

Where (:func:`search_dirs`): ``solver/__pycache__`` beside this file when it
is writable (a checkout or an editable install), else ``kernels/`` in the
user's cache folder (``settings.cache_dir()``).

Loading (:func:`kernels`): the module when a fresh one exists, else the JIT
kernel (the kernel package, which imports numba), silently: the behaviour is
the same, only the start-up differs.  ``SOLDERLESS_JIT=1`` in the environment
forces the JIT kernel.  The module's functions check nothing about their
arguments (a wrong dtype reads garbage), so every call goes through
:class:`Kernels`, which checks the arguments against :data:`ENTRIES` and runs
the JIT function for a call that does not fit; the simulator checks its own
arrays once per model and the block's buffers per block.
"""
from __future__ import annotations

import hashlib
import importlib.machinery
import importlib.util
import os
import platform
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

from solderless.engine.solver.kernel_layout import RUN_BLOCK_ARGS

HERE = Path(__file__).resolve()
SOLVER_DIR = HERE.parent
PACKAGE_ROOT = SOLVER_DIR.parents[2]      # the folder holding ``solderless/``
#: Environment variable: set (and not "0" or empty) to force the JIT kernel.
JIT_ENV = "SOLDERLESS_JIT"
#: The module is compiled for the CPU it is built on (llvm's "host").
TARGET_CPU = "host"
NAME_PREFIX = "_solderless_kernels_"

# argument types: (dtype, ndim, C-contiguous) for arrays, or a scalar kind.
# Every array is C-contiguous: declaring the block's input and output "any
# layout" made the clipper's render 9 % slower (the JIT compiles for the
# contiguous arrays it is given); a strided block runs the JIT kernel.
F1, F2 = ("f8", 1, True), ("f8", 2, True)
I1 = ("i8", 1, True)
INT, FLOAT = "i8", "f8"

_RUN = {"xin": F1, "nin": INT, "yout": F1, "pbuf": F2, "pstart": INT, "pcap": INT,
        "pdec": INT, "Pz": F2, "p0": F1, "Az": F2, "x0": F1, "C": F2, "K": F2, "Yz": F2,
        "y0": F1, "Fy": F2, "Vy": F2, "kc": F1, "Wz": F2, "w0": F1, "Wk": F2, "wlim": F2,
        "dcode": I1, "dpo": I1, "dnp": I1,
        "dpa": I1, "par": F1, "dqs": F1, "uvar": I1, "skind": I1, "sptr": I1, "spar": F1,
        "inp": INT, "dt": FLOAT, "z": F1, "xp": F1, "v": F1, "i": F1, "pprev": F1,
        "ws": F2, "G": F2, "Gf": F2, "J": F2, "Ji": F2, "yrow": F1, "state": I1,
        "stats": I1}
_KERNEL = "solderless.engine.solver.kernel"
_OVERSAMPLE = "solderless.engine.solver.oversample"

#: Exported name -> (module, function, argument types, return type or None).
ENTRIES = {
    "run_block": (_KERNEL, "run_block", tuple(_RUN[a] for a in RUN_BLOCK_ARGS), INT),
    "run_block_small": (_KERNEL, "run_block_small", tuple(_RUN[a] for a in RUN_BLOCK_ARGS),
                        INT),
    "convert_states": (_KERNEL, "convert_states", (F1,) * 6, None),
    "eval_devices": (_KERNEL, "eval_devices", (I1, I1, I1, F1, F1, F1, F2), None),
    "limit_devices": (_KERNEL, "limit_devices", (I1, I1, I1, F1, F1, F1), None),
    "wave_value": (_KERNEL, "wave_value", (INT, F1, FLOAT), FLOAT),
    "up_kernel": (_OVERSAMPLE, "_up_kernel", (F1, INT, F2, F1, F1), None),
    "down_kernel": (_OVERSAMPLE, "_down_kernel", (F1, INT, INT, F1, F1, F1), None),
}

_DT = {"f8": np.dtype(np.float64), "i8": np.dtype(np.int64)}


def _fits_one(t, a) -> bool:
    if t == INT:
        return isinstance(a, (int, np.integer)) and not isinstance(a, bool)
    if t == FLOAT:
        return isinstance(a, (float, np.floating))
    dt, nd, contig = t
    return (isinstance(a, np.ndarray) and a.dtype == _DT[dt] and a.ndim == nd
            and (not contig or a.flags.c_contiguous))


def fits(name: str, args, start: int = 0) -> bool:
    """Whether ``args`` match the exported signature of ``name`` at its
    arguments ``start``, ``start + 1`` ... (so the module may be called with
    them there)."""
    types = ENTRIES[name][2][start:start + len(args)]
    return len(types) == len(args) and all(_fits_one(t, a) for t, a in zip(types, args))


# ------------------------------------------------------------------ the key

def _dist(pkg: str) -> str:
    """``name-version`` of an installed package, without importing it."""
    spec = importlib.util.find_spec(pkg)
    if spec is None or not spec.origin:
        return pkg + "-missing"
    site = Path(spec.origin).resolve().parents[1]
    found = sorted(p.name for p in site.glob(f"{pkg}-*.dist-info"))
    return found[0] if found else f"{pkg}@{Path(spec.origin).resolve().parent}"


def _cpu() -> str:
    """The CPU model and feature flags (what llvm's "host" compiles for)."""
    seen: dict[str, str] = {}
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as f:
            for line in f:
                k, _, v = line.partition(":")
                k = k.strip()
                if k in ("vendor_id", "model name", "flags", "Features", "CPU part") \
                        and k not in seen:
                    seen[k] = v.strip()
    except OSError:
        pass
    return f"{platform.machine()}|{platform.processor()}|" + "|".join(
        f"{k}={v}" for k, v in sorted(seen.items()))


def key() -> str:
    """SHA-1 naming the module these sources, tools and CPU would build."""
    from solderless.engine.solver import kernel_sources
    h = hashlib.sha1()
    h.update(kernel_sources.sources_hash().encode())
    for f in (HERE, SOLVER_DIR / "oversample.py"):
        h.update(f.read_bytes())
    for part in (_dist("numba"), _dist("llvmlite"), sys.version, sys.platform,
                 TARGET_CPU, _cpu()):
        h.update(part.encode() + b"\0")
    return h.hexdigest()


def module_name(k: str | None = None) -> str:
    return NAME_PREFIX + (k or key())[:20]


def search_dirs() -> list[Path]:
    """Where the module may be: beside this file (``__pycache__``), then the
    user's cache folder."""
    from solderless.engine.settings import cache_dir
    return [SOLVER_DIR / "__pycache__", cache_dir() / "kernels"]


def _file_name(name: str) -> str:
    return name + importlib.machinery.EXTENSION_SUFFIXES[0]


def find(k: str | None = None) -> Path | None:
    """The fresh module's file, or None."""
    fname = _file_name(module_name(k))
    for d in search_dirs():
        p = d / fname
        if p.is_file():
            return p
    return None


def load(k: str | None = None):
    """Import the fresh module, or None if there is none (or it will not load)."""
    name = module_name(k)
    if name in sys.modules:
        return sys.modules[name]
    path = find(k)
    if path is None:
        return None
    try:
        spec = importlib.util.spec_from_file_location(name, path)
        mod = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(mod)
    except (ImportError, OSError):
        return None
    if not all(callable(getattr(mod, e, None)) for e in ENTRIES):
        return None
    sys.modules[name] = mod
    return mod


# ------------------------------------------------------------------ loader

class Kernels:
    """The compiled entry points of :data:`ENTRIES`, from the ahead-of-time
    module (``aot`` True) or the JIT kernel.  ``k.NAME(*args)`` checks the
    arguments and runs the JIT function for a call the module's signature
    does not fit; ``k.raw(NAME)`` is the unchecked function, for callers that
    check once (:func:`fits`) and call it many times."""

    def __init__(self, module=None):
        self.module = module
        self.aot = module is not None
        self._raw = {}
        for name, (modname, attr, _, _) in ENTRIES.items():
            if module is not None:
                self._raw[name] = getattr(module, name)
                setattr(self, name, _Checked(name, self._raw[name]))
            else:
                f = _jit_function(modname, attr)
                self._raw[name] = f
                setattr(self, name, f)

    def raw(self, name: str):
        return self._raw[name]

    def fits(self, name: str, args, start: int = 0) -> bool:
        """True when ``raw(name)`` may be called with ``args`` (always, for JIT)."""
        return not self.aot or fits(name, args, start)

    def __repr__(self) -> str:
        return f"Kernels({'ahead-of-time ' + self.module.__name__ if self.aot else 'JIT'})"


class _Checked:
    __slots__ = ("name", "fn")

    def __init__(self, name, fn):
        self.name, self.fn = name, fn

    def __call__(self, *args):
        if fits(self.name, args):
            return self.fn(*args)
        return getattr(jit_kernels(), self.name)(*args)


def _jit_function(modname: str, attr: str):
    import importlib
    from solderless.engine import lazyjit
    importlib.import_module(_KERNEL)        # activates the JIT (and hashes the cache)
    lazyjit.activate()
    return getattr(importlib.import_module(modname), attr)


_kernels: Kernels | None = None
_jit: Kernels | None = None


def jit_kernels() -> Kernels:
    """The JIT kernel's entry points (imports numba)."""
    global _jit
    if _jit is None:
        _jit = Kernels(None)
    return _jit


def jit_forced() -> bool:
    return os.environ.get(JIT_ENV, "") not in ("", "0")


def kernels() -> Kernels:
    """The entry points every caller uses: the ahead-of-time module when a
    fresh one exists (and ``SOLDERLESS_JIT`` is not set), else the JIT's."""
    global _kernels
    if _kernels is None:
        mod = None if jit_forced() else load()
        _kernels = Kernels(mod) if mod is not None else jit_kernels()
    return _kernels


# ------------------------------------------------------------------ build

def build(dest: Path | None = None, force: bool = False, quiet: bool = False) -> Path:
    """Build the module for the current sources (in a child process, with
    an empty numba cache so that every function is compiled from source and
    can be linked in) into ``dest`` (default: the first writable folder of
    :func:`search_dirs`).  Returns its path; does nothing when a fresh one
    is already there, unless ``force``.  Raises RuntimeError with the
    compiler's last lines if the build fails (no C compiler, no Python
    headers ...)."""
    k = key()
    name = module_name(k)
    if dest is None:
        found = find(k)
        if found is not None and not force:
            return found
        dest = _writable_dir()
    else:
        dest = Path(dest)
        dest.mkdir(parents=True, exist_ok=True)
        if (dest / _file_name(name)).is_file() and not force:
            return dest / _file_name(name)
    with tempfile.TemporaryDirectory(prefix="solderless-aot-") as tmp:
        env = dict(os.environ)
        env["NUMBA_CACHE_DIR"] = str(Path(tmp) / "numba-cache")
        env["PYTHONPATH"] = str(PACKAGE_ROOT) + os.pathsep + env.get("PYTHONPATH", "")
        env.pop(JIT_ENV, None)
        out = Path(tmp) / "out"
        out.mkdir()
        code = ("import sys; from solderless.engine.solver.aot import _compile; "
                "_compile(sys.argv[1], sys.argv[2])")
        r = subprocess.run([sys.executable, "-c", code, str(out), name], env=env,
                           cwd=tmp, capture_output=True, text=True)
        built = sorted(out.glob(name + "*"))
        if r.returncode != 0 or not built:
            tail = "\n".join((r.stderr or r.stdout or "").strip().splitlines()[-15:])
            raise RuntimeError(f"building the kernel module failed:\n{tail}")
        target = dest / _file_name(name)
        part = dest / (target.name + f".{os.getpid()}.part")
        shutil.copyfile(built[0], part)
        os.replace(part, target)          # atomic: a loader sees all of it or nothing
    if dest == SOLVER_DIR / "__pycache__":  # one checkout, one module: drop stale ones
        for old in dest.glob(NAME_PREFIX + "*" + importlib.machinery.EXTENSION_SUFFIXES[0]):
            if old.name != target.name:
                old.unlink(missing_ok=True)
    if not quiet:
        print(f"built {target}")
    return target


def _writable_dir() -> Path:
    for d in search_dirs():
        try:
            d.mkdir(parents=True, exist_ok=True)
            probe = d / f".write-test-{os.getpid()}"
            probe.write_bytes(b"")
            probe.unlink()
            return d
        except OSError:
            continue
    raise RuntimeError("no writable folder for the kernel module: "
                       + ", ".join(str(d) for d in search_dirs()))


def _compile(out_dir: str, name: str) -> None:
    """Child process of :func:`build`: export every entry through a wrapper
    that calls the JIT dispatcher, and compile the extension module."""
    import importlib

    from numba.core import codegen, compiler, cpu
    from numba.pycc import CC
    import numba.pycc.compiler as pycc_compiler

    from solderless.engine.solver.kernel.params import FM

    class _Flags(compiler.Flags):
        """The wrappers' own flags: those of kernel_jit (so that a function
        numba inlines into a wrapper, such as limit_devices, compiles as in
        the JIT), and the GIL released around the call."""

        def __init__(self, *a, **kw):
            super().__init__(*a, **kw)
            self.release_gil = True
            self.error_model = "numpy"
            self.fastmath = cpu.FastMathOptions(FM)

    pycc_compiler.Flags = _Flags
    # Optimise as the JIT does: pycc compiles position-independent code and
    # hides the module's internal functions only after optimising, so LLVM
    # treats every kernel function as interposable and neither inlines nor
    # specialises across the kernel's real calls (octave-up ran 20-25 %
    # slower through the module than through the JIT).  Hidden before the
    # optimiser runs, they are local to the module as in the JIT; only the
    # module's entry (PyInit_*) stays visible.
    from llvmlite.binding import Linkage
    optimise = codegen.AOTCodeLibrary._optimize_final_module

    def _optimize_hidden(self):
        for fn in self._final_module.functions:
            if (not fn.is_declaration and fn.linkage == Linkage.external
                    and not fn.name.startswith("PyInit_")):
                fn.visibility = "hidden"
        optimise(self)

    codegen.AOTCodeLibrary._optimize_final_module = _optimize_hidden
    # the host CPU's own feature flags, as the JIT takes them (pycc would
    # take the CPU model's defaults, which a virtual machine may not offer)
    codegen.AOTCPUCodegen._customize_tm_features = codegen.JITCPUCodegen._customize_tm_features
    cc = CC(name)
    cc.output_dir = out_dir
    cc.target_cpu = TARGET_CPU
    cc.verbose = False
    for ename, (modname, attr, types, ret) in ENTRIES.items():
        target = getattr(importlib.import_module(modname), attr)
        args = ", ".join(f"a{k}" for k in range(len(types)))
        ns = {"target": target}
        exec(f"def {ename}({args}):\n    return target({args})\n", ns)
        cc.export(ename, _signature(types, ret))(ns[ename])
    cc.compile()


def _signature(types, ret) -> str:
    def one(t):
        if isinstance(t, str):
            return t
        dt, nd, contig = t
        dims = [":"] * nd
        if contig:
            dims[-1] = "::1"
        return f"{dt}[{', '.join(dims)}]"
    return f"{one(ret) if ret else 'void'}({', '.join(one(t) for t in types)})"


def status() -> str:
    k = key()
    path = find(k)
    lines = [f"key {k}", f"module {module_name(k)}",
             f"file {path if path else 'none (not built for these sources and this CPU)'}"]
    if jit_forced():
        lines.append(f"{JIT_ENV} is set: the JIT kernel is used")
    return "\n".join(lines)


def main(argv=None) -> int:
    import argparse
    ap = argparse.ArgumentParser(prog="python -m solderless.engine.solver.aot",
                                 description="Build or inspect the ahead-of-time kernel module.")
    sub = ap.add_subparsers(dest="cmd", required=True)
    b = sub.add_parser("build", help="build it if no fresh one exists")
    b.add_argument("--force", action="store_true", help="build even if a fresh one exists")
    b.add_argument("--dest", help="folder to write it to (default: the first writable "
                                  "of the search folders)")
    sub.add_parser("status", help="print the key and where the fresh module is")
    args = ap.parse_args(argv)
    if args.cmd == "status":
        print(status())
        return 0
    import time
    t0 = time.perf_counter()
    try:
        path = build(Path(args.dest) if args.dest else None, force=args.force, quiet=True)
    except RuntimeError as e:
        print(f"error: {e}", file=sys.stderr)
        return 1
    print(f"kernel module: {path} ({time.perf_counter() - t0:.1f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
