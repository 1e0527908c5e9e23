"""numba's ``njit``, applied only when the JIT kernel is first needed.

Importing numba costs about 0.3 s, and a one-off render that runs the
ahead-of-time compiled kernel module (solderless/engine/solver/aot.py) never
needs it.  So the device modules, the kernel package and the oversampling
filters decorate their compiled functions with :func:`njit` from here: at
import it only records the function and its options and returns the plain
Python function, so reading a netlist or a design imports no numba.

:func:`activate` (called when the kernel package
``solderless.engine.solver.kernel`` is imported, and by
``solver.aot.kernels()`` when it falls back to the JIT kernel) imports
numba, wraps every recorded function with ``numba.njit(**options)``, and
puts the compiled function in place of the plain one wherever a module holds
it: in its own module (so numba finds compiled callees when it compiles a
caller) and under every name other modules imported it by
(``from x import f``).  Functions decorated after that are wrapped at once.

Until then a recorded function is plain Python: calling it works, slowly.
Code that runs a compiled function on a hot path takes it from
``solver.aot.kernels()`` (or imports the kernel package), never from the
plain module attribute.
"""
from __future__ import annotations

import sys

_pending: list[tuple[object, dict]] = []
_active = False


def njit(*args, **options):
    """``@njit`` or ``@njit(**options)``, as numba's, applied lazily."""
    if args and callable(args[0]) and len(args) == 1 and not options:
        return _record(args[0], {})
    if args:
        raise TypeError("lazyjit.njit takes keyword options only")
    return lambda f: _record(f, options)


def _record(f, options: dict):
    if _active:
        import numba
        return numba.njit(**options)(f)
    _pending.append((f, options))
    return f


def active() -> bool:
    """Whether :func:`activate` has run (numba imported, functions wrapped)."""
    return _active


def activate() -> None:
    """Wrap every recorded function with numba and rebind it everywhere.

    Idempotent; the first call imports numba (the wrapping itself compiles
    nothing: numba compiles, or loads from its disk cache, on first call)."""
    global _active
    if _active:
        return
    import numba
    compiled = {id(f): (f, numba.njit(**opt)(f)) for f, opt in _pending}
    for mod in list(sys.modules.values()):
        d = getattr(mod, "__dict__", None)
        if not isinstance(d, dict):
            continue
        for k, v in list(d.items()):
            hit = compiled.get(id(v))
            if hit is not None and hit[0] is v:
                d[k] = hit[1]
    _pending.clear()
    _active = True
