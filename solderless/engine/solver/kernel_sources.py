"""Which source files end up in the compiled kernel, and their hash.

A plain module (no numba, outside the kernel package, whose import would
load the JIT kernel): the kernel's disk-cache check (kernel/cache.py) and the
ahead-of-time module's key (solver/aot.py) both use it."""
from __future__ import annotations

import hashlib
from pathlib import Path

SOLVER_DIR = Path(__file__).resolve().parent
KERNEL_DIR = SOLVER_DIR / "kernel"
DEVICES_DIR = SOLVER_DIR.parent / "devices"


def source_files(kernel_dir: Path = KERNEL_DIR, solver_dir: Path = SOLVER_DIR,
                 devices_dir: Path = DEVICES_DIR) -> list[Path]:
    """Every source file whose contents end up in the compiled kernel."""
    files = sorted(kernel_dir.glob("*.py")) + [solver_dir / "kernel_layout.py"]
    return files + sorted(devices_dir.glob("*.py"))


def sources_hash(files: list[Path] | None = None) -> str:
    """SHA-1 over the names and contents of ``files`` (default
    :func:`source_files`)."""
    h = hashlib.sha1()
    for f in source_files() if files is None else files:
        h.update(f.name.encode())
        h.update(f.read_bytes())
    return h.hexdigest()
