"""Value sweeps: the same measurements as the Monte Carlo over a grid of one
part's values and (optionally) one pot's rotations.

Value ranges: ``E12:1u..47u`` (every IEC 60063 E12 value from 1 uF to
47 uF), or a comma list ``1u,2u2,4u7`` (IEC 60062 marking or engineering
notation). Pot ranges: ``START:STOP:COUNT`` rotations (0 to 1, COUNT points,
ends included).  Each grid point is one trial of
:class:`solderless.engine.analysis.montecarlo.TrialRunner` with no tolerance draws, so
sweeps run serially, in the process pool or on a Dask cluster the same way.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from solderless.engine.errors import DesignError


def parse_values(text: str, part: str = "") -> list[float]:
    """``E12:1u..47u`` or ``1u,2u2,4u7`` -> values (SI)."""
    from solderless.engine.values import parse_value, series_values
    t = str(text).strip()
    if not t:
        raise DesignError("empty value range", part=part or None,
                          hint="write e.g. E12:1u..47u or 1u,2u2,4u7")
    m = re.fullmatch(r"(E\d+)\s*:\s*(\S+?)\s*\.\.\s*(\S+)", t, re.I)
    if m:
        lo = parse_value(m.group(2), part=part or None)
        hi = parse_value(m.group(3), part=part or None)
        if not (lo > 0 and hi > 0):
            raise DesignError(f"value range '{t}' must be positive", part=part or None)
        vals = series_values(m.group(1).upper(), min(lo, hi), max(lo, hi))
        if not vals:
            raise DesignError(f"value range '{t}' holds no {m.group(1).upper()} value",
                              part=part or None, hint="widen the range")
        return vals
    vals = [parse_value(s.strip(), part=part or None) for s in t.split(",") if s.strip()]
    if not vals:
        raise DesignError("empty value range", part=part or None,
                          hint="write e.g. E12:1u..47u or 1u,2u2,4u7")
    return vals


def parse_pot(text: str) -> tuple[str, list[float]]:
    """``stage.POT=0:1:5`` -> (qualname, rotations)."""
    m = re.fullmatch(r"\s*([^=\s]+)\s*=\s*([-+0-9.eE]+):([-+0-9.eE]+):(\d+)\s*", str(text))
    if not m:
        raise DesignError(f"cannot read pot range '{text}'",
                          hint="write STAGE.POT=START:STOP:COUNT, e.g. detector.THRESHOLD=0:1:5")
    a, b, n = float(m.group(2)), float(m.group(3)), int(m.group(4))
    if n < 1:
        raise DesignError(f"pot range '{text}' has no points", part=m.group(1),
                          hint="COUNT must be 1 or more")
    if not (0.0 <= a <= 1.0 and 0.0 <= b <= 1.0):
        raise DesignError(f"pot rotations must lie from 0 to 1 in '{text}'", part=m.group(1))
    return m.group(1), list(np.linspace(a, b, n)) if n > 1 else [a]


@dataclass
class SweepGrid:
    part: str
    values: list[float]
    pot: str | None
    rotations: list[float]

    def point(self, index: int) -> tuple[float, float | None]:
        nr = max(1, len(self.rotations))
        v = self.values[index // nr]
        r = self.rotations[index % nr] if self.rotations else None
        return v, r

    def __len__(self) -> int:
        return len(self.values) * max(1, len(self.rotations))


def make_grid(design, part: str, values: str, pot: str | None = None) -> SweepGrid:
    """Check the part and pot exist and have values to sweep."""
    p = design.part(part)          # DesignError naming close matches
    from solderless.engine.design import VALUE_TYPES
    if p.type not in VALUE_TYPES:
        raise DesignError(f"a {p.type} has no value to sweep", part=part,
                          file=str(design.path) if design.path else None,
                          hint="sweep a resistor, capacitor, inductor or pot value")
    vals = parse_values(values, part)
    rots: list[float] = []
    pq = None
    if pot:
        pq, rots = parse_pot(pot)
        pp = design.part(pq)
        if pp.type != "pot":
            raise DesignError("only a pot can be turned", part=pq,
                              file=str(design.path) if design.path else None)
    return SweepGrid(part, vals, pq, rots)


@dataclass
class SweepJob:
    """Picklable job for run_trials: grid point ``index`` of ``grid``."""
    grid: SweepGrid

    def __call__(self, runner, index: int) -> dict:
        import copy
        d = runner.spec.design
        v, r = self.grid.point(index)
        p = copy.copy(d.part(self.grid.part))
        p.value = v
        changes = dict(d._element_values(self.grid.part, p))
        if self.grid.pot is not None:
            pp = p if self.grid.pot == self.grid.part else copy.copy(d.part(self.grid.pot))
            pp.rotation = r
            changes.update(d._element_values(self.grid.pot, pp))
        q = {}
        for k, val in changes.items():
            name = k if k in runner.nominal else k.split(".", 1)[-1]
            if name not in runner.nominal:
                raise DesignError(f"part '{k}' is not in the simulated circuit",
                                  part=k, hint="is its stage bypassed?")
            q[name] = val
        res = runner.measure(q, {})
        res["error"] = ""
        res.update(index=index, value=v, rotation=r, draws={})
        return res


def table(grid: SweepGrid, results: list[dict], metric: str) -> list[list]:
    """Rows: value, (rotation), metric."""
    from solderless.engine.values import format_value
    rows = []
    for r in results:
        row = [format_value(r["value"])]
        if grid.pot is not None:
            row.append(f"{r['rotation']:.3g}")
        v = r.get(metric, float("nan"))
        row.append(v)
        rows.append(row)
    return rows


def plot(grid: SweepGrid, results: list[dict], metric: str, unit: str, path) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, ax = plt.subplots(figsize=(7, 4))
    by_rot: dict = {}
    for r in results:
        by_rot.setdefault(r["rotation"], []).append((r["value"], r.get(metric, math.nan)))
    for rot, pts in by_rot.items():
        pts.sort()
        lab = f"{grid.pot} = {rot:.2f}" if rot is not None else None
        ax.plot([p[0] for p in pts], [p[1] for p in pts], "o-", label=lab)
    ax.set_xscale("log")
    ax.set_xlabel(f"{grid.part} value")
    ax.set_ylabel(f"{metric} ({unit})")
    ax.grid(True, alpha=0.3)
    if grid.pot is not None:
        ax.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)
