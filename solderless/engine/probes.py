"""Reading a probe expression: ``q(a)`` or ``q(a,b)``, e.g. ``v(out)``,
``v(gain.in,gain.out)``, ``ic(Q1)``. One reader for the design layer (which
rewrites the names to flat ones) and the simulator (which builds the probe).
"""
from __future__ import annotations

import re

_PROBE_RE = re.compile(r"^\s*([A-Za-z]+)\s*\((.*)\)\s*$")


def parse_probe(text: str) -> tuple[str, list[str]] | None:
    """``(quantity, [name] or [name, name])`` of ``q(a)`` / ``q(a,b)``, or
    None if ``text`` is not of that form. The quantity keeps its case; names
    are stripped, hold no white space, and may hold balanced parentheses (an
    exported net such as ``Net-(R1-Pad2)``)."""
    m = _PROBE_RE.match(text)
    if not m:
        return None
    names, depth, start, inner = [], 0, 0, m.group(2)
    for k, ch in enumerate(inner):
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0:
                return None
        elif ch == "," and depth == 0:
            names.append(inner[start:k])
            start = k + 1
    names.append(inner[start:])
    names = [n.strip() for n in names]
    if depth != 0 or len(names) > 2 or not all(n and not any(c.isspace() for c in n)
                                               for n in names):
        return None
    return m.group(1), names
