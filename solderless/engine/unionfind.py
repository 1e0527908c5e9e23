"""Disjoint sets (union-find with path halving) over hashable items: which
nets a circuit's elements join together. Used for net merging when a design
is flattened and for the DC-path and source-loop checks.
"""
from __future__ import annotations

from typing import Hashable


class UnionFind:
    """Disjoint sets over hashable items, each set named by its root.

    ``union(a, b)`` keeps the root of ``a``'s set as the name of the joined
    set, unless the root of ``b``'s set is ``keep`` (e.g. the ground net),
    which always names its set.
    """

    def __init__(self, keep: Hashable | None = None):
        self.parent: dict = {}
        self.keep = keep

    def add(self, a) -> None:
        """Make ``a`` a set of its own if it is not in one yet."""
        self.parent.setdefault(a, a)

    def find(self, a):
        """The root (name) of ``a``'s set."""
        self.add(a)
        parent = self.parent
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    def union(self, a, b) -> bool:
        """Join the sets of ``a`` and ``b``; False if they were one set already."""
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        if self.keep is not None and rb == self.keep:
            ra, rb = rb, ra
        self.parent[rb] = ra
        return True
