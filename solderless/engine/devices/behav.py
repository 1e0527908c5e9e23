"""Behavioural (arbitrary) current source: I = f(port voltages).

The element ``BEHAV`` with nodes (p, n) draws the current ``SIGN * f(...)``
from p through itself into n, where ``f`` is the expression in
``params['EXPR']``: numbers, ``v(a)``/``v(a, b)`` of the circuit's nets,
``+ - * / ^ **``, comparisons ``< > <= >= == !=``, ``&& || !``, the ternary
``c ? a : b``, and the functions listed in :data:`FUNCTIONS` (as the
ngspice manual's B source chapter defines them, plus ``if(c, a, b)``,
``limit(x, lo, hi)`` and ``table(x, x0, y0, x1, y1 ...)`` in the meaning
op-amp macromodels give them: ``table`` holds its end values, ``pwl``
continues its end segments).  The SPICE reader builds a B source, or an E
or G source with ``VALUE=``/``TABLE``, from it (a voltage output through an
internal node and a unity E source: see ``solderless/engine/formats/spice.py``).

Port 0 is (p, n); every other net pair the expression reads is a port of
its own that draws no current.  The expression is compiled once, at
layout, into a postfix program of float opcodes in the parameter vector,
and :func:`evaluate` runs it with forward-mode derivatives (a value and its
gradient over the ports for every stack entry), so Newton gets the exact
Jacobian row and one compiled kernel serves every expression.  The
evaluation stack lives in the same parameter vector, after the program:
one device, one simulator, one thread at a time, as the kernel runs.

Where ngspice-39 differs (checked with ``ngspice -b``): ``x^y`` and
``pow(x, y)`` are ``|x|^y`` as in ngspice; ``ln``/``log`` are natural
logarithms; outside their domain ``sqrt`` gives 0 and ``ln``/``log10`` the
value at 1e-300 where ngspice stops with an error; ``exp`` continues
linearly above e^80; ngspice-39's B source reads ``limit(x, lo, hi)``
differently from its E ``VALUE=`` form (``limit(3, -2, 2)`` gives -1 in a
B source, 2 in an E source): here it is always the clamp.
"""
from __future__ import annotations

import math
import re

import numpy as np
from solderless.engine.lazyjit import njit  # numba on first need (lazyjit)

from solderless.engine.devices._common import DeviceLayout
from solderless.engine.errors import DesignError
from solderless.engine.devices.registry import DeviceKind

KIND = "BEHAV"
CODE = 9
NPORTS = 1  # at least: the output port; one more per net pair read
DEFAULTS: dict[str, float] = {}

# opcodes (floats in the program)
OP_CONST, OP_VAR = 1, 2
OP_ADD, OP_SUB, OP_MUL, OP_DIV, OP_POW, OP_PWR, OP_MIN, OP_MAX = 10, 11, 12, 13, 14, 15, 16, 17
OP_GT, OP_LT, OP_GE, OP_LE, OP_EQ, OP_NE, OP_AND, OP_OR = 20, 21, 22, 23, 24, 25, 26, 27
OP_NOT, OP_NEG, OP_EXP, OP_LN, OP_LOG10, OP_SQRT, OP_ABS, OP_TANH = 30, 31, 32, 33, 34, 35, 36, 37
OP_SIN, OP_COS, OP_ATAN, OP_U, OP_URAMP, OP_SGN, OP_SINH, OP_COSH, OP_TAN = \
    38, 39, 40, 41, 42, 43, 44, 45, 46
OP_LIMIT, OP_IF, OP_TABLE = 50, 51, 52

_UNARY = {"exp": OP_EXP, "ln": OP_LN, "log": OP_LN, "log10": OP_LOG10, "sqrt": OP_SQRT,
          "abs": OP_ABS, "tanh": OP_TANH, "sin": OP_SIN, "cos": OP_COS, "atan": OP_ATAN,
          "u": OP_U, "uramp": OP_URAMP, "sgn": OP_SGN, "sinh": OP_SINH, "cosh": OP_COSH,
          "tan": OP_TAN}
_BINARY_FN = {"min": OP_MIN, "max": OP_MAX, "pow": OP_POW, "pwr": OP_PWR}
_TERNARY_FN = {"limit": OP_LIMIT, "if": OP_IF, "ternary_fcn": OP_IF}
#: Function names an expression may call.
FUNCTIONS = sorted(set(_UNARY) | set(_BINARY_FN) | set(_TERNARY_FN) | {"table", "pwl"})
_BINOP = {"+": OP_ADD, "-": OP_SUB, "*": OP_MUL, "/": OP_DIV, "^": OP_POW, "**": OP_POW,
          ">": OP_GT, "<": OP_LT, ">=": OP_GE, "<=": OP_LE, "==": OP_EQ, "!=": OP_NE,
          "&&": OP_AND, "||": OP_OR}
# binding power of binary operators (higher binds tighter); ^ is right-associative
_BP = {"||": 1, "&&": 2, "==": 3, "!=": 3, ">": 4, "<": 4, ">=": 4, "<=": 4,
       "+": 5, "-": 5, "*": 6, "/": 6, "^": 8, "**": 8}
_UNARY_BP = 7
#: Deepest expression nesting read (keeps the recursive reader bounded).
MAX_DEPTH = 200

_TOKEN = re.compile(r"\s*(?:(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[a-zA-Z]*)"
                    r"|(?P<name>[A-Za-z_][\w.$]*)"
                    r"|(?P<op>\*\*|>=|<=|==|!=|&&|\|\||[-+*/^<>!?:(),]))")


class ExprError(ValueError):
    """An expression that cannot be read; the message says why."""


def _number(text: str) -> float:
    from solderless.engine.values import parse_value
    try:
        return float(parse_value(text, spice=True))
    except Exception:
        raise ExprError(f"'{text}' is not a number") from None


def parse(text: str, params: dict[str, float] | None = None, net=None):
    """Read an expression into a tree of tuples.

    ``params`` maps lower-case .param names to values; ``net`` maps a node
    name as written to the flat net name (default: unchanged, lower case).
    Trees: ("num", x) | ("v", a, b) | ("neg", t) | ("not", t) |
    ("bin", op, l, r) | ("call", name, [args]) | ("tern", c, a, b).
    """
    params = {k.lower(): float(v) for k, v in (params or {}).items()}
    net = net or (lambda s: s.lower())
    src = text.strip()
    if src[:1] == "{" and src[-1:] == "}":
        src = src[1:-1]
    pos = 0
    toks: list[tuple[str, str]] = []
    while pos < len(src):
        if src[pos:].strip() == "":
            break
        # v(...) and i(...): node names may hold characters no other token has
        m = re.match(r"\s*([vViI])\s*\(([^()]*(?:\([^()]*\)[^()]*)*)\)", src[pos:])
        if m and (not toks or toks[-1][0] != "name"):
            toks.append(("ref", m.group(1).lower() + "\0" + m.group(2)))
            pos += m.end()
            continue
        m = _TOKEN.match(src, pos)
        if not m or m.end() == pos:
            raise ExprError(f"cannot read '{src[pos:].strip()[:20]}' in '{text}'")
        kind = m.lastgroup
        toks.append((kind, m.group(kind)))
        pos = m.end()
    toks.append(("end", ""))
    k = 0

    def peek():
        return toks[k]

    def take():
        nonlocal k
        t = toks[k]
        k += 1
        return t

    def expect(op):
        t = take()
        if t != ("op", op):
            raise ExprError(f"expected '{op}' in '{text}'")

    def expr(depth, rbp=0):
        if depth > MAX_DEPTH:
            raise ExprError(f"'{text[:40]}...' nests too deep")
        left = prefix(depth)
        while True:
            t = peek()
            if t[0] == "op" and t[1] == "?" and rbp == 0:
                take()
                a = expr(depth + 1, 0)
                expect(":")
                b = expr(depth + 1, 0)
                left = ("tern", left, a, b)
                continue
            if t[0] != "op" or t[1] not in _BP or _BP[t[1]] <= rbp:
                return left
            take()
            op = t[1]
            bp = _BP[op]
            right = expr(depth + 1, bp - 1 if op in ("^", "**") else bp)
            left = ("bin", _BINOP[op], left, right)

    def prefix(depth):
        t = take()
        kind, val = t
        if kind == "num":
            return ("num", _number(val))
        if kind == "ref":
            which, inside = val.split("\0")
            if which == "i":
                raise ExprError(f"i({inside}): a branch current in an expression is not "
                                "supported; sense the voltage across a resistor instead")
            nodes = [s.strip() for s in inside.split(",")]
            if len(nodes) not in (1, 2) or not all(nodes):
                raise ExprError(f"v({inside}) needs one or two node names")
            a = net(nodes[0])
            b = net(nodes[1]) if len(nodes) == 2 else "0"
            return ("v", a, b)
        if kind == "op" and val == "(":
            e = expr(depth + 1)
            expect(")")
            return e
        if kind == "op" and val in "-+!":
            e = expr(depth + 1, _UNARY_BP)
            return e if val == "+" else ("neg", e) if val == "-" else ("not", e)
        if kind == "name":
            low = val.lower()
            if peek() == ("op", "("):
                take()
                args = []
                if peek() != ("op", ")"):
                    while True:
                        args.append(expr(depth + 1))
                        if peek() == ("op", ","):
                            take()
                            continue
                        break
                expect(")")
                return _call(low, args, text)
            if low in params:
                return ("num", params[low])
            if low == "pi":
                return ("num", math.pi)
            if low in ("time", "temper", "hertz"):
                raise ExprError(f"'{val}' in an expression is not supported (only node "
                                "voltages and constants)")
            raise ExprError(f"unknown name '{val}' in '{text}' (not a .param)")
        raise ExprError(f"unexpected '{val or 'end'}' in '{text}'")

    tree = expr(0)
    if peek()[0] != "end":
        raise ExprError(f"unexpected '{peek()[1]}' in '{text}'")
    return tree


def _call(name, args, text):
    want = 1 if name in _UNARY else 2 if name in _BINARY_FN else 3 if name in _TERNARY_FN \
        else None
    if name in ("table", "pwl"):
        if len(args) < 3 or len(args) % 2 == 0:
            raise ExprError(f"{name}(x, x0, y0, x1, y1 ...) needs x and value pairs")
        pts = []
        for a in args[1:]:
            if a[0] == "neg" and a[1][0] == "num":
                a = ("num", -a[1][1])
            if a[0] != "num":
                raise ExprError(f"{name}() points must be numbers")
            pts.append(a[1])
        xs = pts[0::2]
        if any(b < a for a, b in zip(xs, xs[1:])):
            raise ExprError(f"{name}() x values must not decrease")
        return ("call", name, [args[0]] + [("num", p) for p in pts])
    if want is None:
        raise ExprError(f"unknown function '{name}' (known: {', '.join(FUNCTIONS)})")
    if len(args) != want:
        raise ExprError(f"{name}() takes {want} argument(s), not {len(args)}")
    return ("call", name, args)


def _fmt(x: float) -> str:
    r = repr(float(x))
    return r[:-2] if r.endswith(".0") else r


_OPTEXT = {v: k for k, v in _BINOP.items() if k != "**"}


def to_text(t, spice: bool = False) -> str:
    """Write a tree back as an expression; ``spice=True`` gives the form
    ngspice-39's B source reads the same way (limit and if as min/max and
    the ternary, table as pwl with flat ends added)."""
    kind = t[0]
    if kind == "num":
        s = _fmt(t[1])
        return f"({s})" if t[1] < 0 else s
    if kind == "v":
        return f"v({t[1]})" if t[2] == "0" else f"v({t[1]},{t[2]})"
    if kind == "neg":
        return f"(-{to_text(t[1], spice)})"
    if kind == "not":
        return f"(!{to_text(t[1], spice)})"
    if kind == "bin":
        return f"({to_text(t[2], spice)} {_OPTEXT[t[1]]} {to_text(t[3], spice)})"
    if kind == "tern":
        return (f"({to_text(t[1], spice)} ? {to_text(t[2], spice)} : "
                f"{to_text(t[3], spice)})")
    name, args = t[1], t[2]
    a = [to_text(x, spice) for x in args]
    if spice and name == "limit":
        return f"min(max({a[0]}, {a[1]}), {a[2]})"
    if spice and name in ("if", "ternary_fcn"):
        return f"({a[0]} != 0 ? {a[1]} : {a[2]})"
    if spice and name == "table":
        pts = [x[1] for x in args[1:]]
        span = max(1.0, pts[-2] - pts[0])
        pts = [pts[0] - 1e6 * span, pts[1]] + pts + [pts[-2] + 1e6 * span, pts[-1]]
        return f"pwl({a[0]}, " + ", ".join(_fmt(p) for p in pts) + ")"
    return f"{name}(" + ", ".join(a) + ")"


def refs(t, out: list | None = None) -> list[tuple[str, str]]:
    """The (a, b) net pairs the tree reads, in order of first use."""
    out = [] if out is None else out
    if t[0] == "v":
        if (t[1], t[2]) not in out:
            out.append((t[1], t[2]))
    elif t[0] in ("neg", "not"):
        refs(t[1], out)
    elif t[0] == "bin":
        refs(t[2], out)
        refs(t[3], out)
    elif t[0] == "tern":
        for x in t[1:]:
            refs(x, out)
    elif t[0] == "call":
        for x in t[2]:
            refs(x, out)
    return out


def compile_program(tree, port_of) -> tuple[list[float], int]:
    """Postfix program and its largest stack depth.  ``port_of((a, b))``
    returns (port index, sign) or None for a pair that is always 0 V."""
    prog: list[float] = []
    depth = [0, 0]

    def push(n=1):
        depth[0] += n
        depth[1] = max(depth[1], depth[0])

    def emit(t):
        kind = t[0]
        if kind == "num":
            prog.extend([OP_CONST, t[1]])
            push()
        elif kind == "v":
            ps = port_of((t[1], t[2]))
            if ps is None:
                prog.extend([OP_CONST, 0.0])
                push()
            else:
                prog.extend([OP_VAR, ps[0]])
                push()
                if ps[1] < 0:
                    prog.append(OP_NEG)
        elif kind in ("neg", "not"):
            emit(t[1])
            prog.append(OP_NEG if kind == "neg" else OP_NOT)
        elif kind == "bin":
            emit(t[2])
            emit(t[3])
            prog.append(t[1])
            push(-1)
        elif kind == "tern":
            for x in t[1:]:
                emit(x)
            prog.append(OP_IF)
            push(-2)
        else:
            name, args = t[1], t[2]
            if name in ("table", "pwl"):
                emit(args[0])
                pts = [x[1] for x in args[1:]]
                n = len(pts) // 2
                prog.extend([OP_TABLE, n, 1.0 if name == "table" else 0.0])
                prog.extend(pts[0::2])
                prog.extend(pts[1::2])
                return
            for x in args:
                emit(x)
            if name in _UNARY:
                prog.append(_UNARY[name])
            elif name in _BINARY_FN:
                prog.append(_BINARY_FN[name])
                push(-1)
            else:
                prog.append(_TERNARY_FN[name])
                push(-2)

    emit(tree)
    return prog, depth[1]


def _err(el, why):
    w = el.where
    raise DesignError(why, file=getattr(w, "file", None), line=getattr(w, "line", None),
                      part=el.name, hint="write the expression with v(node), numbers, "
                                         "+ - * / ^, comparisons, ?: and " +
                                         ", ".join(FUNCTIONS))


# par: 0 ports m, 1 program length, 2 stack offset (from pa), 3 sign, 4.. program,
# then the stack: depth * (m + 1) floats
HEAD = 4


def layout(el) -> DeviceLayout:
    """Compile the expression; ports: (p, n) and each net pair it reads."""
    p = el.params or {}
    text = str(p.get("EXPR", ""))
    try:
        tree = parse(text)
    except ExprError as exc:
        _err(el, f"expression: {exc}")
    pn = (el.nodes[0], el.nodes[1])
    ports = [pn]
    for a, b in refs(tree):
        if a == b or (a, b) in ports or (b, a) in ports:
            continue
        ports.append((a, b))

    def port_of(ab):
        a, b = ab
        if a == b:
            return None
        for k, q in enumerate(ports):
            if q == (a, b):
                return k, 1
            if q == (b, a):
                return k, -1
        return None

    prog, depth = compile_program(tree, port_of)
    m = len(ports)
    sign = float(p.get("SIGN", 1.0))
    par = np.zeros(HEAD + len(prog) + max(depth, 1) * (m + 1))
    par[0], par[1], par[2], par[3] = m, len(prog), HEAD + len(prog), sign
    par[HEAD:HEAD + len(prog)] = prog
    return DeviceLayout(CODE, ports, par, probes={"i": ({0: 1.0}, {})},
                        quiet_step=math.inf)


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def evaluate(par, pa, v, po, i, G):
    """Run the postfix program with forward-mode derivatives: port 0 current
    SIGN*f and its row of the Jacobian; the sensing ports draw nothing."""
    m = int(par[pa])
    nprog = int(par[pa + 1])
    so = pa + int(par[pa + 2])
    w = m + 1
    pc = pa + HEAD
    end = pc + nprog
    sp = 0
    while pc < end:
        op = int(par[pc])
        pc += 1
        if op == OP_CONST or op == OP_VAR:
            b = so + sp * w
            for j in range(1, w):
                par[b + j] = 0.0
            if op == OP_CONST:
                par[b] = par[pc]
            else:
                k = int(par[pc])
                par[b] = v[po + k]
                par[b + 1 + k] = 1.0
            pc += 1
            sp += 1
        elif op < 30:  # binary: a (below) op b (top) -> a
            ba = so + (sp - 2) * w
            bb = ba + w
            x = par[ba]
            y = par[bb]
            da = 0.0  # d result / d a
            db = 0.0  # d result / d b
            if op == OP_ADD:
                r, da, db = x + y, 1.0, 1.0
            elif op == OP_SUB:
                r, da, db = x - y, 1.0, -1.0
            elif op == OP_MUL:
                r, da, db = x * y, y, x
            elif op == OP_DIV:
                if y == 0.0:
                    r, da, db = 0.0, 0.0, 0.0
                else:
                    r = x / y
                    da = 1.0 / y
                    db = -r / y
            elif op == OP_POW or op == OP_PWR:
                ax = abs(x)
                if ax == 0.0:
                    r = 1.0 if y == 0.0 else 0.0
                else:
                    la = math.log(ax)
                    e = y * la
                    if e > 700.0:
                        e = 700.0
                    r = math.exp(e)
                    da = y * r / x
                    db = r * la
                    if op == OP_PWR and x < 0.0:
                        r = -r
                        db = -db
                        da = -da
                    if op == OP_POW:
                        # |x|^y: d/dx = y |x|^y / x for both signs of x
                        pass
            elif op == OP_MIN:
                if x <= y:
                    r, da = x, 1.0
                else:
                    r, db = y, 1.0
            elif op == OP_MAX:
                if x >= y:
                    r, da = x, 1.0
                else:
                    r, db = y, 1.0
            elif op == OP_GT:
                r = 1.0 if x > y else 0.0
            elif op == OP_LT:
                r = 1.0 if x < y else 0.0
            elif op == OP_GE:
                r = 1.0 if x >= y else 0.0
            elif op == OP_LE:
                r = 1.0 if x <= y else 0.0
            elif op == OP_EQ:
                r = 1.0 if x == y else 0.0
            elif op == OP_NE:
                r = 1.0 if x != y else 0.0
            elif op == OP_AND:
                r = 1.0 if (x != 0.0 and y != 0.0) else 0.0
            else:  # OP_OR
                r = 1.0 if (x != 0.0 or y != 0.0) else 0.0
            par[ba] = r
            for j in range(1, w):
                par[ba + j] = da * par[ba + j] + db * par[bb + j]
            sp -= 1
        elif op < 50:  # unary on the top entry
            b = so + (sp - 1) * w
            x = par[b]
            d = 0.0
            if op == OP_NOT:
                r = 1.0 if x == 0.0 else 0.0
            elif op == OP_NEG:
                r, d = -x, -1.0
            elif op == OP_EXP:
                if x > 80.0:
                    e = math.exp(80.0)
                    r, d = e * (1.0 + x - 80.0), e
                else:
                    r = math.exp(x)
                    d = r
            elif op == OP_LN or op == OP_LOG10:
                xx = x if x > 1e-300 else 1e-300
                r = math.log(xx)
                d = 1.0 / xx if x > 1e-300 else 0.0
                if op == OP_LOG10:
                    r *= 0.4342944819032518
                    d *= 0.4342944819032518
            elif op == OP_SQRT:
                if x > 0.0:
                    r = math.sqrt(x)
                    d = 0.5 / r
                else:
                    r = 0.0
            elif op == OP_ABS:
                r = abs(x)
                d = 1.0 if x > 0.0 else -1.0 if x < 0.0 else 0.0
            elif op == OP_TANH:
                r = math.tanh(x)
                d = 1.0 - r * r
            elif op == OP_SIN:
                r, d = math.sin(x), math.cos(x)
            elif op == OP_COS:
                r, d = math.cos(x), -math.sin(x)
            elif op == OP_TAN:
                r = math.tan(x)
                d = 1.0 + r * r
            elif op == OP_ATAN:
                r, d = math.atan(x), 1.0 / (1.0 + x * x)
            elif op == OP_SINH:
                r, d = math.sinh(x), math.cosh(x)
            elif op == OP_COSH:
                r, d = math.cosh(x), math.sinh(x)
            elif op == OP_U:
                r = 1.0 if x > 0.0 else 0.0
            elif op == OP_URAMP:
                r, d = (x, 1.0) if x > 0.0 else (0.0, 0.0)
            else:  # OP_SGN
                r = 1.0 if x > 0.0 else -1.0 if x < 0.0 else 0.0
            par[b] = r
            for j in range(1, w):
                par[b + j] *= d
        elif op == OP_TABLE:
            n = int(par[pc])
            clamp = par[pc + 1] != 0.0
            xs = pc + 2
            ys = xs + n
            pc = ys + n
            b = so + (sp - 1) * w
            x = par[b]
            if n == 1:
                r, d = par[ys], 0.0
            else:
                seg = 0
                while seg < n - 2 and x > par[xs + seg + 1]:
                    seg += 1
                x0, x1 = par[xs + seg], par[xs + seg + 1]
                y0, y1 = par[ys + seg], par[ys + seg + 1]
                if clamp and x <= par[xs]:
                    r, d = par[ys], 0.0
                elif clamp and x >= par[xs + n - 1]:
                    r, d = par[ys + n - 1], 0.0
                elif x1 > x0:
                    d = (y1 - y0) / (x1 - x0)
                    r = y0 + d * (x - x0)
                else:
                    r, d = y1, 0.0
            par[b] = r
            for j in range(1, w):
                par[b + j] *= d
        else:  # three operands: LIMIT (x, lo, hi) or IF (c, a, b)
            b0 = so + (sp - 3) * w
            b1 = b0 + w
            b2 = b1 + w
            pick = b0
            if op == OP_LIMIT:
                x = par[b0]
                if x < par[b1]:
                    pick = b1
                elif x > par[b2]:
                    pick = b2
            else:
                pick = b1 if par[b0] != 0.0 else b2
            if pick != b0:
                for j in range(w):
                    par[b0 + j] = par[pick + j]
            sp -= 2
    b = so
    s = par[pa + 3]
    i[po] = s * par[b]
    for j in range(m):
        G[po, po + j] = s * par[b + 1 + j]
    for k in range(1, m):
        i[po + k] = 0.0
        for j in range(m):
            G[po + k, po + j] = 0.0


@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def limit(par, pa, vn, vo, po):
    """No limiting (the expression's law is the user's)."""
    return


def region(par, v, i) -> str:
    """A behavioural source has no operating region."""
    return "behavioural"


def map_nets(t, fn):
    """The tree with every net name passed through ``fn``."""
    if t[0] == "v":
        a = t[1] if t[1] == "0" else fn(t[1])
        b = t[2] if t[2] == "0" else fn(t[2])
        return ("v", a, b)
    if t[0] in ("neg", "not"):
        return (t[0], map_nets(t[1], fn))
    if t[0] == "bin":
        return ("bin", t[1], map_nets(t[2], fn), map_nets(t[3], fn))
    if t[0] == "tern":
        return ("tern",) + tuple(map_nets(x, fn) for x in t[1:])
    if t[0] == "call":
        return ("call", t[1], [map_nets(x, fn) for x in t[2]])
    return t


# --------------------------------------------------------------------------
# The device's description (solderless.engine.devices.registry)

def report(q, el, par, v, i, G, region):
    return region


DEVICE = DeviceKind(kind=KIND, terminals=("p", "n"), title="behavioural source",
                    probes={"i": "A"}, report=report)
