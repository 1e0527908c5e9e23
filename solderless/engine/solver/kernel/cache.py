"""Keep numba's disk cache of the kernel honest.

numba keys a cached function on the contents of the file it is defined in
only, but the kernel compiles code from other files into itself: inlined
functions of its sibling modules, the shared constants of kernel_layout,
and the device modules' laws (the devices' own cached functions call
solderless/engine/devices/_common.py the same way).  So at import the
package hashes every one of those files and, when the hash differs from the
one stored beside the cache, deletes the cached code of the kernel and the
device modules, wherever numba keeps it, so that all of it compiles again.
"""
from __future__ import annotations

from pathlib import Path

from solderless.engine.solver import kernel_sources

KERNEL_DIR = Path(__file__).resolve().parent
SOLVER_DIR = KERNEL_DIR.parent
DEVICES_DIR = SOLVER_DIR.parent / "devices"
STAMP_NAME = "kernel.sources.sha1"


def source_files() -> list[Path]:
    """Every source file whose contents end up in the compiled kernel (the
    list lives in solver/kernel_sources.py, shared with the ahead-of-time
    module's key)."""
    return kernel_sources.source_files(KERNEL_DIR, SOLVER_DIR, DEVICES_DIR)


def sources_hash() -> str:
    """SHA-1 over the names and contents of :func:`source_files`."""
    return kernel_sources.sources_hash(source_files())


def cache_dirs(src_dir: Path) -> list[Path]:
    """Where numba may keep the cached functions of modules in ``src_dir``:
    its ``__pycache__``, below NUMBA_CACHE_DIR, and the user-wide cache
    (numba's three locators for ordinary modules)."""
    dirs = [src_dir / "__pycache__"]
    try:
        from numba.core import config
        from numba.core.caching import _CacheLocator
        from numba.misc.appdirs import AppDirs
    except ImportError:    # another numba layout: the in-tree cache only
        return dirs
    sub = _CacheLocator.get_suitable_cache_subpath(str(src_dir / "x.py"))
    if config.CACHE_DIR:
        dirs.append(Path(config.CACHE_DIR) / sub)
    dirs.append(Path(AppDirs(appname="numba", appauthor=False).user_cache_dir) / sub)
    return dirs


def refresh_cache_stamp() -> bool:
    """Drop the cached kernel and device code if any source changed since the
    stamp was written.  Returns True when it dropped (or found nothing to
    keep).  A read-only install keeps its cache as it is."""
    new = sources_hash()
    stamp = KERNEL_DIR / "__pycache__" / STAMP_NAME
    try:
        old = stamp.read_text() if stamp.exists() else ""
        if old == new:
            return False
        stamp.parent.mkdir(exist_ok=True)
        stamp.write_text(new)
    except OSError:
        return False
    for d in cache_dirs(KERNEL_DIR) + cache_dirs(DEVICES_DIR):
        try:
            stale = list(d.glob("*.nbi")) + list(d.glob("*.nbc"))
        except OSError:
            continue
        for f in stale:
            try:
                f.unlink(missing_ok=True)
            except OSError:
                pass
    return True
