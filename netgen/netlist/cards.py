"""Reading a rendered netlist for the direct periodic solution (netgen.periodic.estimator).

Cards with their line numbers (continuations joined, control blocks and subcircuit definitions
skipped), ``KEY=value`` parameters, ``.model`` cards, the time functions of independent sources
(DC, PULSE, SIN) and ngspice behavioural expressions, compiled to numpy through a whitelisted
syntax tree. Anything outside this subset raises :class:`Unsupported`, whose message says what
was met; the caller then starts the simulation another way.

Number syntax: SPICE values with scale suffixes (:func:`parse_spice_number`, the one reader every room uses). PULSE
and SIN argument order and defaults: the SPICE3 input language (ngspice manual, independent
sources), from memory of it.
"""

from __future__ import annotations

import ast
import math
import re
from dataclasses import dataclass
from functools import cached_property

import numpy as np

__all__ = ["parse_spice_number", "Unsupported", "Card", "read_cards", "netlist_elements", "card_params", "spice_value", "model_cards",
           "SourceWaveform", "source_waveform", "device_expression", "GROUND"]

_SUFFIX = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "m": 1e-3, "mil": 25.4e-6, "u": 1e-6, "µ": 1e-6,
           "n": 1e-9, "p": 1e-12, "f": 1e-15}
_NUM = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)(meg|mil|[tgkmuµnpf])?([a-zA-Zµ]*)$", re.IGNORECASE)


def parse_spice_number(text: str) -> float:
    """A SPICE value ("50", "2.2n", "1meg", "5e1", "0.2ohm") as a float."""
    m = _NUM.match(text.strip())
    if not m:
        raise ValueError(f"not a SPICE number: {text!r}")
    value = float(m.group(1))
    if m.group(2):
        value *= _SUFFIX[m.group(2).lower()]
    return value

#: the names of the ground node
GROUND = ("0", "gnd")


class Unsupported(Exception):
    """The netlist contains something the direct periodic solution does not model (the message says what)."""


# ---------------------------------------------------------------- reading the netlist

@dataclass(frozen=True)
class Card:
    """One netlist card: physical lines ``start`` .. ``stop - 1`` (continuations joined)."""

    start: int
    stop: int
    text: str

    @cached_property
    def _split(self) -> tuple[str, ...]:
        return tuple(self.text.split(";")[0].split())

    @property
    def tokens(self) -> list[str]:
        """The card's words before any ``;`` comment (a fresh list each call; split once)."""
        return list(self._split)

    @cached_property
    def name(self) -> str:
        return self._split[0].upper()


def read_cards(netlist: str) -> list[Card]:
    """Top-level element and dot cards (the title line, ``.control`` blocks and ``.subckt``
    definitions are skipped; ``+`` continuation lines are joined to their card)."""
    lines = netlist.splitlines()
    cards: list[list] = []
    skip = None  # ".endc" or ".ends" while inside a block
    for n, raw in enumerate(lines[1:], start=1):
        s = raw.strip()
        if not s or s.startswith("*"):
            continue
        low = s.lower()
        if skip:
            if low.startswith(skip):
                skip = None
            continue
        if low.startswith((".control", ".exec")):
            skip = ".endc"
            continue
        if low.startswith(".subckt"):
            skip = ".ends"
            continue
        if s.startswith("+"):
            if cards:
                cards[-1][1] = n
                cards[-1][2] += " " + s[1:].strip()
            continue
        cards.append([n, n, s])
    return [Card(a, b + 1, text) for a, b, text in cards]


def card_params(tokens: list[str]) -> dict[str, str]:
    """``KEY=value`` tokens (``Z0=50 TD=1n`` ...) as an upper-case dict of strings."""
    text = " ".join(tokens)
    return {k.upper(): v for k, v in re.findall(r"(\w+)\s*=\s*([^\s=]+)", text)}


def spice_value(token: str, what: str) -> float:
    """A SPICE number (``2.2n``, ``1meg``); ``what`` names the card in the message otherwise."""
    try:
        return parse_spice_number(token)
    except ValueError:
        raise Unsupported(f"{what}: '{token}' is not a plain number") from None


def model_cards(cards: list[Card]) -> dict[str, tuple[str, dict[str, float]]]:
    """``.model`` cards: upper-case name -> (upper-case type, {PARAMETER: value})."""
    out = {}
    for c in cards:
        m = re.match(r"\.model\s+(\S+)\s+(\w+)\s*\(?(.*?)\)?\s*$", c.text, re.IGNORECASE)
        if m:
            pars = {k.upper(): spice_value(v, f".model {m.group(1)}")
                    for k, v in re.findall(r"(\w+)\s*=\s*([^\s,()]+)", m.group(3))}
            out[m.group(1).upper()] = (m.group(2).upper(), pars)
    return out


# ---------------------------------------------------------------- independent sources

@dataclass(frozen=True)
class SourceWaveform:
    """An independent source's value as a function of time (DC, PULSE or SIN)."""

    kind: str
    args: tuple

    def value(self, t_s: np.ndarray) -> np.ndarray:
        t = np.asarray(t_s, dtype=float)
        if self.kind == "neg":
            return -self.args[0].value(t)
        if self.kind == "dc":
            return np.full(t.shape, self.args[0])
        if self.kind == "sin":
            vo, va, freq, phase_deg = self.args
            return vo + va * np.sin(2 * np.pi * freq * t + math.radians(phase_deg))
        v1, v2, td, tr, tf, pw, per = self.args
        x = np.mod(t - td, per)
        out = np.full(t.shape, v1)
        rise = x < tr
        out[rise] = v1 + (v2 - v1) * x[rise] / tr
        top = (x >= tr) & (x < tr + pw)
        out[top] = v2
        fall = (x >= tr + pw) & (x < tr + pw + tf)
        out[fall] = v2 + (v1 - v2) * (x[fall] - tr - pw) / tf
        return out

    def crossings(self, level: float, period_s: float, rising: bool) -> list[float]:
        """Times in [0, period) where the waveform crosses ``level`` upwards (or downwards), s."""
        if self.kind == "pulse":
            v1, v2, td, tr, tf, pw, per = self.args
            pts = [(0.0, v1), (tr, v2), (tr + pw, v2), (tr + pw + tf, v1), (per, v1)]
            out = []
            for (ta, va), (tb, vb) in zip(pts[:-1], pts[1:]):
                if tb <= ta or (va - level) * (vb - level) > 0 or va == vb:
                    continue
                if (vb > va) != rising:
                    continue
                t = ta + (level - va) / (vb - va) * (tb - ta)
                for k in range(int(round(period_s / per))):
                    out.append(float(np.mod(td + t + k * per, period_s)))
            return sorted(out)
        # dense sampling, then linear interpolation between the samples that straddle the level
        t = np.linspace(0.0, period_s, 20001)
        v = self.value(t) - level
        idx = np.nonzero((v[:-1] < 0) & (v[1:] >= 0) if rising else (v[:-1] > 0) & (v[1:] <= 0))[0]
        return sorted(float(t[i] - v[i] * (t[i + 1] - t[i]) / (v[i + 1] - v[i])) for i in idx)


def source_waveform(tokens: list[str], period_s: float) -> SourceWaveform:
    """The time function of a V or I card (``DC x``, ``x``, ``PULSE(...)``, ``SIN(...)``); AC parts are ignored."""
    name = tokens[0]
    text = " ".join(tokens[3:])
    text = re.sub(r"\bac\s+[-+]?[\d.]\S*(\s+[-+]?[\d.]\S*)?", " ", text, flags=re.IGNORECASE)
    m = re.search(r"\b(pulse|sin)\s*\(([^)]*)\)", text, re.IGNORECASE)
    if m:
        vals = [spice_value(x, name) for x in m.group(2).replace(",", " ").split()]
        kind = m.group(1).lower()
        if kind == "sin":
            vals += [0.0] * (6 - len(vals))
            vo, va, freq, td, theta, phase = vals[:6]
            k = freq * period_s
            if td != 0.0 or theta != 0.0 or abs(k - round(k)) > 1e-9 or round(k) < 1:
                raise Unsupported(f"{name}: a SIN source that is not periodic at a harmonic of f0 from t = 0")
            return SourceWaveform("sin", (vo, va, freq, phase))
        vals += [0.0] * (7 - len(vals))
        v1, v2, td, tr, tf, pw, per = vals[:7]
        k = period_s / per if per > 0 else 0.0
        # periodic from t = 0 when the period divides T and the first pulse (delay included) ends
        # within one pulse period: before td the source then holds v1, as its periodic extension does
        if per <= 0 or round(k) < 1 or abs(k - round(k)) > 1e-9 or td < 0 or td + tr + pw + tf > per * (1 + 1e-12):
            raise Unsupported(f"{name}: a PULSE source that is not periodic at f0 from t = 0")
        if tr <= 0 or tf <= 0:
            raise Unsupported(f"{name}: a PULSE with zero rise or fall time (ngspice substitutes its time step)")
        return SourceWaveform("pulse", (v1, v2, td, tr, tf, pw, per))
    words = text.split()
    if not words:
        return SourceWaveform("dc", (0.0,))
    if words[0].lower() == "dc":
        words = words[1:]
    if len(words) != 1:
        raise Unsupported(f"{name}: a source waveform other than DC, PULSE or SIN")
    return SourceWaveform("dc", (spice_value(words[0], name),))


# ---------------------------------------------------------------- behavioural expressions

_FUNCS = {
    "uramp": lambda x: np.maximum(x, 0.0),
    "u": lambda x: (np.asarray(x) > 0).astype(float),
    "tanh": np.tanh, "exp": np.exp, "ln": np.log, "sqrt": np.sqrt, "abs": np.abs,
    "sin": np.sin, "cos": np.cos, "atan": np.arctan, "sinh": np.sinh, "cosh": np.cosh,
    "min": np.minimum, "max": np.maximum, "pow": np.power, "pwr": lambda x, y: np.sign(x) * np.abs(x) ** y,
    "sgn": np.sign,
}
_ALLOWED = (ast.Expression, ast.BinOp, ast.UnaryOp, ast.Call, ast.Name, ast.Load, ast.Constant,
            ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow, ast.USub, ast.UAdd, ast.Subscript)


def device_expression(text: str, element: str):
    """Compile an ngspice B-source expression to ``f(values) -> array``.

    ``values`` maps node names to arrays (``v(node)``, ``v(a, b)``) and ``"time"`` to the time,
    s. Only numbers, + - * / ^, parentheses and the functions in ``_FUNCS`` are accepted.
    """
    nodes: set[str] = set()
    text = text.lower()

    def node_ref(m):
        a = m.group(1).strip().lower()
        b = (m.group(2) or "").strip().lower()
        nodes.add(a)
        if b:
            nodes.add(b)
            return f"(V[{a!r}]-V[{b!r}])"
        return f"V[{a!r}]"

    src = re.sub(r"\bv\s*\(\s*([^,()\s]+)\s*(?:,\s*([^()\s]+)\s*)?\)", node_ref, text)
    if re.search(r"\bi\s*\(", src, re.IGNORECASE):
        raise Unsupported(f"{element}: a device expression that reads a branch current")
    src = re.sub(r"\btime\b", "V['time']", src, flags=re.IGNORECASE)

    def num(m):
        return repr(parse_spice_number(m.group(0)))

    src = re.sub(r"(?<![\w.'])(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?(meg|mil|[tgkmunpf])?(?![\w(])", num, src,
                 flags=re.IGNORECASE)
    src = src.replace("^", "**")
    try:
        tree = ast.parse(src, mode="eval")
    except SyntaxError:
        raise Unsupported(f"{element}: the expression '{text}' could not be read") from None
    for node in ast.walk(tree):
        if not isinstance(node, _ALLOWED):
            raise Unsupported(f"{element}: the expression '{text}' uses '{type(node).__name__}'")
        if isinstance(node, ast.Call) and not (isinstance(node.func, ast.Name) and node.func.id in _FUNCS):
            raise Unsupported(f"{element}: the expression '{text}' calls a function pashape does not evaluate")
        if isinstance(node, ast.Subscript) and not (isinstance(node.value, ast.Name) and node.value.id == "V"):
            raise Unsupported(f"{element}: the expression '{text}' could not be read")
        if isinstance(node, ast.Name) and node.id != "V" and node.id not in _FUNCS:
            raise Unsupported(f"{element}: the expression '{text}' uses the name '{node.id}'")
    code = compile(tree, f"<{element}>", "eval")
    env = {"__builtins__": {}, **_FUNCS}

    def f(values):
        try:
            with np.errstate(all="ignore"):
                return np.asarray(eval(code, env, {"V": values}), dtype=float)  # noqa: S307 - whitelisted AST
        except (TypeError, ValueError, KeyError, ZeroDivisionError, OverflowError):
            raise Unsupported(f"{element}: the expression '{text}' could not be evaluated") from None

    return f, nodes


def netlist_elements(netlist: str) -> dict[str, list[str]]:
    """Element lines of a netlist: upper-case element name -> tokens (continuations joined)."""
    out: dict[str, list[str]] = {}
    lines: list[str] = []
    for raw in netlist.splitlines()[1:]:  # the first line is the title
        s = raw.strip()
        if not s or s.startswith("*"):
            continue
        if s.startswith("+") and lines:
            lines[-1] += " " + s[1:]
            continue
        lines.append(s)
    inside = False
    for s in lines:
        low = s.lower()
        if low.startswith((".control", ".exec")):
            inside = True
        elif low.startswith(".endc"):
            inside = False
        elif not inside and not s.startswith("."):
            tokens = s.split(";")[0].split()
            out[tokens[0].upper()] = tokens
    return out
