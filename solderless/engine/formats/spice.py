"""SPICE-subset netlist import and export.

:func:`parse_netlist` / :func:`load_netlist` read the part of the SPICE
language that describes an analog audio circuit and flatten it into an
:class:`solderless.engine.circuit.Circuit`; :func:`circuit_to_netlist` writes a Circuit
back as a netlist that ngspice runs.

What is read (case-insensitive, as in SPICE):

* the title line (the first line of the top file, or a ``.title`` card),
  ``*`` comment lines,
  ``;`` and `` $ `` end-of-line comments, ``+`` continuation lines;
* R, C, L (``IC=``), V and I sources (DC value, ``DC x``, ``AC mag`` which is
  recorded but not used, ``SIN(VO VA FREQ TD THETA)``,
  ``PULSE(V1 V2 TD TR TF PW PER)``, ``PWL(t v ...)``), linear E and G in the
  four-node form, linear F and H (``F1 out+ out- VSENSE gain``: the current
  of a V source controls them), and all four in the linear ``POLY(n)`` form
  (p0 and first-degree terms, as op-amp macromodels write them; expanded to
  plain sources ``NAME.P1`` ...), D, Q (three nodes and a model; a substrate
  node or an area factor is ignored with a warning), J, M (four nodes, level
  1; instance W, L and M);
* ``sin(`` and ``sine(``, ``dc=``/``ac=`` on sources, ``r=``/``c=``/``l=``
  and ``m=`` on R, C, L; R and C cards naming an R or C ``.model``
  (:meth:`_Reader.model_value`);
* behavioural sources: B ``V=``/``I=``, E/G ``VALUE=`` (``vol=``/``cur=``)
  and ``TABLE`` (:meth:`_Reader.behavioural`, :mod:`solderless.engine.devices.behav`);
* switches: S with ``.model SW`` and W with ``.model CSW``, ON/OFF
  (:meth:`_Reader.switch`, :mod:`solderless.engine.devices.switch`);
* ``.model NAME TYPE(params)`` for D, NPN, PNP, NJF, PJF, NMOS and PMOS
  (another LEVEL is read as level 1, with a warning); parameters
  Solderless does not simulate (CJO, TT, ...) are kept in
  :attr:`Netlist.models` and reported in :attr:`Netlist.warnings`;
* ``.subckt``/``.ends`` with X instances, flattened: element ``R1`` inside
  instance ``X1`` becomes ``X1.R1``, an internal net ``n1`` becomes
  ``x1.n1``; instances nest (``X1.X2.R1``); subcircuit parameters
  (``.subckt name a b params: k=1``) and instance overrides (``X1 a b name
  k=2``);
* ``.param`` and ``{expr}`` / ``'expr'`` values, evaluated by a small
  arithmetic evaluator (no Python ``eval``), with the user's ``.func``
  functions;
* ``.include`` relative to the including file; ``.lib FILE SECTION`` (one
  section of a model library, up to its ``.endl``) and ``.lib FILE`` (the
  whole file); ``.end``;
* node names as schematic editors export them: ``/in``, ``Net-(R1-Pad2)``
  (a parenthesised part after a ``-`` belongs to the name).

Analysis and output cards (``.tran``, ``.op``, ``.ac``, ``.options``,
``.control`` ... ``.endc``, ``.save``, ``.probe``, ``.print``, ``.plot``,
``.backanno`` ...) are skipped and listed in
:attr:`Netlist.ignored`. Any card that would change the circuit but cannot be
run raises :class:`solderless.engine.errors.DesignError` naming the file, the line, the
card and the reason.

An X instance whose name is not a subcircuit but a model of the parts
library given as ``library`` (kind OPAMP or OTA) becomes an OPAMP or OTA
element with nodes (inp, inn, out, vcc|abc, vee).

Reference for the card syntax: the ngspice user manual (chapters "Circuit
description" and "Device models").
"""
from __future__ import annotations

import ast
import functools
import math
from collections import ChainMap
import os
import re
from dataclasses import dataclass, field
from typing import Any, Callable

from solderless.engine.circuit import GROUND, Circuit, Element, Where, canonical_net
from solderless.engine.derived import LiveMapping
from solderless.engine.devices._common import NOISE_ONLY
from solderless.engine.errors import DesignError, ValueFormatError
from solderless.engine import limits
from solderless.engine.values import parse_value

__all__ = [
    "Netlist", "SpiceModel", "Subckt", "SubcktStage", "load_netlist",
    "parse_netlist", "circuit_to_netlist", "netlist_subckt_as_stage",
    "evaluate_expression",
]

# --------------------------------------------------------------------------
# Device parameter names

def _registry():
    from solderless.engine.devices import registry
    return registry


#: Model types read from ``.model`` cards, and the element kind they serve;
#: the standard SPICE model parameters of each (ngspice manual, device model
#: tables: those we do not simulate are kept and reported, not refused) and
#: the other spellings SPICE accepts. Each device declares its own
#: (solderless.engine.devices.registry); these tables read them when used.
MODEL_KIND = LiveMapping(lambda: dict(_registry().CARD_MODEL_TYPES))
_STANDARD = LiveMapping(lambda: dict(_registry().STANDARD))
_ALIAS = LiveMapping(lambda: dict(_registry().ALIASES))


def _simulated(kind: str) -> set[str]:
    """Parameter names the device module for ``kind`` reads."""
    return set(_registry().DEVICES[kind].params)


# --------------------------------------------------------------------------
# Safe arithmetic expressions

_FUNCS: dict[str, Callable[..., float]] = {
    "sqrt": math.sqrt, "exp": math.exp, "ln": math.log, "log": math.log,
    "log10": math.log10, "abs": abs, "min": min, "max": max, "pow": math.pow,
    "pwr": lambda a, b: math.copysign(abs(a) ** b, a), "sin": math.sin,
    "cos": math.cos, "tan": math.tan, "atan": math.atan, "asin": math.asin,
    "acos": math.acos, "sinh": math.sinh, "cosh": math.cosh,
    "tanh": math.tanh, "floor": math.floor, "ceil": math.ceil,
    "int": lambda a: float(int(a)), "nint": lambda a: float(round(a)),
    "sgn": lambda a: float((a > 0) - (a < 0)), "atan2": math.atan2,
}
_CONSTS = {"pi": math.pi}
_BINOPS = {ast.Add: lambda a, b: a + b, ast.Sub: lambda a, b: a - b,
           ast.Mult: lambda a, b: a * b, ast.Div: lambda a, b: a / b,
           ast.Pow: lambda a, b: math.pow(a, b), ast.Mod: math.fmod}
_SCALED_NUM = re.compile(
    r"(?<![\w.])((?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?)(meg|mil|[tgkmunpf])?[a-z]*(?![\w(])",
    re.IGNORECASE)


@functools.lru_cache(maxsize=4096)
def _parse_expression(src: str, text: str):
    """The checked syntax tree of an expression (cached: a .func body is
    parsed once, not at every call)."""
    try:
        tree = ast.parse(src, mode="eval")
    except (SyntaxError, RecursionError, MemoryError, ValueError):
        raise ValueError(f"'{text}' is not an arithmetic expression") from None
    # nesting depth, measured without recursion (a long '1+1+...' chain is
    # a deep tree)
    stack = [(tree, 0)]
    while stack:
        node, dep = stack.pop()
        if dep > limits.MAX_EXPR_DEPTH:
            raise ValueError(f"the expression nests more than {limits.MAX_EXPR_DEPTH} "
                             "levels deep; split it with .param")
        stack.extend((ch, dep + 1) for ch in ast.iter_child_nodes(node))
    return tree


def evaluate_expression(text: str, params: dict[str, float],
                        funcs: dict[str, tuple[list[str], str]] | None = None,
                        _depth: int = 0, _steps: list | None = None) -> float:
    """Evaluate a SPICE parameter expression such as ``2*rload + 4.7k``.

    Numbers may carry SPICE scale factors; names are looked up
    (case-insensitively) in ``params``; operators ``+ - * / ^ ** %``;
    functions sqrt, exp, ln/log, log10, abs, min, max, pow, pwr, trig and
    hyperbolic functions, floor, ceil, int, nint, sgn; constant ``pi``;
    and the user's ``.func`` functions in ``funcs`` (lower-case name ->
    (argument names, body expression)).
    Parsed with :mod:`ast` and walked node by node: no code is executed.
    Raises ``ValueError`` with the reason.
    """
    if _depth > 32:
        raise ValueError("functions nest more than 32 deep (a .func that calls itself?)")
    if _steps is None:
        _steps = [0]
    funcs = funcs or {}
    if len(text) > limits.MAX_EXPR_CHARS:
        raise ValueError(f"the expression is {len(text)} characters long; the limit is "
                         f"{limits.MAX_EXPR_CHARS}")
    src = text.strip()
    if src[:1] in "{'" and src[-1:] in "}'":
        src = src[1:-1]
    src = src.replace("^", "**")
    src = _SCALED_NUM.sub(lambda m: repr(parse_value(m.group(0), spice=True)),
                          src)
    tree = _parse_expression(src.strip(), text)
    # names are looked up directly (the reader stores them in lower case);
    # a lower-cased copy of all parameters is made only when that misses, so
    # an expression costs its own size, not the number of parameters
    low: dict | None = None

    def lookup(name: str):
        nonlocal low
        key = name.lower()
        try:
            return params[key]
        except KeyError:
            pass
        if low is None:
            low = {k.lower(): v for k, v in params.items()}
        return low.get(key)

    def ev(node) -> float:
        _steps[0] += 1
        if _steps[0] > limits.MAX_EXPR_STEPS:
            raise ValueError(f"evaluating it takes more than {limits.MAX_EXPR_STEPS} "
                             "steps (functions that call each other many times over?)")
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) \
                and not isinstance(node.value, bool):
            return float(node.value)
        if isinstance(node, ast.Name):
            key = node.id.lower()
            got = lookup(node.id)
            if got is not None:
                return float(got)
            if key in _CONSTS:
                return _CONSTS[key]
            raise ValueError(f"unknown parameter '{node.id}'")
        if isinstance(node, ast.BinOp) and type(node.op) in _BINOPS:
            return _BINOPS[type(node.op)](ev(node.left), ev(node.right))
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            v = ev(node.operand)
            return -v if isinstance(node.op, ast.USub) else v
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) \
                and not node.keywords:
            user = funcs.get(node.func.id.lower())
            if user is not None:
                names, body = user
                if len(node.args) != len(names):
                    raise ValueError(f"function '{node.func.id}' takes {len(names)} "
                                     f"argument(s), not {len(node.args)}")
                inner = ChainMap(dict(zip(names, (ev(a) for a in node.args))), params)
                return evaluate_expression(body, inner, funcs, _depth + 1, _steps)
            fn = _FUNCS.get(node.func.id.lower())
            if fn is None:
                raise ValueError(f"unknown function '{node.func.id}'")
            return float(fn(*[ev(a) for a in node.args]))
        raise ValueError(f"'{ast.unparse(node)}' is not allowed in an expression")

    try:
        v = ev(tree)
    except (ZeroDivisionError, OverflowError, TypeError) as exc:
        raise ValueError(f"'{text}' cannot be evaluated ({exc})") from None
    except RecursionError:
        raise ValueError(f"'{text}' nests too deeply to evaluate") from None
    except ValueError as exc:
        if "math domain" in str(exc):
            raise ValueError(f"'{text}' cannot be evaluated (math domain)") from None
        raise
    if not math.isfinite(v):
        raise ValueError(f"'{text}' is not finite")
    return v


# --------------------------------------------------------------------------
# Data model

@dataclass
class Card:
    """One logical card (continuations joined) and where it starts."""
    text: str
    where: Where
    tokens: list[str] = field(default_factory=list)

    @property
    def file(self):
        return self.where.file

    @property
    def line(self):
        return self.where.line


@dataclass
class SpiceModel:
    """A ``.model`` card: ``type`` is D, NPN, PNP, NJF or PJF (or another
    SPICE type, kept but not usable); ``params`` holds every parameter as
    written (upper-case names, SI floats)."""
    name: str
    type: str
    params: dict[str, float]
    where: Where | None = None


@dataclass
class Subckt:
    """A ``.subckt`` definition: ports, default parameters, body cards."""
    name: str
    ports: list[str]
    defaults: dict[str, str]
    body: list[Card]
    subckts: dict[str, "Subckt"]
    where: Where | None = None


@dataclass
class Netlist:
    """The result of reading a netlist.

    circuit : the flattened Circuit (``input_source`` set when the named
        source exists, ``output = (out_node, '0')``).
    models : top-level ``.model`` cards by upper-case name.
    subckts : top-level ``.subckt`` definitions by upper-case name.
    params : top-level ``.param`` values.
    ignored : (line, card text) of cards skipped as analysis/output cards.
    warnings : messages about things read but not simulated.
    element_models : element name -> model name it uses.
    """
    title: str
    circuit: Circuit
    models: dict[str, SpiceModel] = field(default_factory=dict)
    subckts: dict[str, Subckt] = field(default_factory=dict)
    params: dict[str, float] = field(default_factory=dict)
    ignored: list[tuple[int | None, str]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    element_models: dict[str, str] = field(default_factory=dict)
    library: Any = None


# --------------------------------------------------------------------------
# Reading lines

#: Model parameters only the noise analysis and live noise read (flicker
#: noise; TOX for a MOSFET's): carried on the element, and named in a warning as not simulated
#: by a plain render.
_NOISE_ONLY = {"KF", "AF", "TOX"}
_IGNORED_DOT = {
    ".tran", ".op", ".ac", ".dc", ".noise", ".disto", ".pz", ".sens", ".tf",
    ".four", ".options", ".option", ".opt", ".save", ".probe", ".print",
    ".plot", ".backanno", ".lib", ".endl", ".temp", ".ic", ".nodeset",
    ".global", ".meas", ".measure", ".width", ".csparam", ".step",
    ".net", ".wave", ".spice", ".hdl", ".control", ".endc",
}
#: Instance parameters whose value may be a comma list (``TC=tc1,tc2``).
_LIST_KEYS = {"TC"}
_UNSUPPORTED_ELEMENTS = {
    "K": "coupled inductors (K) are not supported",
    "T": "transmission lines are not supported",
    "O": "transmission lines are not supported",
    "U": "transmission lines are not supported",
    "A": "code-model (A) devices are not supported",
    "Z": "MESFETs are not supported; use a JFET (J) model",
    "N": "device-level (N) simulation is not supported",
    "P": "coupled transmission lines (P) are not supported",
    "Y": "transmission lines are not supported",
}


def _strip_comment(s: str) -> str:
    i = s.find(";")
    if i >= 0:
        s = s[:i]
    m = re.search(r"(^|\s)\$(\s|$)", s)
    if m:
        s = s[:m.start()]
    i = s.find("//")
    if i >= 0 and (i == 0 or s[i - 1].isspace()):
        s = s[:i]
    return s.rstrip()


_SIMPLE_TOKENS = re.compile(r"=|[^\s(),={']+")


def _tokenize(text: str, where: Where) -> list[str]:
    """Split a card into tokens; parentheses and commas separate, '=' is a
    token of its own, ``{...}`` and ``'...'`` stay whole."""
    if "{" not in text and "'" not in text and "-(" not in text:
        # most cards: one regular expression does the same split
        return _SIMPLE_TOKENS.findall(text)
    return _tokenize_chars(text, where)


def _tokenize_chars(text: str, where: Where) -> list[str]:
    """:func:`_tokenize` character by character (any card)."""
    out: list[str] = []
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if c.isspace() or c in "(),":
            i += 1
        elif c == "=":
            out.append("=")
            i += 1
        elif c == "{":
            depth, j = 0, i
            while j < n:
                if text[j] == "{":
                    depth += 1
                elif text[j] == "}":
                    depth -= 1
                    if depth == 0:
                        break
                j += 1
            if j >= n:
                raise DesignError(f"'{text}': unbalanced '{{'", file=where.file,
                                  line=where.line, hint="close the expression with '}'")
            out.append(text[i:j + 1])
            i = j + 1
        elif c == "'":
            j = text.find("'", i + 1)
            if j < 0:
                raise DesignError(f"'{text}': unbalanced quote", file=where.file,
                                  line=where.line, hint="close the expression with a quote")
            out.append("{" + text[i + 1:j] + "}")
            i = j + 1
        else:
            j = i
            while j < n and not text[j].isspace() and text[j] not in "(),={'":
                j += 1
            # a node name with a parenthesised part after a '-', as schematic
            # editors name unlabelled nets ("Net-(R1-Pad2)"): one token (a
            # keyword's '(' follows a letter: SIN(, NPN()
            while j < n and text[j] == "(" and j > i and text[j - 1] == "-":
                k = j + 1
                while k < n and not text[k].isspace() and text[k] not in "()":
                    k += 1
                if k >= n or text[k] != ")" or k == j + 1:
                    break
                j = k + 1
                while j < n and not text[j].isspace() and text[j] not in "(),={'":
                    j += 1
            out.append(text[i:j])
            i = j
    return out


def _read_file(path: str, where: Where | None) -> str:
    """A netlist or model library's text: a regular file within the size
    limit, in UTF-8 (with or without a byte-order mark), UTF-16/32 with one,
    or Latin-1 (solderless.engine.fileio).  Errors name ``where`` (the .include card)
    when given."""
    from solderless.engine.fileio import read_text
    return read_text(path, what="netlist", where=where)


#: The first word of a card: an element name or a dot command.  A line of a
#: file that is not a netlist (a password file's 'root:x:0:0:...', a binary)
#: fails this, and the file is refused without quoting any of it.
_CARD_WORD = re.compile(r"[.A-Za-z][\w.#$\-+\[\]<>!~@&|^%]*")


def _not_a_netlist(file: str, ln: int, where: Where | None) -> DesignError:
    if where is not None and where.file and where.file != file:
        return DesignError(f"'{file}' does not look like a SPICE netlist (its line {ln} "
                           "is not a card); none of it is shown", file=where.file,
                           line=where.line, hint="include only netlists and model "
                           "libraries")
    return DesignError(f"does not look like a SPICE netlist (line {ln} is not a card); "
                       "none of it is shown", file=file,
                       hint="netlists start with a title line, then one card a line")


def _lib_section(text: str, section: str, path: str, where: Where) -> str:
    """The lines of section ``section`` of a model library: from the line
    '.lib SECTION' up to its '.endl' (names case-insensitive)."""
    out: list[str] = []
    found = False
    names: list[str] = []
    for line in text.splitlines():
        words = _strip_comment(line.strip()).split()
        low = [w.lower() for w in words]
        if not found:
            if len(low) == 2 and low[0] == ".lib":
                names.append(words[1])
                found = low[1] == section.lower()
            continue
        if low[:1] == [".endl"]:
            return "\n".join(out) + "\n"
        out.append(line)
    if found:
        return "\n".join(out) + "\n"
    raise DesignError(f"model library '{path}' has no section '{section}'",
                      file=where.file, line=where.line,
                      hint=("its sections: " + ", ".join(names)) if names else
                      "the file defines no '.lib NAME' sections; name the file alone")


def _cards(text: str, file: str, *, has_title: bool, ignored: list,
           depth: int = 0, origin: Where | None = None) -> tuple[str, list[Card]]:
    """Logical cards of a netlist text, with ``.include`` spliced in.
    ``origin`` is the card that included this file (None for the top)."""
    if depth > limits.MAX_INCLUDE_DEPTH:
        raise DesignError(f".include nesting is deeper than {limits.MAX_INCLUDE_DEPTH} "
                          "levels", file=origin.file if origin else file,
                          line=origin.line if origin else None,
                          hint="look for a file that includes itself")
    lines = text.splitlines()
    title = ""
    start = 0
    if has_title and lines:
        title = lines[0].strip()
        start = 1
    # continuation lines are collected as lists and joined once (adding each
    # to a growing string made a long card quadratic)
    phys: list[tuple[int, list[str]]] = []
    size = 0
    for k in range(start, len(lines)):
        s = lines[k]
        st = s.strip()
        if not st or st.startswith("*"):
            continue
        st = _strip_comment(st)
        if not st:
            continue
        if st.startswith("+"):
            if not phys:
                raise DesignError("continuation line '+' with nothing to continue",
                                  file=file, line=k + 1,
                                  hint="join it to the card it belongs to")
            phys[-1][1].append(st[1:].strip())
            size += len(st)
            if size > limits.MAX_CARD_CHARS:
                raise DesignError(f"a card continues over more than {limits.MAX_CARD_CHARS} "
                                  "characters (the limit)", file=file, line=phys[-1][0])
        else:
            if not _CARD_WORD.fullmatch(st.split(None, 1)[0]):
                raise _not_a_netlist(file, k + 1, origin)
            if len(st) > limits.MAX_CARD_CHARS:
                raise DesignError(f"the line is {len(st)} characters long; the limit for a "
                                  f"card is {limits.MAX_CARD_CHARS}", file=file, line=k + 1)
            phys.append((k + 1, [st]))
            size = len(st)
    phys = [(ln, " ".join(bits)) for ln, bits in phys]
    cards: list[Card] = []
    in_control = False
    base = os.path.dirname(file) if file and not file.startswith("<") else os.getcwd()
    for ln, st in phys:
        where = Where(file, ln)
        low = st.lower()
        word = low.split()[0]
        if in_control:
            ignored.append((ln, st))
            if word == ".endc":
                in_control = False
            continue
        if word == ".control":
            in_control = True
            ignored.append((ln, st))
            continue
        if word == ".end":
            break
        if word == ".lib":
            # '.lib FILE SECTION' takes one section of a model library
            # (ngspice manual, ".lib"); '.lib FILE' the whole file; a
            # one-word '.lib NAME' that is not a file opens a section inside
            # a library (its cards follow, up to '.endl')
            args = [a.strip("\"'") for a in st.split()[1:]]
            path = ""
            if args:
                path = args[0] if os.path.isabs(args[0]) else os.path.join(base, args[0])
            if len(args) >= 2 or (args and os.path.isfile(path)):
                sub = _read_file(path, where)
                if len(args) >= 2:
                    sub = _lib_section(sub, args[1], path, where)
                _, more = _cards(sub, path, has_title=False, ignored=ignored,
                                 depth=depth + 1, origin=where)
                cards.extend(more)
                continue
            if not args:
                raise DesignError(f"'{st}': .lib needs a file name", file=file, line=ln,
                                  hint="write .lib \"models.lib\" SECTION")
            ignored.append((ln, st))
            continue
        if word in (".include", ".inc"):
            arg = st.split(None, 1)[1].strip() if len(st.split(None, 1)) > 1 else ""
            arg = arg.strip("\"'")
            if not arg:
                raise DesignError(f"'{st}': .include needs a file name", file=file,
                                  line=ln, hint='write .include "models.lib"')
            path = arg if os.path.isabs(arg) else os.path.join(base, arg)
            sub = _read_file(path, where)
            _, more = _cards(sub, path, has_title=False, ignored=ignored,
                             depth=depth + 1, origin=where)
            cards.extend(more)
            continue
        cards.append(Card(st, where, _tokenize(st, where)))
    return title, cards


# --------------------------------------------------------------------------
# Structure: subcircuit definitions, scopes

def _split_defs(cards: list[Card], level: int = 0) -> tuple[list[Card], dict[str, Subckt]]:
    """Separate ``.subckt`` definitions (recursively) from the other cards."""
    if level > limits.MAX_SUBCKT_DEPTH and cards:
        raise DesignError(f".subckt definitions nest more than {limits.MAX_SUBCKT_DEPTH} "
                          "levels deep", file=cards[0].file, line=cards[0].line,
                          hint="define subcircuits side by side instead")
    top: list[Card] = []
    defs: dict[str, Subckt] = {}
    i = 0
    while i < len(cards):
        c = cards[i]
        word = c.tokens[0].lower() if c.tokens else ""
        if word == ".subckt":
            depth, j = 1, i + 1
            while j < len(cards):
                w = cards[j].tokens[0].lower() if cards[j].tokens else ""
                if w == ".subckt":
                    depth += 1
                elif w == ".ends":
                    depth -= 1
                    if depth == 0:
                        break
                j += 1
            if j >= len(cards):
                raise DesignError(f"'{c.text}': .subckt without .ends", file=c.file,
                                  line=c.line, hint="close the definition with .ends")
            body, inner = _split_defs(cards[i + 1:j], level + 1)
            sub = _subckt_header(c, body, inner)
            if sub.name in defs:
                raise DesignError(f"subcircuit '{sub.name}' is defined twice",
                                  file=c.file, line=c.line,
                                  hint=f"first definition at line {defs[sub.name].where.line}")
            defs[sub.name] = sub
            i = j + 1
            continue
        if word == ".ends":
            raise DesignError(f"'{c.text}': .ends without .subckt", file=c.file,
                              line=c.line, hint="remove it or add the .subckt line")
        top.append(c)
        i += 1
    return top, defs


def _subckt_header(c: Card, body, inner) -> Subckt:
    t = c.tokens
    if len(t) < 2:
        raise DesignError(f"'{c.text}': .subckt needs a name and ports", file=c.file,
                          line=c.line, hint=".subckt NAME port1 port2 ...")
    ports: list[str] = []
    defaults: dict[str, str] = {}
    rest = t[2:]
    k = 0
    while k < len(rest):
        tok = rest[k]
        if tok.lower() in ("params:", "param:"):
            k += 1
            continue
        if k + 2 < len(rest) + 1 and k + 1 < len(rest) and rest[k + 1] == "=":
            if k + 2 >= len(rest):
                raise DesignError(f"'{c.text}': parameter '{tok}' has no value",
                                  file=c.file, line=c.line)
            defaults[tok.lower()] = rest[k + 2]
            k += 3
            continue
        if defaults:
            raise DesignError(f"'{c.text}': port '{tok}' after parameters",
                              file=c.file, line=c.line,
                              hint="list all ports before 'params:'")
        ports.append(tok.lower())
        k += 1
    return Subckt(t[1].upper(), ports, defaults, body, inner, c.where)


@dataclass
class _Scope:
    params: dict[str, float]
    models: dict[str, Card]
    subckts: dict[str, Subckt]
    parent: "_Scope | None" = None
    resolved: dict[str, SpiceModel] = field(default_factory=dict)
    funcs: dict[str, tuple[list[str], str]] = field(default_factory=dict)

    def find_subckt(self, name: str) -> Subckt | None:
        s: _Scope | None = self
        while s is not None:
            if name in s.subckts:
                return s.subckts[name]
            s = s.parent
        return None


class _Reader:
    """Flattens cards into elements; collects warnings and ignored cards."""

    def __init__(self, library, ignored, warnings):
        self.library = library
        self.ignored = ignored
        self.warnings = warnings
        self.elements: list[Element] = []
        self.names: dict[str, Where] = {}
        self.element_models: dict[str, str] = {}
        self._warned: set[str] = set()
        self.expanded = 0
        # start-up state and temperature cards (top level)
        self.temperature: float | None = None
        self.tnom: float | None = None
        self.ic: dict[str, float] = {}
        self.nodeset: dict[str, float] = {}

    # -- helpers ---------------------------------------------------------
    def err(self, card: Card, why: str, hint: str | None = None, part=None):
        text = card.text if len(card.text) <= 80 else card.text[:77] + "..."
        raise DesignError(f"'{text}': {why}", file=card.file, line=card.line,
                          part=part, hint=hint)

    def warn(self, msg: str):
        if msg not in self._warned:
            self._warned.add(msg)
            self.warnings.append(msg)

    def value(self, tok: str, card: Card, scope: _Scope, what: str,
              part=None) -> float:
        """A numeric field: number with scale factor, {expr} or a .param name."""
        if tok.startswith("{"):
            try:
                return evaluate_expression(tok, scope_params(scope),
                                           scope_funcs(scope))
            except ValueError as exc:
                self.err(card, f"{what}: {exc}", "define it with .param or fix "
                         "the expression", part)
        try:
            v = parse_value(tok, spice=True, file=card.file, line=card.line,
                            part=part)
            if re.fullmatch(r"[+-]?\d+[a-zA-Z\u00b5]\d+", tok) and \
                    not re.fullmatch(r"[+-]?\d+[eE]\d+", tok):
                self.warn(f"{card.file}:{card.line}: {part or ''}: '{tok}' is read "
                          f"as {v:g} (value marking); SPICE simulators stop at "
                          "the letter and read less, so write it as e.g. 4.7k")
            return v
        except ValueFormatError:
            params = scope_params(scope)
            if tok.lower() in params:
                return params[tok.lower()]
            self.err(card, f"{what} '{tok}' is not a number",
                     "write e.g. 4.7k, 100n, 1meg or {expression}", part)

    def kv(self, toks: list[str], card: Card) -> tuple[list[str], dict[str, str]]:
        """Split positional tokens from ``key = value`` pairs."""
        pos: list[str] = []
        kv: dict[str, str] = {}
        k = 0
        while k < len(toks):
            if k + 1 < len(toks) and toks[k + 1] == "=":
                if k + 2 >= len(toks):
                    self.err(card, f"'{toks[k]}=' has no value")
                key = toks[k].upper()
                kv[key] = toks[k + 2]
                k += 3
                # a list value, 'TC=0.001,0' (temperature coefficients):
                # the first item is the value, the rest go with it
                while key in _LIST_KEYS and k < len(toks) and _is_number_like(toks[k]) \
                        and not (k + 1 < len(toks) and toks[k + 1] == "="):
                    k += 1
            elif toks[k] == "=":
                self.err(card, "'=' without a parameter name")
            else:
                if kv:
                    self.err(card, f"'{toks[k]}' after key=value parameters",
                             "put node names and values before parameters")
                pos.append(toks[k])
                k += 1
        return pos, kv

    # -- scopes, params, models ------------------------------------------
    def make_scope(self, cards: list[Card], defs, params: dict[str, float],
                   parent: _Scope | None) -> tuple[_Scope, list[Card]]:
        scope = _Scope(dict(params), {}, dict(defs), parent)
        rest: list[Card] = []
        for c in cards:
            word = c.tokens[0].lower()
            if word == ".param":
                self.read_param(c, scope)
            elif word == ".func":
                self.read_func(c, scope)
            elif word == ".model":
                if len(c.tokens) < 3:
                    self.err(c, ".model needs a name and a type",
                             ".model NAME D(IS=1e-14 N=1.8)")
                name = c.tokens[1].upper()
                if name in scope.models:
                    self.err(c, f"model '{name}' is defined twice",
                             f"first definition at line {scope.models[name].line}")
                scope.models[name] = c
            else:
                rest.append(c)
        return scope, rest

    def read_func(self, c: Card, scope: _Scope):
        """``.func name(a, b) {expression}`` (ngspice manual, ".func")."""
        m = re.match(r"^\.func\s+([A-Za-z_]\w*)\s*\(([^)]*)\)\s*=?\s*(.+)$", c.text,
                     flags=re.I)
        if not m:
            self.err(c, ".func needs a name, arguments and an expression",
                     ".func half(x) {x/2}")
        args = [a.strip().lower() for a in m.group(2).split(",") if a.strip()]
        if not all(re.fullmatch(r"[A-Za-z_]\w*", a) for a in args):
            self.err(c, f"function arguments must be names, not '{m.group(2)}'",
                     ".func half(x) {x/2}")
        scope.funcs[m.group(1).lower()] = (args, m.group(3).strip())

    def read_param(self, c: Card, scope: _Scope):
        body = c.text.split(None, 1)[1] if len(c.text.split(None, 1)) > 1 else ""
        marks = list(re.finditer(r"([A-Za-z_][\w.]*)\s*=", body))
        # ignore '=' inside braces or quotes
        marks = [m for m in marks if body[:m.start()].count("{") == body[:m.start()].count("}")
                 and body[:m.start()].count("'") % 2 == 0]
        if not marks:
            self.err(c, ".param needs name=value", ".param rload=10k gain={2*rload}")
        for k, m in enumerate(marks):
            end = marks[k + 1].start() if k + 1 < len(marks) else len(body)
            expr = body[m.end():end].strip().rstrip(",")
            name = m.group(1).lower()
            if not expr:
                self.err(c, f"parameter '{name}' has no value")
            try:
                scope.params[name] = evaluate_expression(expr, scope_params(scope),
                                                         scope_funcs(scope))
            except ValueError as exc:
                self.err(c, f"parameter '{name}': {exc}",
                         "define the parameters it uses first")

    def model(self, name: str, card: Card, scope: _Scope, part: str) -> SpiceModel | None:
        key = name.upper()
        s: _Scope | None = scope
        while s is not None:
            if key in s.resolved:
                return s.resolved[key]
            if key in s.models:
                m = self.read_model(s.models[key], s)
                s.resolved[key] = m
                return m
            s = s.parent
        if self.library is not None:
            lm = _library_find(self.library, name)
            if lm is not None:
                return SpiceModel(lm.name, lm.kind.upper(), dict(lm.params), None)
        return None

    def read_model(self, c: Card, scope: _Scope) -> SpiceModel:
        t = c.tokens
        name, mtype = t[1].upper(), t[2].upper()
        _, kv = self.kv(t[3:], c)
        params: dict[str, float] = {}
        for k, v in kv.items():
            params[k] = self.value(v, c, scope, f"model parameter {k}")
        return SpiceModel(name, mtype, params, c.where)

    # -- elements ----------------------------------------------------------
    def add(self, el: Element, card: Card):
        if len(self.elements) >= limits.MAX_ELEMENTS:
            self.err(card, f"the circuit has more than {limits.MAX_ELEMENTS} elements "
                     "after expanding subcircuits (the limit)",
                     "look for subcircuits that call each other many times over",
                     el.name)
        if el.name in self.names:
            first = self.names[el.name]
            self.err(card, f"element '{el.name}' is defined twice",
                     f"first at {first.file}:{first.line}; rename one", el.name)
        self.names[el.name] = card.where
        self.elements.append(el)

    def flatten(self, cards: list[Card], scope: _Scope, prefix: str,
                netmap: dict[str, str], chain: tuple[str, ...] = ()):
        if len(chain) > limits.MAX_SUBCKT_DEPTH:
            c = cards[0] if cards else None
            raise DesignError(f"subcircuits nest more than {limits.MAX_SUBCKT_DEPTH} "
                              f"levels deep ({' > '.join(chain[:3])} > ...)",
                              file=c.file if c else None, line=c.line if c else None,
                              part=prefix or None)
        for c in cards:
            self.expanded += 1
            if self.expanded > limits.MAX_EXPANDED_CARDS:
                self.err(c, f"expanding the subcircuits takes more than "
                         f"{limits.MAX_EXPANDED_CARDS} cards (the limit)",
                         "look for subcircuits that call each other many times over")
            word = c.tokens[0]
            low = word.lower()
            if low.startswith("."):
                if low in (".temp", ".options", ".option", ".opt", ".ic", ".nodeset"):
                    self.setting(c, low, scope, prefix, netmap)
                    continue
                if low in _IGNORED_DOT:
                    self.ignored.append((c.line, c.text))
                    continue
                if low == ".title":
                    continue
                self.err(c, f"control card '{word}' is not supported",
                         "remove it; Solderless reads the circuit, .model, "
                         ".subckt, .param and .include cards")
            letter = word[0].upper()
            # 'R.X1.R1' (ngspice's flattened form, and what the writer emits
            # for names not starting with their letter) is read as 'X1.R1'
            own = word[2:] if len(word) > 2 and word[1] == "." else word
            name = (prefix + "." if prefix else "") + own.upper()

            def net(tok: str) -> str:
                n = canonical_net(tok.lower())
                if n == GROUND:
                    return GROUND
                if n in netmap:
                    return netmap[n]
                return (prefix.lower() + "." + n) if prefix else n

            if letter in "RCL":
                self.passive(c, letter, name, net, scope)
            elif letter in "VI":
                self.source(c, letter, name, net, scope)
            elif letter == "B":
                self.behavioural(c, letter, name, net, scope)
            elif letter in "EG":
                self.controlled(c, letter, name, net, scope)
            elif letter in "FH":
                self.current_controlled(c, letter, name, net, scope, prefix)
            elif letter in _registry().LETTERS:
                self.device(c, letter, name, net, scope)
            elif letter in "SW":
                self.switch(c, letter, name, net, scope, prefix)
            elif letter == "X":
                self.instance(c, name, net, scope, chain)
            elif letter in _UNSUPPORTED_ELEMENTS:
                self.err(c, _UNSUPPORTED_ELEMENTS[letter], part=name)
            else:
                self.err(c, f"'{word}' is not a SPICE element name",
                         "element names start with R, C, L, V, I, E, G, F, H, B, S, W, "
                         + ", ".join(_registry().card_letters()) + " or X",
                         part=name)

    def setting(self, c, low, scope, prefix, netmap):
        """``.temp T``, ``.options temp=T tnom=T`` (the rest of .options is
        read by the analysis, not the circuit), ``.ic v(n)=V``,
        ``.nodeset v(n)=V`` (ngspice manual: the circuit temperature, the
        models' default nominal temperature, and the start-up state)."""
        text = c.text
        if low == ".temp":
            vals = text.split()[1:]
            if not vals:
                self.err(c, ".temp needs a temperature in degrees Celsius", ".temp 50")
            self.temperature = self.value(vals[0].strip(","), c, scope, "temperature")
            if len(vals) > 1:
                self.warn(f"{c.file}:{c.line}: .temp lists several temperatures; "
                          f"the first ({self.temperature:g} degC) is simulated")
            return
        if low in (".options", ".option", ".opt"):
            self.ignored.append((c.line, c.text))
            for m in re.finditer(r"\b(temp|tnom)\s*=\s*([^\s,]+)", text, flags=re.I):
                v = self.value(m.group(2), c, scope, m.group(1).lower())
                if m.group(1).lower() == "temp":
                    self.temperature = v
                else:
                    self.tnom = v
            return
        pairs = re.findall(r"\bv\(\s*([^)\s,]+)\s*\)\s*=\s*([^\s)]+)", text, flags=re.I)
        if not pairs:
            self.err(c, f"{low} needs node voltages", f"{low} v(out)=4.5")
        target = self.ic if low == ".ic" else self.nodeset
        for node, val in pairs:
            n = canonical_net(node.lower())
            if n == GROUND:
                continue
            if n in netmap:
                n = netmap[n]
            elif prefix:
                n = prefix.lower() + "." + n
            target[n] = self.value(val, c, scope, f"{low} value")

    def passive(self, c, letter, name, net, scope):
        """R, C, L; R and C may name an R or C ``.model`` (ngspice manual,
        "Semiconductor Resistors" / "Semiconductor Capacitors"): a value on
        the card wins; without one, the model's R (CAP) or the geometry
        (RSH, L, W, DEFW, NARROW, SHORT; CJ, CJSW, DI, THICK) gives it, with
        the effective sizes ngspice-39 uses (checked with its ``show``)."""
        pos, kv = self.kv(c.tokens[1:], c)
        what = {"R": "resistance", "C": "capacitance", "L": "inductance"}[letter]
        key = {"R": "R", "C": "C", "L": "L"}[letter]
        if len(pos) == 2 and key in kv:
            pos.append(kv.pop(key))
        model = None
        if letter in "RC" and len(pos) in (3, 4) and not _is_number_like(pos[-1]) \
                and pos[-1].lower() not in scope_params(scope):
            model = self.model(pos[-1], c, scope, name)
            if model is None and len(pos) == 4:
                self.err(c, f"model '{pos[-1]}' is not defined",
                         f"add a .model {pos[-1]} {letter}(...) card", name)
            if model is not None:
                want = {"R": ("R", "RES"), "C": ("C", "CAP")}[letter]
                if model.type.upper() not in want:
                    self.err(c, f"model '{model.name}' is of type {model.type}, "
                                f"a {letter} element needs a {want[0]} model", part=name)
                pos = pos[:-1]
        if len(pos) < 2 or (len(pos) < 3 and model is None):
            self.err(c, f"needs two nodes and a {what}",
                     f"{c.tokens[0]} node1 node2 value", name)
        if len(pos) > 3:
            self.err(c, f"'{pos[3]}': semiconductor {what} models are not "
                     f"supported", f"give the {what} as a number", name)
        geo = {}
        for k in ("L", "W"):
            if model is not None and k in kv:
                geo[k] = self.value(kv.pop(k), c, scope, f"{k} (size)", name)
        if len(pos) == 3:
            v = self.value(pos[2], c, scope, what, name)
        else:
            v = self.model_value(c, letter, name, model, geo)
        if model is not None:
            self.element_models[name] = model.name
            used = {"R": {"R", "RES", "RSH", "DEFW", "NARROW", "SHORT"},
                    "C": {"CAP", "CJ", "CJSW", "DEFW", "NARROW", "SHORT", "DI",
                          "THICK"}}[letter]
            why = {"TC1": "temperature coefficient, no effect at 27 degC",
                   "TC2": "temperature coefficient, no effect at 27 degC",
                   "TCE": "temperature coefficient, no effect at 27 degC",
                   "TNOM": "no effect at 27 degC", "KF": "noise", "AF": "noise",
                   "WF": "noise", "LF": "noise", "EF": "noise", "BV_MAX": "rating",
                   "DEFL": "default length"}
            where = f"{model.where.file}:{model.where.line}: " if model.where else ""
            for k in model.params:
                if k not in used or len(pos) == 3:
                    self.warn(f"{where}model {model.name}: {k} is ignored"
                              + (f" ({why[k]})" if k in why else
                                 " (the card gives the value)" if k in used else ""))
        if letter == "R" and v == 0:
            self.err(c, "a resistance of zero cannot be simulated",
                     "join the two nets or use a small value such as 1m", name)
        params: dict[str, Any] = {}
        for k, tok in kv.items():
            if k == "IC" and letter in "CL":
                params["IC"] = self.value(tok, c, scope, "initial condition", name)
            elif k in ("M",):
                m = self.value(tok, c, scope, "multiplier", name)
                v = v / m if letter in "RL" else v * m
            else:
                self.warn(f"{c.file}:{c.line}: {name}: parameter {k} is ignored")
        self.add(Element(name, letter, (net(pos[0]), net(pos[1])), v, params,
                         c.where), c)

    def model_value(self, c, letter, name, model, geo) -> float:
        """Resistance or capacitance of an R/C card without a value, from its
        model: R = RSH*(L - 2*SHORT)/(W - 2*NARROW); C = CJ*(L - SHORT)*
        (W - NARROW) + 2*CJSW*((L - SHORT) + (W - NARROW)), CJ = DI*eps0/THICK
        when THICK is given; W defaults to DEFW (10 um).  The effective sizes
        are ngspice-39's, read back with its ``show`` command."""
        mp = model.params
        direct = mp.get("R", mp.get("RES")) if letter == "R" else mp.get("CAP")
        if direct is not None:
            return direct
        if "L" not in geo:
            self.err(c, f"model '{model.name}' has no {'R' if letter == 'R' else 'CAP'} "
                        "value and the card gives no length L", f"{c.tokens[0]} a b "
                        f"{model.name} L=10u W=1u, or a value on the card", name)
        w = geo.get("W", mp.get("DEFW", 10e-6))
        ln, nar, sho = geo["L"], mp.get("NARROW", 0.0), mp.get("SHORT", 0.0)
        if letter == "R":
            le, we = ln - 2.0 * sho, w - 2.0 * nar
            if not ("RSH" in mp and le > 0 and we > 0 and mp["RSH"] > 0):
                self.err(c, f"model '{model.name}': RSH and the effective sizes "
                            f"(L - 2*SHORT = {le:g}, W - 2*NARROW = {we:g}) must be > 0",
                         part=name)
            return mp["RSH"] * le / we
        le, we = ln - sho, w - nar
        cj = mp.get("CJ", 0.0)
        if "THICK" in mp and mp["THICK"] > 0:
            cj = mp.get("DI", 3.9) * 8.8541878128e-12 / mp["THICK"]
        v = cj * le * we + 2.0 * mp.get("CJSW", 0.0) * (le + we)
        if not (le > 0 and we > 0 and v > 0):
            self.err(c, f"model '{model.name}' gives no capacitance for these sizes "
                        f"(L - SHORT = {le:g}, W - NARROW = {we:g})", part=name)
        return v

    def source(self, c, letter, name, net, scope):
        toks = list(c.tokens[1:])
        if len(toks) < 2:
            self.err(c, "needs two nodes", f"{c.tokens[0]} plus minus DC 1", name)
        nodes = (net(toks[0]), net(toks[1]))
        rest = toks[2:]
        dc = None
        params: dict[str, Any] = {}
        k = 0
        funcs = ("sin", "sine", "pulse", "pwl")
        while k < len(rest):
            w = rest[k].lower()
            # 'dc=5', 'ac=1' (the name=value form ngspice also reads)
            if w in ("dc", "ac") and k + 1 < len(rest) and rest[k + 1] == "=":
                del rest[k + 1]
            if w == "dc":
                if k + 1 >= len(rest):
                    self.err(c, "DC needs a value", part=name)
                dc = self.value(rest[k + 1], c, scope, "DC value", name)
                k += 2
            elif w == "ac":
                k += 1
                vals = []
                while k < len(rest) and len(vals) < 2 and _is_number_like(rest[k]):
                    vals.append(self.value(rest[k], c, scope, "AC value", name))
                    k += 1
                params["AC"] = vals[0] if vals else 1.0
                if len(vals) > 1:
                    params["ACPHASE"] = vals[1]
            elif w in funcs:
                k += 1
                vals = []
                while k < len(rest) and _is_number_like(rest[k]):
                    vals.append(self.value(rest[k], c, scope, f"{w.upper()} value", name))
                    k += 1
                fn = "SIN" if w == "sine" else w.upper()  # ngspice reads sine( as sin(
                params["wave"] = (fn, self.check_wave(c, name, fn, vals))
            elif w in ("exp", "sffm", "am", "trnoise", "trrandom", "external",
                       "distof1", "distof2", "port"):
                self.err(c, f"the {w.upper()} source function is not supported",
                         "use a DC value, SIN, PULSE or PWL", name)
            elif dc is None and (_is_number_like(rest[k])
                                 or rest[k].lower() in scope_params(scope)):
                dc = self.value(rest[k], c, scope, "value", name)
                k += 1
            else:
                self.err(c, f"'{rest[k]}' is not understood here",
                         "write e.g. DC 9, AC 1, SIN(0 1 1k), PULSE(...), PWL(...)",
                         name)
        if dc is None:
            dc = _wave_at_zero(params.get("wave"))
        self.add(Element(name, letter, nodes, dc, params, c.where), c)

    def check_wave(self, c, name, kind, vals):
        if kind == "SIN":
            if len(vals) < 3:
                self.err(c, "SIN needs at least VO VA FREQ", "SIN(0 0.1 440)", name)
            if len(vals) > 6:
                self.err(c, "SIN takes at most VO VA FREQ TD THETA PHASE", part=name)
        elif kind == "PULSE":
            if len(vals) < 2 or len(vals) > 8:
                self.err(c, "PULSE takes V1 V2 TD TR TF PW PER",
                         "PULSE(0 1 1m 1u 1u 5m 10m)", name)
        elif kind == "PWL":
            if len(vals) < 2 or len(vals) % 2:
                self.err(c, "PWL needs time/value pairs", "PWL(0 0 1m 1 2m 0)", name)
            ts = vals[0::2]
            if any(b < a for a, b in zip(ts, ts[1:])):
                self.err(c, "PWL times must not decrease", part=name)
        return vals

    def controlled(self, c, letter, name, net, scope):
        if any(t.lower() in ("value", "table", "vol", "cur") for t in c.tokens[3:5]):
            self.behavioural(c, letter, name, net, scope)
            return
        pos, kv = self.kv(c.tokens[1:], c)
        form = f"{c.tokens[0]} out+ out- ctrl+ ctrl- gain"
        if any(p.lower() in ("laplace",) for p in pos) or kv:
            self.err(c, "only the linear four-node form and linear POLY are supported",
                     form, name)
        if len(pos) > 2 and pos[2].lower() == "poly":
            ctrls, coef = self.poly(c, pos, 2, name, scope, form)
            self.expand_poly(c, letter, name, net(pos[0]), net(pos[1]),
                             [(net(a), net(b)) for a, b in ctrls], coef)
            return
        if len(pos) != 5:
            self.err(c, "needs four nodes and a gain", form, name)
        g = self.value(pos[4], c, scope, "gain", name)
        self.add(Element(name, letter, tuple(net(p) for p in pos[:4]), g, {},
                         c.where), c)

    def behavioural(self, c, letter, name, net, scope):
        """Nonlinear sources: ``B n+ n- V=expr`` / ``I=expr``, ``E``/``G n+ n-
        VALUE={expr}`` (also ``vol=``/``cur=``), ``E``/``G n+ n- TABLE {expr} =
        (x0, y0) (x1, y1) ...`` (ngspice manual, "Non-linear Dependent Sources"
        and "E/G source ... VALUE, TABLE").  A current becomes a BEHAV element;
        a voltage a BEHAV element driving an internal node ``<name>#x``
        through 1 ohm (``<name>.R``), copied to the output by a unity E
        source ``<name>.E``.  Node names in the expression are the card's, as
        in the subcircuit it sits in."""
        from solderless.engine.devices import behav
        text = c.text.strip()
        m = re.match(r"^\S+\s+(\S+)\s+(\S+)\s+(.*)$", text, flags=re.S)
        form = {"B": f"{c.tokens[0]} out+ out- V={{expression}} (or I=...)",
                "E": f"{c.tokens[0]} out+ out- VALUE={{expression}}",
                "G": f"{c.tokens[0]} out+ out- VALUE={{expression}}"}[letter]
        if not m:
            self.err(c, "needs two nodes and an expression", form, name)
        pnode, nnode, rest = m.groups()
        mk = re.match(r"^(v|i|value|vol|cur)\s*=\s*(.+)$", rest, flags=re.I | re.S)
        mt = re.match(r"^table\s*(\{[^}]*\}|'[^']*'|\S+)\s*=?\s*(.+)$", rest,
                      flags=re.I | re.S)
        voltage = letter == "E"
        if letter == "B" and mk and mk.group(1).lower() in ("v", "i"):
            voltage = mk.group(1).lower() == "v"
            expr = mk.group(2)
        elif letter in "EG" and mk and mk.group(1).lower() in ("value", "vol", "cur"):
            expr = mk.group(2)
        elif letter in "EG" and mt:
            pts_text = mt.group(2)
            toks = [t for t in re.split(r"[\s(),]+", pts_text) if t and t != "="]
            if len(toks) < 2 or len(toks) % 2:
                self.err(c, "TABLE needs (x, y) pairs", f"{c.tokens[0]} out 0 TABLE "
                         "{v(in)} = (-1, -1) (1, 1)", name)
            vals = [self.value(t, c, scope, "TABLE point", name) for t in toks]
            inner = mt.group(1)
            if inner[:1] in "{'":
                inner = inner[1:-1]
            expr = "table(" + inner + ", " + ", ".join(repr(v) for v in vals) + ")"
        else:
            self.err(c, "needs V= or I= (B), VALUE= or TABLE (E, G)", form, name)
        expr = expr.strip()
        # trailing instance parameters are not read (and would be misread)
        if re.search(r"\s(tc1|tc2|temp|dtemp|m)\s*=", expr, flags=re.I):
            self.err(c, "instance parameters after the expression are not supported",
                     "remove them", name)
        if expr[:1] == "'" and expr[-1:] == "'":
            expr = expr[1:-1]
        if expr[:1] == "{" and expr[-1:] == "}" and expr.count("{") == 1:
            expr = expr[1:-1]
        # '{gain}*v(in)': a braced parameter expression inside is its value
        # (ngspice substitutes those before it reads the expression)
        for m in list(re.finditer(r"\{([^{}]*)\}", expr))[::-1]:
            try:
                val = evaluate_expression(m.group(1), scope_params(scope), scope_funcs(scope))
            except ValueError as exc:
                self.err(c, f"expression: {exc}", "a braced part must be a .param "
                         "expression", name)
            expr = expr[:m.start()] + f"({val!r})" + expr[m.end():]
        try:
            tree = behav.parse(expr, scope_params(scope), net)
        except behav.ExprError as exc:
            self.err(c, f"expression: {exc}", "use v(node), numbers, .param names and "
                     "the functions " + ", ".join(behav.FUNCTIONS), name)
        canon = behav.to_text(tree)
        a, b = net(pnode), net(nnode)
        if not voltage:
            self.add(Element(name, "BEHAV", (a, b), 0.0, {"EXPR": canon, "SIGN": 1.0},
                             c.where), c)
            return
        x = f"{name.lower()}#x"
        self.add(Element(name, "BEHAV", (x, GROUND), 0.0, {"EXPR": canon, "SIGN": -1.0},
                         c.where), c)
        self.add(Element(f"{name}.R", "R", (x, GROUND), 1.0, {}, c.where), c)
        self.add(Element(f"{name}.E", "E", (a, b, x, GROUND), 1.0, {}, c.where), c)

    def switch(self, c, letter, name, net, scope, prefix):
        """``S n+ n- nc+ nc- MODEL [ON|OFF]`` (``.model SW``: VT, VH, RON,
        ROFF) and ``W n+ n- VCTRL MODEL [ON|OFF]`` (``.model CSW``: IT, IH,
        RON, ROFF), as the ngspice manual's "Switches" chapter has them; a
        W senses its source's current through an H source ``<name>.H`` (of
        1/(|IT| + IH) ohm, thresholds scaled alike) into the internal node
        ``<name>#i``."""
        pos, kv = self.kv(c.tokens[1:], c)
        nn = 4 if letter == "S" else 3
        form = (f"{c.tokens[0]} n+ n- nc+ nc- MODEL [ON|OFF]" if letter == "S" else
                f"{c.tokens[0]} n+ n- VCTRL MODEL [ON|OFF]")
        state = 0.0
        if len(pos) == nn + 2 and pos[-1].lower() in ("on", "off"):
            state = 1.0 if pos[-1].lower() == "on" else 0.0
            pos = pos[:-1]
        if len(pos) != nn + 1 or kv:
            self.err(c, "needs its nodes, " + ("the controlling V source, " if letter == "W"
                                               else "") + "a model and ON or OFF", form, name)
        want = "SW" if letter == "S" else "CSW"
        model = self.model(pos[nn], c, scope, name)
        if model is None:
            self.err(c, f"model '{pos[nn]}' is not defined",
                     f"add a .model {pos[nn]} {want}(VT=... VH=... RON=... ROFF=...)", name)
        if model.type.upper() != want:
            self.err(c, f"model '{model.name}' is of type {model.type}, a {letter} switch "
                        f"needs a {want} model", part=name)
        names = {"VT": "VT", "VH": "VH", "RON": "RON", "ROFF": "ROFF"} if letter == "S" \
            else {"IT": "VT", "IH": "VH", "RON": "RON", "ROFF": "ROFF"}
        params: dict[str, Any] = {"STATE": state, "MODEL": model.name}
        where = f"{model.where.file}:{model.where.line}: " if model.where else ""
        for k, v in model.params.items():
            if k in names:
                params[names[k]] = v
            else:
                self.warn(f"{where}model {model.name}: {k} is not simulated and is ignored")
        if params.get("VH", 0.0) < 0:
            self.err(c, f"model '{model.name}': a negative hysteresis is not supported",
                     "give VH (IH) >= 0", name)
        self.element_models[name] = model.name
        a, b = net(pos[0]), net(pos[1])
        if letter == "S":
            self.add(Element(name, "SW", (a, b, net(pos[2]), net(pos[3])), 0.0, params,
                             c.where), c)
            return
        own = pos[2][2:] if len(pos[2]) > 2 and pos[2][1] == "." else pos[2]
        if own[:1].upper() != "V":
            self.err(c, f"'{pos[2]}' is not a voltage source: the current through a V "
                        "source controls it", form, name)
        ctl = (prefix + "." if prefix else "") + own.upper()
        x = f"{name.lower()}#i"
        # the transresistance scales the thresholds to about a volt, so the
        # sensed voltage moves well above the kernel's bypass step
        span = abs(params.get("VT", 0.0)) + params.get("VH", 0.0)
        k = 1.0 / span if span > 0 else 1e3
        params["VT"] = params.get("VT", 0.0) * k
        params["VH"] = params.get("VH", 0.0) * k
        self.add(Element(f"{name}.H", "H", (x, GROUND), k, {"CONTROL": ctl}, c.where), c)
        self.add(Element(name, "SW", (a, b, x, GROUND), 0.0, params, c.where), c)

    def current_controlled(self, c, letter, name, net, scope, prefix):
        """F (current gain) and H (transresistance), linear form: ``F1 out+
        out- VSENSE gain`` (or linear POLY); the controlling V source is named
        as the card names it, in the same subcircuit instance."""
        pos, kv = self.kv(c.tokens[1:], c)
        form = f"{c.tokens[0]} out+ out- VNAME {'gain' if letter == 'F' else 'ohms'}"
        if any(p.lower() in ("value", "table") for p in pos) or kv:
            self.err(c, "only the linear form and linear POLY are supported", form, name)

        def control(tok: str) -> str:
            own = tok[2:] if len(tok) > 2 and tok[1] == "." else tok
            if own[:1].upper() != "V":
                self.err(c, f"'{tok}' is not a voltage source: the current through a V "
                            "source controls it", form, name)
            return (prefix + "." if prefix else "") + own.upper()

        if len(pos) > 2 and pos[2].lower() == "poly":
            ctrls, coef = self.poly(c, pos, 1, name, scope, form)
            self.expand_poly(c, letter, name, net(pos[0]), net(pos[1]),
                             [control(t) for (t,) in ctrls], coef)
            return
        if len(pos) != 4:
            self.err(c, "needs two nodes, the controlling V source and a value", form, name)
        ctl = control(pos[2])
        g = self.value(pos[3], c, scope, "gain" if letter == "F" else "transresistance", name)
        self.add(Element(name, letter, (net(pos[0]), net(pos[1])), g, {"CONTROL": ctl},
                         c.where), c)

    def poly(self, c, pos, per, name, scope, form):
        """Controls and coefficients of a linear ``POLY(n)`` source: n
        controls (node pairs, or V sources), then p0 p1 ... pn; terms of
        higher degree must be zero.  A one-dimensional POLY with a single
        coefficient means p1, as the SPICE2 user's guide has it (from memory;
        ngspice-39 reads that coefficient as p0)."""
        if len(pos) < 4:
            self.err(c, "POLY needs its dimension: POLY(n)", form, name)
        try:
            nd = int(self.value(pos[3], c, scope, "POLY dimension", name))
        except (TypeError, ValueError):
            nd = 0
        if nd < 1:
            self.err(c, f"POLY dimension '{pos[3]}' is not a whole number >= 1", form, name)
        body = pos[4:]
        if len(body) < nd * per + 1:
            self.err(c, f"POLY({nd}) needs {nd} control(s) and its coefficients", form, name)
        ctrls = [tuple(body[k * per:(k + 1) * per]) for k in range(nd)]
        coef = [self.value(t, c, scope, "POLY coefficient", name) for t in body[nd * per:]]
        if nd == 1 and len(coef) == 1:
            coef = [0.0, coef[0]]
        coef += [0.0] * (nd + 1 - len(coef))
        if any(x != 0.0 for x in coef[nd + 1:]):
            self.err(c, "POLY terms above the first degree are not supported (a "
                        "nonlinear controlled source)", "keep p0 and the linear "
                        "coefficients; model the nonlinearity with devices", name)
        return ctrls, coef[:nd + 1]

    def expand_poly(self, c, letter, name, pos_net, neg_net, ctrls, coef):
        """A linear POLY source as the sum of plain ones: E and H in series
        (internal nodes ``<name>#pK``), G and F in parallel; the constant p0 as
        a V (E, H) or I (G, F) source.  Element ``<name>.P<k>`` carries p_k."""
        series = letter in "EH"
        parts = [(k + 1, ctrl, g) for k, (ctrl, g) in enumerate(zip(ctrls, coef[1:]))
                 if g != 0.0]
        if coef[0] != 0.0 or not parts:
            parts.append((0, None, coef[0]))
        node = pos_net
        for j, (k, ctrl, g) in enumerate(parts):
            last = j == len(parts) - 1
            nxt = neg_net if (last or not series) else f"{name.lower()}#p{k}"
            a, b = (node, nxt) if series else (pos_net, neg_net)
            el_name = f"{name}.P{k}"
            if ctrl is None:
                self.add(Element(el_name, "V" if series else "I", (a, b), g, {}, c.where), c)
            elif letter in "EG":
                self.add(Element(el_name, letter, (a, b, ctrl[0], ctrl[1]), g, {},
                                 c.where), c)
            else:
                self.add(Element(el_name, letter, (a, b), g, {"CONTROL": ctrl}, c.where), c)
            node = nxt

    def device(self, c, letter, name, net, scope):
        pos, kv = self.kv(c.tokens[1:], c)
        dev = _registry().DEVICES[_registry().LETTERS[letter]]
        nn = len(dev.terminals)
        want = " or ".join(dev.model_types)
        if len(pos) < nn + 1:
            self.err(c, f"needs {nn} nodes and a model name",
                     f"{c.tokens[0]} " + " ".join(["node"] * nn) + " MODEL", name)
        mi = nn
        model = self.model(pos[mi], c, scope, name)
        if model is None and letter == "Q" and len(pos) > nn + 1:
            model = self.model(pos[nn + 1], c, scope, name)
            if model is not None:
                mi = nn + 1
                self.warn(f"{c.file}:{c.line}: {name}: substrate node "
                          f"'{pos[nn]}' is ignored")
        if model is None:
            self.err(c, f"model '{pos[mi]}' is not defined",
                     f"add a .model {pos[mi]} {want.split()[0]}(...) card or use "
                     "a model of the parts library", name)
        mtype = model.type.upper()
        kind = MODEL_KIND.get(mtype)
        if kind != dev.kind:
            self.err(c, f"model '{model.name}' is of type {mtype}, a {letter} "
                     f"element needs {want}", part=name)
        extra = pos[mi + 1:]
        off = False
        for tok in extra:
            if tok.lower() == "off":
                if not dev.takes_off:
                    self.warn(f"{c.file}:{c.line}: {name}: OFF is ignored for a {dev.title}")
                off = True
            else:
                self.value(tok, c, scope, "area factor", name)
                self.warn(f"{c.file}:{c.line}: {name}: area factor {tok} is ignored")
        inst: dict[str, float] = {}
        for k, tok in kv.items():
            if k in dev.instance:
                inst[k] = self.value(tok, c, scope, k, name)
            else:
                self.warn(f"{c.file}:{c.line}: {name}: instance parameter {k} is ignored")
        params = self.device_params(model, kind)
        params.update(inst)
        if dev.typed:
            params["TYPE"] = mtype
        params["MODEL"] = model.name
        if off and dev.takes_off:
            params["OFF"] = 1.0
        self.element_models[name] = model.name
        self.add(Element(name, dev.kind, tuple(net(p) for p in pos[:nn]), 0.0,
                         params, c.where), c)

    def device_params(self, model: SpiceModel, kind: str) -> dict[str, Any]:
        dev = _registry().DEVICES[kind]
        sim = _simulated(kind)
        ign = dev.ignored
        alias = dev.aliases
        out: dict[str, Any] = {}
        where = f"{model.where.file}:{model.where.line}: " if model.where else ""
        for k, v in model.params.items():
            key = alias.get(k, k)
            if key in sim:
                out[key] = v
            elif key in ("TYPE", "LEVEL", "MFG"):
                if key == "LEVEL" and v != 1:
                    self.warn(f"{where}model {model.name}: LEVEL={v:g} is read "
                              "as the basic level-1 model")
            elif key in _NOISE_ONLY and key in ign:
                # kept on the element for the noise analysis and live noise
                # (solderless/engine/solver/noise.py); a plain render ignores it
                out[key] = v
                if key in NOISE_ONLY:
                    self.warn(f"{where}model {model.name}: {k} ({ign[key]}) acts only "
                              "with noise on: solderless hiss, or render/play --hiss")
                else:
                    self.warn(f"{where}model {model.name}: {k} is not simulated and is "
                              f"ignored; it affects the {ign[key]}; only noise (solderless "
                              "hiss, render/play --hiss) reads it, for flicker noise")
            elif key in ign:
                self.warn(f"{where}model {model.name}: {k} is not simulated and is "
                          f"ignored; it affects the {ign[key]}")
            elif key in _STANDARD[kind] or k in _STANDARD[kind]:
                self.warn(f"{where}model {model.name}: {k} is not simulated "
                          "and is ignored")
            else:
                self.warn(f"{where}model {model.name}: unknown parameter {k} "
                          "is ignored")
        return out

    def instance(self, c, name, net, scope, chain):
        pos, kv = self.kv(c.tokens[1:], c)
        if len(pos) < 1:
            self.err(c, "needs nodes and a subcircuit name", "X1 in out NAME", name)
        sname = pos[-1].upper()
        nodes = pos[:-1]
        sub = scope.find_subckt(sname)
        if sub is None:
            lm = _library_find(self.library, pos[-1]) if self.library is not None else None
            if lm is not None and lm.kind.upper() in ("OPAMP", "OTA"):
                if len(nodes) != 5:
                    order = ("inp inn out vcc vee" if lm.kind.upper() == "OPAMP"
                             else "inp inn out abc vee")
                    self.err(c, f"{lm.kind.upper()} '{lm.name}' needs 5 nodes "
                             f"({order})", part=name)
                params = (lm.element_params() if hasattr(lm, "element_params")
                          else dict(lm.params))
                for k, tok in kv.items():
                    params[k] = self.value(tok, c, scope, k, name)
                params["MODEL"] = lm.name
                self.element_models[name] = lm.name
                self.add(Element(name, lm.kind.upper(), tuple(net(n) for n in nodes),
                                 0.0, params, c.where), c)
                return
            self.err(c, f"subcircuit '{pos[-1]}' is not defined",
                     "add its .subckt ... .ends block or .include the file "
                     "that has it", name)
        if sname in chain:
            self.err(c, f"subcircuit '{sname}' uses itself", part=name)
        if len(nodes) != len(sub.ports):
            self.err(c, f"subcircuit '{sub.name}' has {len(sub.ports)} ports "
                     f"({' '.join(sub.ports)}), {len(nodes)} nodes given", part=name)
        # parameters: defaults evaluated in the definition's scope, overrides
        # in the caller's scope
        local: dict[str, float] = {}
        for k, tok in sub.defaults.items():
            if k.upper() in kv:
                continue
            local[k] = self.value(tok, _Card_at(sub.where, f".subckt {sub.name}"),
                                  _Scope(dict(local), {}, {}, scope),
                                  f"parameter {k}", name)
        for k, tok in kv.items():
            if k.lower() not in sub.defaults:
                self.err(c, f"subcircuit '{sub.name}' has no parameter '{k}'",
                         "declared: " + (", ".join(sub.defaults) or "none"), name)
            local[k.lower()] = self.value(tok, c, scope, f"parameter {k}", name)
        netmap = {p: net(n) for p, n in zip(sub.ports, nodes)}
        inner_scope, cards = self.make_scope(sub.body, sub.subckts, local, scope)
        self.flatten(cards, inner_scope, name, netmap, chain + (sname,))


def _Card_at(where: Where | None, text: str) -> Card:
    return Card(text, where or Where(), [])


def _visible(scope: _Scope, attr: str) -> ChainMap:
    """``attr`` (params or funcs) of ``scope`` and its parents as one
    read-only view, inner ones winning (a view, not a copy: building a merged
    dict for every value made reading quadratic in the number of
    parameters)."""
    chain = []
    s: _Scope | None = scope
    while s is not None:
        chain.append(getattr(s, attr))
        s = s.parent
    return ChainMap(*chain)


def scope_params(scope: _Scope) -> dict[str, float]:
    """All parameters visible in ``scope`` (inner ones win)."""
    return _visible(scope, "params")


def scope_funcs(scope: _Scope) -> dict[str, tuple[list[str], str]]:
    """All ``.func`` functions visible in ``scope`` (inner ones win)."""
    return _visible(scope, "funcs")


def _is_number_like(tok: str) -> bool:
    return bool(tok) and (tok[0] in "{+-.0123456789")


def _wave_at_zero(wave) -> float:
    """The DC value a source without one takes: its waveform at t = 0."""
    if not wave:
        return 0.0
    kind, vals = wave
    if kind == "SIN":
        return vals[0]
    if kind == "PULSE":
        return vals[0]
    return vals[1]  # PWL: first value


def _library_find(library, name: str):
    if library is None:
        return None
    find = getattr(library, "find", None)
    if find is not None:
        return find(name)
    try:
        return library.get(name)
    except Exception:
        return None


# --------------------------------------------------------------------------
# Public entry points

def parse_netlist(text: str, *, file: str = "<text>", in_source: str = "VIN",
                  out_node: str = "out", library=None) -> Netlist:
    """Read a SPICE-subset netlist from ``text`` and flatten it.

    The first line is the title (as in SPICE). ``in_source`` names the V
    source the audio input drives (case-insensitive; ignored if absent);
    ``out_node`` is the output net, measured against ground. ``library`` (a
    :class:`solderless.engine.parts.PartsLibrary`) supplies models the netlist uses but
    does not define. Raises :class:`solderless.engine.errors.DesignError` naming the
    file, line and card for anything it cannot run.

    >>> nl = parse_netlist("divider\\nVIN in 0 DC 0\\nR1 in out 10k\\n"
    ...                    "R2 out 0 10k\\n.end\\n")
    >>> [e.name for e in nl.circuit.elements]
    ['VIN', 'R1', 'R2']
    """
    ignored: list = []
    warnings: list[str] = []
    if len(text) > limits.MAX_TEXT_BYTES:
        raise DesignError(f"the netlist is {len(text)} characters; the limit is "
                          f"{limits.MAX_TEXT_BYTES}", file=file)
    title, cards = _cards(text, file, has_title=True, ignored=ignored)
    for c in cards:
        if c.tokens and c.tokens[0].lower() == ".title":
            # '.title' replaces the first line as the title (as in ngspice)
            title = c.text.split(None, 1)[1].strip() if len(c.text.split(None, 1)) > 1 else ""
            break
    if title and re.match(r"^[RCLVIEGDQJX]\w*\s+\S+\s+\S+", title, re.I) and \
            len(title.split()) in (4, 5):
        warnings.append(f"{file}:1: the first line '{title}' is read as the "
                        "title, as SPICE does; add a title line if it is a part")
    top, defs = _split_defs(cards)
    reader = _Reader(library, ignored, warnings)
    scope, rest = reader.make_scope(top, defs, {}, None)
    reader.flatten(rest, scope, "", {})
    circuit = Circuit(reader.elements, title=title, where=Where(file, 1),
                      temperature=reader.temperature, nodeset=dict(reader.nodeset),
                      ic=dict(reader.ic))
    if reader.tnom is not None:
        # '.options tnom=': the nominal temperature of models that give none
        for el in circuit.elements:
            dev = _registry().DEVICES.get(el.kind)
            if dev is not None and "TNOM" in dev.params and "TNOM" not in el.params:
                el.params["TNOM"] = reader.tnom
    for what, table in (("ic", circuit.ic), ("nodeset", circuit.nodeset)):
        for n in table:
            if n not in circuit.nets():
                reader.err(_Card_at(Where(file, None), f".{what}"),
                           f".{what}: no net named '{n}'", part=f".{what}")
    names = {e.name.upper(): e.name for e in reader.elements}
    src = names.get(in_source.upper()) if in_source else None
    if src is not None and circuit.element(src).kind == "V":
        circuit.input_source = src
    out = canonical_net(out_node.lower()) if out_node else "out"
    circuit.output = (out, GROUND)
    if out != GROUND and out not in circuit.nets():
        warnings.append(f"{file}: output net '{out}' does not exist in the "
                        "netlist; name the output net or pass out_node")
    models = {}
    for name, c in scope.models.items():
        models[name] = reader.model(name, c, scope, "")
    ignored.sort(key=lambda t: (t[0] is None, t[0] or 0))
    return Netlist(title, circuit, models, dict(scope.subckts),
                   dict(scope.params), ignored, warnings,
                   reader.element_models, library)


def load_netlist(path, *, in_source: str = "VIN", out_node: str = "out",
                 library=None) -> Netlist:
    """Read a netlist file; see :func:`parse_netlist`."""
    path = os.fspath(path)
    return parse_netlist(_read_file(path, None), file=path, in_source=in_source,
                         out_node=out_node, library=library)


@dataclass
class SubcktStage:
    """A ``.subckt`` offered as a design stage: its ports, its parameters
    with their defaults, and :meth:`instantiate` producing flat elements."""
    name: str
    ports: list[str]
    defaults: dict[str, str]
    netlist: Netlist

    def instantiate(self, instance: str, nets: dict[str, str] | list[str],
                    params: dict[str, Any] | None = None) -> list[Element]:
        """Elements of one instance; ``nets`` maps each port to an outer net
        (or lists them in port order); element names are ``INSTANCE.NAME``."""
        if isinstance(nets, dict):
            missing = [p for p in self.ports if p not in nets]
            if missing:
                raise DesignError(f"subcircuit '{self.name}': ports "
                                  f"{', '.join(missing)} are not connected",
                                  part=instance,
                                  hint="connect every port: " + " ".join(self.ports))
            nodes = [nets[p] for p in self.ports]
        else:
            nodes = list(nets)
        sub = self.netlist.subckts[self.name]
        text_params = " ".join(f"{k}={_fmt(float(v)) if not isinstance(v, str) else v}"
                               for k, v in (params or {}).items())
        card_text = f"{instance} {' '.join(nodes)} {self.name} {text_params}".strip()
        where = sub.where or Where()
        card = Card(card_text, where, _tokenize(card_text, where))
        reader = _Reader(self.netlist.library, [], self.netlist.warnings)
        scope, _ = reader.make_scope([], self.netlist.subckts,
                                     dict(self.netlist.params), None)
        # top-level models of the netlist are visible to the instance
        scope.resolved.update(self.netlist.models)
        reader.flatten([card], scope, "", {})
        return reader.elements


def netlist_subckt_as_stage(netlist: Netlist, name: str) -> SubcktStage:
    """Expose the ``.subckt`` ``name`` of ``netlist`` for use as a stage."""
    key = name.upper()
    if key not in netlist.subckts:
        import difflib
        close = difflib.get_close_matches(key, list(netlist.subckts), n=3)
        raise DesignError(f"the netlist has no subcircuit '{name}'",
                          hint=("did you mean " + ", ".join(close) + "?") if close
                          else "defined: " + (", ".join(netlist.subckts) or "none"))
    s = netlist.subckts[key]
    return SubcktStage(s.name, list(s.ports), dict(s.defaults), netlist)


# --------------------------------------------------------------------------
# Writer

def _fmt(x: float) -> str:
    """A float as SPICE reads it back exactly."""
    if math.isinf(x):
        return "1e99" if x > 0 else "-1e99"
    r = repr(float(x))
    return r[:-2] if r.endswith(".0") else r


_NAME_OK = re.compile(r"^[A-Za-z0-9_.#]+$")


def _spice_name(el: Element) -> str:
    """SPICE name of an element: its own name when that starts with the
    kind letter, else ``<letter>.<name>`` (the form ngspice gives flattened
    elements, and which :func:`parse_netlist` reads back as ``<name>``)."""
    dev = _registry().DEVICES.get(el.kind)
    letter = dev.letter if dev is not None and dev.letter else el.kind[0]
    name = re.sub(r"[^A-Za-z0-9_.#]", "_", el.name)
    if name[:1].upper() == letter and name[1:2] != ".":
        return name.upper()
    return (letter + "." + name).upper()


#: Net names ngspice reads as they are (checked with ngspice-39 in batch mode).
_NET_OK = re.compile(r"^[A-Za-z0-9_.#/]+$")


def _instance_name(el: Element) -> str:
    """X card name of a macromodel element (``X.<name>`` unless it starts with X)."""
    name = re.sub(r"[^A-Za-z0-9_.#]", "_", el.name)
    if name[:1].upper() == "X" and name[1:2] != ".":
        return name.upper()
    return ("X." + name).upper()


def _lexp_text(x: str) -> str:
    """``exp(x)`` continued linearly above e^80, as solderless/engine/devices/_common.lexp."""
    return f"exp(min({x}, 80))*(1 + max({x} - 80, 0))"


def _macromodel_subckt(el: Element, temperature, subckts: dict) -> str:
    """Name of the subcircuit that reproduces an OTA or OPAMP element's law,
    adding its text to ``subckts`` (keyed by kind and parameters) if new.

    OTA (solderless/engine/devices/ota.py), pins inp inn out abc vee: the control
    junction(s) as one ngspice diode whose N times ngspice's thermal voltage
    is JUNCTIONS*N*VT (the same Shockley law, reverse approximation and GMIN
    as the engine, with ngspice's junction limiting for convergence); the
    output current
    ``max(Ij, 0)*tanh(Vd/(2VT))*s(Vo)`` as a B source, Ij recomputed from the
    control voltage with the engine's exponential, s the same soft compliance
    (the side chosen by the sign of Vd); ROUT and RIN as resistors.
    OPAMP (solderless/engine/devices/opamp.py), pins inp inn out vcc vee: the same
    stamps (G into an internal node ``p`` loaded by RP and CP, a G/R pair as
    the output behind ROUT, RIN) and the two rail clamps as B sources with the
    engine's limited exponential. The one difference: the engine integrates
    CP with backward Euler, ngspice with its own method (trapezoidal here).
    """
    from solderless.engine.devices import opamp, ota
    from solderless.engine.devices._common import VT, read_params
    if el.kind == "OTA":
        p = read_params(el, ota.DEFAULTS, positive=("IS", "N", "VSOFT", "ROUT", "RIN"))
    else:
        p = read_params(el, opamp.DEFAULTS, positive=("A0", "GBW", "ROUT", "RIN", "VSOFT", "RP"),
                        nonneg=("VHR",))
    key = (el.kind, tuple(sorted(p.items())), temperature)
    if key in subckts:
        return subckts[key][0]
    base = re.sub(r"[^a-z0-9_]", "_", str((el.params or {}).get("MODEL") or el.kind).lower())
    name = base
    k = 1
    while name in {v[0] for v in subckts.values()}:
        k += 1
        name = f"{base}_{k}"
    F = _fmt
    if el.kind == "OTA":
        if p["JUNCTIONS"] not in (1.0, 2.0):
            ota.layout(el)      # raises the device's own error
        vte = p["JUNCTIONS"] * p["N"] * VT
        x = f"v(abc, vee)*{F(1.0 / vte)}"
        vd = "v(inp, inn)"
        vo = "v(out, vee)"
        rs = F(1.0 / p["VSOFT"])
        ij = f"max({F(p['IS'])}*({_lexp_text(x)} - 1), 0)"
        # the control junction as an ngspice diode (its junction limiting
        # makes the operating point converge where a B source's bare
        # exponential does not): the same Shockley law, reverse approximation
        # and GMIN as solderless/engine/devices/_common.junction; N is set so that N
        # times ngspice-39's thermal voltage (its constants, CODATA 2014, at
        # the circuit temperature) is the engine's JUNCTIONS*N*VT, and EG =
        # XTI = 0 keep IS from following the temperature, as the engine's
        # OTA law does not
        tk = 273.15 + (27.0 if temperature is None else float(temperature))
        vt_ng = 1.38064852e-23 * tk / 1.6021766208e-19
        dmodel = f"IS={F(p['IS'])} N={F(vte / vt_ng)}"
        if temperature is not None:
            dmodel += " EG=0 XTI=0"
        s = (f"({vd} >= 0 ? 0.5*(1 + tanh(({F(p['VHI'])} - {vo})*{rs})) : "
             f"0.5*(1 + tanh(({vo} - {F(p['VLO'])})*{rs})))")
        body = [f".subckt {name} inp inn out abc vee",
                "* bipolar OTA: Iout = Iabc*tanh(Vd/(2VT))*s(Vo) (Solderless OTA law)",
                f"D1 abc vee D_{name}",
                f"B1 vee out I = {ij}*tanh({vd}*{F(1.0 / (2.0 * VT))})*{s}"]
        if math.isfinite(p["ROUT"]):
            body.append(f"R1 out vee {F(p['ROUT'])}")
        if math.isfinite(p["RIN"]):
            body.append(f"R2 inp inn {F(p['RIN'])}")
        body += [f".model D_{name} D({dmodel})", ".ends"]
    else:
        gm1 = p["A0"] / p["RP"]
        cp = p["A0"] / (2.0 * math.pi * p["GBW"] * p["RP"])
        i0 = gm1 * 1e-4
        rv = F(1.0 / p["VSOFT"])
        x1 = f"(v(p, vcc) + {F(p['VHR'])})*{rv}"
        x2 = f"(v(vee, p) + {F(p['VHR'])})*{rv}"
        body = [f".subckt {name} inp inn out vcc vee",
                "* op-amp: single pole (A0, GBW), soft rail clamps (Solderless OPAMP law)",
                f"G1 0 p inp inn {F(gm1)}",
                f"R1 p 0 {F(p['RP'])}",
                f"C1 p 0 {F(cp)}",
                f"G2 0 out p 0 {F(1.0 / p['ROUT'])}",
                f"R2 out 0 {F(p['ROUT'])}"]
        if math.isfinite(p["RIN"]):
            body.append(f"R3 inp inn {F(p['RIN'])}")
        body += [f"B1 p vcc I = {F(i0)}*{_lexp_text(x1)}",
                 f"B2 vee p I = {F(i0)}*{_lexp_text(x2)}",
                 ".ends"]
    subckts[key] = (name, body)
    return name


#: element kinds the writer has its own card for; the devices with a
#: ``.model`` card (the registry's letters) are written from their description
_WRITTEN_KINDS = {"R", "C", "L", "V", "I", "E", "G", "F", "H", "BEHAV", "SW"}


def circuit_to_netlist(circuit: Circuit, title: str = "") -> str:
    """Write ``circuit`` as a netlist ngspice runs (ends with ``.end``).

    Every D, Q and J element gets its own ``.model`` card with the parameters
    Solderless simulates. OPAMP and OTA macromodels become X instances of a
    subcircuit written from their laws (:func:`_macromodel_subckt`), one per
    distinct parameter set. Elements whose name is not a
    valid SPICE name for their kind are renamed (``R_...``) and listed in a
    comment; so are nets whose names ngspice would misread (``Net-(R1-Pad2)``
    gets a plain name and a ``* net NAME is 'Net-(R1-Pad2)'`` comment).
    """
    lines = [(title or circuit.title or "circuit").splitlines()[0] or "circuit"]
    seen_nets: dict[str, str] = {}
    used_names: dict[str, str] = {}
    models: list[str] = []
    subckts: dict[tuple, tuple[str, list[str]]] = {}

    renamed: dict[str, str] = {}

    def node(n: str) -> str:
        if n == GROUND:
            return "0"
        if n.lower() in ("gnd", "ground") or not n or any(c.isspace() for c in n):
            raise DesignError(f"net '{n}' cannot be written to SPICE",
                              hint="use letters, digits, '_' and '.' in net names")
        low = n.lower()
        if seen_nets.setdefault(low, n) != n:
            raise DesignError(f"nets '{seen_nets[low]}' and '{n}' differ only by "
                              "case, which SPICE does not distinguish",
                              hint="rename one of them")
        if _NET_OK.match(low):
            return low
        # an exported name such as 'net-(q1-b)': ngspice-39 drops or
        # misreads the parentheses, so it is written under a plain name
        if low not in renamed:
            safe = re.sub(r"[^a-z0-9_.#/]", "_", low).strip("_") or "net"
            k = 1
            base = safe
            while safe in renamed.values() or safe in seen_nets:
                k += 1
                safe = f"{base}_{k}"
            renamed[low] = safe
            lines.append(f"* net {safe} is '{n}'")
        return renamed[low]

    # a voltage-output behavioural source (BEHAV into '<name>#x' across
    # '<name>.R', copied out by '<name>.E') is written back as one B V= card
    by_name = {e.name: e for e in circuit.elements}
    bvolt: dict[str, Element] = {}
    for el in circuit.elements:
        r, e = by_name.get(f"{el.name}.R"), by_name.get(f"{el.name}.E")
        if el.kind == "BEHAV" and float((el.params or {}).get("SIGN", 1.0)) < 0 \
                and r is not None and e is not None and r.kind == "R" and r.value == 1.0 \
                and e.kind == "E" and e.value == 1.0 and tuple(e.nodes[2:]) == el.nodes \
                and tuple(r.nodes) == el.nodes:
            bvolt[el.name] = e
    skip = {f"{n}.{k}" for n in bvolt for k in ("R", "E")}

    for el in circuit.elements:
        w = el.where
        f, ln = (w.file, w.line) if w else (None, None)
        if el.name in skip:
            continue
        if el.kind in ("OPAMP", "OTA"):
            sname = _instance_name(el)
            if sname in used_names:
                raise DesignError(f"'{el.name}' and '{used_names[sname]}' would both "
                                  f"be written as {sname}", file=f, line=ln,
                                  part=el.name, hint="rename one of them")
            used_names[sname] = el.name
            if sname != f"X.{el.name}".upper():
                lines.append(f"* {sname} is '{el.name}'")
            sub = _macromodel_subckt(el, circuit.temperature, subckts)
            lines.append(f"{sname} " + " ".join(node(n) for n in el.nodes) + f" {sub}")
            continue
        if el.kind not in _WRITTEN_KINDS and el.kind not in _registry().LETTERS.values():
            raise DesignError(f"element kind '{el.kind}' cannot be written as SPICE",
                              file=f, line=ln, part=el.name)
        sname = _spice_name(el)
        if sname in used_names:
            raise DesignError(f"'{el.name}' and '{used_names[sname]}' would both "
                              f"be written as {sname}", file=f, line=ln,
                              part=el.name, hint="rename one of them")
        used_names[sname] = el.name
        if sname not in (el.name.upper(), f"{el.kind[0]}.{el.name}".upper()):
            lines.append(f"* {sname} is '{el.name}'")
        nodes = " ".join(node(n) for n in (bvolt[el.name].nodes[:2] if el.name in bvolt
                                          else el.nodes))
        p = el.params or {}
        if el.kind in ("R", "C", "L"):
            s = f"{sname} {nodes} {_fmt(el.value)}"
            if el.kind in ("C", "L") and "IC" in p:
                s += f" IC={_fmt(p['IC'])}"
        elif el.kind in ("V", "I"):
            s = f"{sname} {nodes} DC {_fmt(el.value)}"
            if "AC" in p:
                s += f" AC {_fmt(p['AC'])}"
                if "ACPHASE" in p:
                    s += f" {_fmt(p['ACPHASE'])}"
            wave = p.get("wave")
            if wave:
                kind, vals = wave
                s += f" {kind}(" + " ".join(_fmt(v) for v in vals) + ")"
        elif el.kind in ("E", "G"):
            s = f"{sname} {nodes} {_fmt(el.value)}"
        elif el.kind == "SW":
            mname = "M_" + sname.replace(".", "_")
            mp = " ".join(f"{k}={_fmt(float(p[k]))}" for k in ("VT", "VH", "RON", "ROFF")
                          if k in p)
            models.append(f".model {mname} SW({mp})")
            s = f"{sname} {nodes} {mname}" + (" ON" if float(p.get("STATE", 0)) > 0.5 else "")
        elif el.kind == "BEHAV":
            from solderless.engine.devices import behav
            tree = behav.map_nets(behav.parse(str(p.get("EXPR", ""))), node)
            body = behav.to_text(tree, spice=True)
            if tree[0] == "call" and tree[1] == "table" and \
                    float(p.get("SIGN", 1.0)) * (-1.0 if el.name in bvolt else 1.0) > 0:
                # a table as a TABLE card, which ngspice reads its own way
                # (corners rounded: see solderless/engine/devices/behav.py)
                pts = [a[1] for a in tree[2][1:]]
                own = sname[2:] if sname[1:2] == "." else sname
                s = (("E." if el.name in bvolt else "G.") + own
                     + f" {nodes} TABLE {{{behav.to_text(tree[2][0], spice=True)}}} = "
                     + " ".join(f"({_fmt(pts[k])}, {_fmt(pts[k + 1])})"
                                for k in range(0, len(pts), 2)))
            elif el.name in bvolt:
                s = f"{sname} {nodes} V = {body}"
            else:
                if float(p.get("SIGN", 1.0)) < 0:
                    body = f"-({body})"
                s = f"{sname} {nodes} I = {body}"
        elif el.kind in ("F", "H"):
            try:
                ctl = circuit.element(str(p.get("CONTROL", "")))
            except KeyError:
                raise DesignError(f"controlling source {p.get('CONTROL')!r} is not in "
                                  "the circuit", file=f, line=ln, part=el.name) from None
            s = f"{sname} {nodes} {_spice_name(ctl)} {_fmt(el.value)}"
        else:
            kind = el.kind
            dev = _registry().DEVICES[kind]
            types = list(dev.model_types)
            mtype = str(p.get("TYPE", "")).upper() if dev.typed else types[0]
            if mtype not in types:
                raise DesignError(f"a {dev.title} needs params['TYPE'] "
                                  + " or ".join(types), file=f, line=ln, part=el.name)
            mname = "M_" + sname.replace(".", "_")
            sim = _simulated(kind)
            inst = dev.instance
            mp = " ".join(f"{k}={_fmt(float(v))}" for k, v in p.items()
                          if k in sim and k not in inst)
            if dev.card_prefix:
                mp = (dev.card_prefix + " " + mp).strip()
            models.append(f".model {mname} {mtype}({mp})")
            s = f"{sname} {nodes} {mname}"
            if p.get("OFF"):
                s += " OFF"
            s += "".join(f" {k}={_fmt(float(p[k]))}" for k in inst if k in p)
        lines.append(s)
    lines.extend(models)
    for body in subckts.values():
        lines.extend(body[1])
    if circuit.temperature is not None:
        lines.append(f".temp {_fmt(float(circuit.temperature))}")
    for what, table in (("nodeset", circuit.nodeset), ("ic", circuit.ic)):
        if table:
            lines.append(f".{what} " + " ".join(f"v({node(n)})={_fmt(float(v))}"
                                                for n, v in table.items()))
    lines.append(".end")
    return "\n".join(lines) + "\n"
