"""Tables derived from the device registry, read when used.

A :class:`LiveMapping` (or :class:`LiveSet`) is built by a function of the
registry (:mod:`solderless.engine.devices.registry`) the first time it is
read, and again whenever a device has been registered or removed since, so
a table such as :data:`solderless.engine.circuit.KIND_NODES` knows every
device, including one added later. Importing this module loads no device:
the devices load on the first read.
"""
from __future__ import annotations

from collections.abc import Mapping, Set
from typing import Any, Callable, Iterator


def _version() -> int:
    from solderless.engine.devices import registry  # the built-ins register here
    return registry._VERSION[0]


class LiveMapping(Mapping):
    """A read-only mapping rebuilt from the registry when it changes."""

    def __init__(self, build: Callable[[], dict]):
        self._build = build
        self._at = -1
        self._data: dict = {}

    def _get(self) -> dict:
        v = _version()
        if self._at != v:
            self._data = self._build()
            self._at = v
        return self._data

    def __getitem__(self, key):
        return self._get()[key]

    def __iter__(self) -> Iterator:
        return iter(self._get())

    def __len__(self) -> int:
        return len(self._get())

    def __contains__(self, key) -> bool:
        return key in self._get()

    def get(self, key, default=None):
        return self._get().get(key, default)

    def __repr__(self) -> str:
        return f"LiveMapping({self._get()!r})"


class LiveSet(Set):
    """A read-only set rebuilt from the registry when it changes."""

    def __init__(self, build: Callable[[], Any]):
        self._map = LiveMapping(lambda: dict.fromkeys(build()))

    def __contains__(self, x) -> bool:
        return x in self._map

    def __iter__(self) -> Iterator:
        return iter(self._map)

    def __len__(self) -> int:
        return len(self._map)

    def __repr__(self) -> str:
        return f"LiveSet({set(self)!r})"
