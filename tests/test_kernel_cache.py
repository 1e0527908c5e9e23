"""The kernel's disk-cache check covers every file compiled into the kernel.

numba keys a cached function on the contents of the one file it is defined
in (numba's own source, numba/core/caching.py: the locators' source stamp
hashes ``py_file`` alone; from reading it, numba 0.68), so code a kernel
function inlines or calls from another file goes stale in the cache.
solderless/engine/solver/kernel/cache.py hashes every kernel module,
kernel_layout.py and every device module, and drops the cached code when
any of them changes.  Checked on a copy of the tree, so the real cache is
left alone.
"""
import shutil
from pathlib import Path

from solderless.engine.solver.kernel import cache

SOLVER = Path(cache.__file__).resolve().parents[1]


def test_every_kernel_and_device_module_is_hashed():
    files = set(cache.source_files())
    assert set((SOLVER / "kernel").glob("*.py")) <= files
    assert set((SOLVER.parent / "devices").glob("*.py")) <= files
    assert SOLVER / "kernel_layout.py" in files


def _tree(tmp_path):
    """A copy of the solver's kernel sources and the device modules, with a
    fake cached function in each cache folder."""
    solver = tmp_path / "engine" / "solver"
    shutil.copytree(SOLVER / "kernel", solver / "kernel",
                    ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(SOLVER / "kernel_layout.py", solver / "kernel_layout.py")
    shutil.copytree(SOLVER.parent / "devices", tmp_path / "engine" / "devices",
                    ignore=shutil.ignore_patterns("__pycache__"))
    return solver / "kernel", tmp_path / "engine" / "devices"


def _fake_cache(*dirs):
    out = []
    for d in dirs:
        (d / "__pycache__").mkdir(exist_ok=True)
        for name in ("f-1.py311.nbi", "f-1.py311.1.nbc"):
            p = d / "__pycache__" / name
            p.write_bytes(b"x")
            out.append(p)
    return out


def test_a_change_to_any_source_drops_the_cached_kernel(tmp_path, monkeypatch):
    kdir, ddir = _tree(tmp_path)
    monkeypatch.setattr(cache, "KERNEL_DIR", kdir)
    monkeypatch.setattr(cache, "SOLVER_DIR", kdir.parent)
    monkeypatch.setattr(cache, "DEVICES_DIR", ddir)
    assert cache.refresh_cache_stamp()               # no stamp yet
    kept = _fake_cache(kdir, ddir)
    assert not cache.refresh_cache_stamp()           # nothing changed: kept
    assert all(p.exists() for p in kept)
    for changed in (ddir / "_common.py", kdir / "newton.py", kdir.parent / "kernel_layout.py"):
        stale = _fake_cache(kdir, ddir)
        changed.write_text(changed.read_text() + "\n# edited\n")
        assert cache.refresh_cache_stamp(), changed.name
        assert not any(p.exists() for p in stale), changed.name
        assert not cache.refresh_cache_stamp()
