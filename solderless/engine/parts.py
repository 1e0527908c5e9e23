"""Generic parts library: named device models with typical values.

The built-in models live in ``solderless/presets/parts.toml``: generic device classes
(``npn-general``, ``diode-germanium``, ``opamp-general``, ``ota-bipolar`` ...)
with typical values chosen by the Solderless authors, not any manufacturer's
data. Users add their own models from TOML files of the same shape or from
SPICE ``.model`` cards; a user model of the same name replaces the built-in.

Parameters use SPICE names (upper case) for D, NPN, PNP, NJF and PJF. Op-amp
(OPAMP) and OTA models use Solderless macromodel names, see
``solderless/presets/parts.toml``. :meth:`Model.element_params` gives the parameter set
the device modules in :mod:`solderless.engine.devices` read (ratings such as IQ or
IABC_MAX stay in :attr:`Model.params` for reports).

Example
-------
>>> lib = load_library()
>>> lib.get("npn-general").kind
'NPN'
"""
from __future__ import annotations

import difflib
import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

from solderless.engine.derived import LiveMapping
from solderless.engine.errors import DesignError
from solderless.engine.values import parse_value

__all__ = ["Model", "PartsLibrary", "load_library", "BUILTIN_PATH", "KINDS"]

#: The built-in library file.
BUILTIN_PATH = Path(__file__).resolve().parent.parent / "presets" / "parts.toml"

def _registry():
    from solderless.engine.devices import registry
    return registry


#: Model kind -> flat-circuit element kind: every model type of every device
#: in the registry (solderless.engine.devices.registry), read when used.
KINDS = LiveMapping(lambda: dict(_registry().MODEL_TYPES))


def _device_defaults(ekind: str) -> set[str]:
    """Parameter names the device module for element kind ``ekind`` reads."""
    return set(_registry().DEVICES[ekind].params)


@dataclass
class Model:
    """A named device model: ``kind`` is D, NPN, PNP, NJF, PJF, OPAMP or
    OTA; ``params`` in SI units with upper-case names; ``note`` one line."""
    name: str
    kind: str
    params: dict[str, float]
    note: str = ""
    source: str | None = None
    line: int | None = None
    #: parameter -> (low, high): the spread between parts of this class
    #: (``spread`` table in the library; typical values, from memory), used
    #: by the tolerance Monte Carlo (solderless.engine.analysis.montecarlo).
    spread: dict[str, tuple[float, float]] = field(default_factory=dict)

    @property
    def element_kind(self) -> str:
        """The flat-circuit element kind: D, Q, J, OPAMP or OTA."""
        return KINDS[self.kind]

    def element_params(self, supply: float | None = None) -> dict[str, Any]:
        """Parameters for an :class:`solderless.engine.circuit.Element` of this model.

        Keeps the names the device module reads (renaming VHEAD to the op-amp
        module's VHR), adds ``TYPE`` for BJTs and JFETs and ``MODEL``. For an
        OTA, VHEAD becomes the output window [VHEAD, supply - VHEAD] above the
        negative supply when ``supply`` (total supply span, V) is given.
        """
        ek = self.element_kind
        known = _device_defaults(ek)
        dev = _registry().DEVICES[ek]
        alias = dict(dev.library_aliases) if dev.library is not None else dict(dev.aliases)
        out: dict[str, Any] = {}
        for k, v in self.params.items():
            key = alias.get(k, k)
            if key in known:
                out[key] = v
        if ek == "OTA" and supply is not None and "VHEAD" in self.params:
            h = self.params["VHEAD"]
            if {"VLO", "VHI"} <= known:
                out["VLO"], out["VHI"] = h, max(supply - h, h + 0.1)
        if dev.typed:
            out["TYPE"] = self.kind
        out["MODEL"] = self.name
        return out


class PartsLibrary:
    """Named models, looked up case-insensitively."""

    def __init__(self, models: Iterable[Model] = ()):
        self._models: dict[str, Model] = {}
        for m in models:
            self.add(m)

    def add(self, model: Model) -> Model:
        """Add (or replace) a model after checking its kind and parameters."""
        _validate(model)
        self._models[model.name.lower()] = model
        return model

    def find(self, name: str) -> Model | None:
        """The model called ``name`` (any case), or None."""
        return self._models.get(str(name).lower())

    def get(self, name: str) -> Model:
        """The model called ``name``; DesignError listing close names if none."""
        m = self.find(name)
        if m is None:
            close = difflib.get_close_matches(str(name).lower(), list(self._models),
                                              n=4, cutoff=0.5)
            hint = ("did you mean " + ", ".join(close) + "?") if close else \
                ("known models: " + ", ".join(self.names()))
            raise DesignError(f"unknown model '{name}'", part=str(name), hint=hint)
        return m

    def names(self, kind: str | None = None) -> list[str]:
        """Model names, sorted; only those of ``kind`` (e.g. 'NPN') if given."""
        k = kind.upper() if kind else None
        return sorted(m.name for m in self._models.values()
                      if k is None or m.kind == k or
                      (k in _typed_kinds() and m.element_kind == k))

    def __contains__(self, name) -> bool:
        return self.find(name) is not None

    def __len__(self) -> int:
        return len(self._models)

    def add_model_card(self, text: str, file: str | None = None,
                       line: int | None = None) -> Model:
        """Add a SPICE ``.model NAME TYPE(params)`` card (continuation lines
        with ``+`` allowed) for D, NPN, PNP, NJF or PJF; return the model."""
        from solderless.engine.formats.spice import _tokenize, evaluate_expression  # noqa
        from solderless.engine.circuit import Where
        joined = " ".join(s.strip()[1:] if s.strip().startswith("+") else s.strip()
                          for s in text.splitlines() if s.strip()
                          and not s.strip().startswith("*"))
        toks = _tokenize(joined, Where(file, line))
        if len(toks) < 3 or toks[0].lower() != ".model":
            raise DesignError(f"'{joined}' is not a .model card", file=file, line=line,
                              hint=".model NAME D(IS=1e-14 N=1.8)")
        name, mtype = toks[1], toks[2].upper()
        card_types = list(_registry().CARD_MODEL_TYPES)
        if mtype not in card_types:
            raise DesignError(f"model type {mtype} is not supported", file=file,
                              line=line, part=name,
                              hint="use " + ", ".join(card_types[:-1]) + " or "
                              + card_types[-1])
        rest = toks[3:]
        params: dict[str, float] = {}
        k = 0
        while k < len(rest):
            if k + 1 < len(rest) and rest[k + 1] == "=":
                if k + 2 >= len(rest):
                    raise DesignError(f"parameter {rest[k]} has no value", file=file,
                                      line=line, part=name)
                key, val = rest[k].upper(), rest[k + 2]
                if val.startswith("{"):
                    try:
                        params[key] = evaluate_expression(val, {})
                    except ValueError as exc:
                        raise DesignError(f"parameter {key}: {exc}", file=file,
                                          line=line, part=name) from None
                else:
                    params[key] = parse_value(val, spice=True, file=file, line=line,
                                              part=name)
                k += 3
            else:
                raise DesignError(f"'{rest[k]}' is not a key=value parameter",
                                  file=file, line=line, part=name,
                                  hint=".model NAME D(IS=1e-14 N=1.8)")
        return self.add(Model(name, mtype, params, "user .model card", file, line))


def _typed_kinds() -> set[str]:
    """Element kinds whose elements carry their model type (Q, J, M)."""
    return {d.kind for d in _registry().devices() if d.typed}


def _validate(m: Model) -> None:
    where = dict(file=m.source, line=m.line, part=m.name)
    if m.kind not in KINDS:
        raise DesignError(f"unknown model kind '{m.kind}'", **where,
                          hint="use one of " + ", ".join(KINDS))
    ek = m.element_kind
    dev = _registry().DEVICES[ek]
    if dev.library is not None:       # a macromodel: the library's own names
        allowed = set(dev.library)
        missing = [p for p in dev.library_required if p not in m.params]
        if missing:
            raise DesignError(f"{ek} model needs {', '.join(missing)}", **where,
                              hint="see solderless/presets/parts.toml for the parameters")
    else:
        allowed = set(dev.standard)
    for k, v in m.params.items():
        if k not in allowed:
            close = difflib.get_close_matches(k, sorted(allowed), n=3)
            raise DesignError(f"unknown parameter {k} for a {m.kind} model", **where,
                              hint=("did you mean " + ", ".join(close) + "?")
                              if close else "known: " + ", ".join(sorted(allowed)))
        if not isinstance(v, (int, float)) or isinstance(v, bool):
            raise DesignError(f"parameter {k} must be a number", **where)
    if ek == "OTA" and m.params["JUNCTIONS"] not in (1, 2):
        raise DesignError("JUNCTIONS must be 1 or 2", **where)


def _line_of(text: str, name: str) -> int | None:
    pat = re.compile(r"^[ \t]*\[[ \t]*[\"']?" + re.escape(name) + r"[\"']?[ \t]*\]", re.M)
    m = pat.search(text)
    return text.count("\n", 0, m.start()) + 1 if m else None


def _load_toml(path: str) -> list[Model]:
    try:
        with open(path, "rb") as f:
            raw = f.read()
    except OSError as exc:
        raise DesignError(f"cannot read parts library '{path}': {exc.strerror}",
                          file=path, hint="check the path") from None
    text = raw.decode("utf-8", errors="replace")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise DesignError(f"not valid TOML: {exc}", file=path,
                          line=int(m.group(1)) if m else None,
                          hint="check quotes, '=' and [section] headers") from None
    out = []
    for name, entry in data.items():
        line = _line_of(text, name)
        if not isinstance(entry, dict):
            raise DesignError(f"'{name}' must be a [table] describing one model",
                              file=path, line=line, part=name)
        if "kind" not in entry:
            raise DesignError("model has no kind", file=path, line=line, part=name,
                              hint='add e.g. kind = "NPN"')
        kind = str(entry["kind"]).upper()
        note = str(entry.get("note", ""))
        params: dict[str, float] = {}
        spread: dict[str, tuple[float, float]] = {}
        for k, v in entry.items():
            if k in ("kind", "note"):
                continue
            if k == "spread":
                spread = _read_spread(v, path, line, name)
                continue
            params[k.upper()] = parse_value(v, file=path, line=line,
                                            part=f"{name}.{k}")
        out.append(Model(name, kind, params, note, path, line, spread))
    return out


def _read_spread(raw, path, line, name) -> dict[str, tuple[float, float]]:
    """``spread = { BF = [150, 450] }``: each parameter's low and high value."""
    if not isinstance(raw, dict):
        raise DesignError("spread must be a table of parameter = [low, high]", file=path,
                          line=line, part=name, hint="e.g. spread = { BF = [150, 450] }")
    out = {}
    for k, v in raw.items():
        if not isinstance(v, list) or len(v) != 2:
            raise DesignError(f"spread of {k} must be [low, high]", file=path, line=line,
                              part=name)
        lo = parse_value(v[0], file=path, line=line, part=f"{name}.spread.{k}")
        hi = parse_value(v[1], file=path, line=line, part=f"{name}.spread.{k}")
        if not lo <= hi:
            raise DesignError(f"spread of {k}: low {lo:g} is above high {hi:g}",
                              file=path, line=line, part=name)
        out[k.upper()] = (lo, hi)
    return out


def _load_spice_models(path: str, lib: PartsLibrary) -> None:
    from solderless.engine.formats.spice import _read_file, _cards
    text = _read_file(path, None)
    _, cards = _cards(text, path, has_title=False, ignored=[])
    for c in cards:
        if c.tokens and c.tokens[0].lower() == ".model":
            lib.add_model_card(c.text, file=c.file, line=c.line)


def load_library(extra_paths: Iterable[str | os.PathLike] = ()) -> PartsLibrary:
    """The built-in parts library plus models from ``extra_paths``.

    ``.toml`` files use the shape of ``solderless/presets/parts.toml``; any other file
    is read for SPICE ``.model`` cards (other cards are skipped). Later
    files replace models of the same name.
    """
    lib = PartsLibrary(_load_toml(str(BUILTIN_PATH)))
    for p in extra_paths:
        p = os.fspath(p)
        if p.lower().endswith(".toml"):
            for m in _load_toml(p):
                lib.add(m)
        else:
            _load_spice_models(p, lib)
    return lib
