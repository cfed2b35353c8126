"""The study grammar: variations (``--vary``), load circles (``--vswr``), tolerances and specs.

Variation grammar (``--vary``)::

    design.vdd=20V:28V:5               linear, 5 points, ends included
    network.feed_l=10nH:1uH:5:log      logarithmic spacing
    design.vdd=20V,24V,28V             explicit list (any key, also text keys)

Load circle (``--vswr S:N``): N loads equally spaced in phase on the circle of
constant VSWR S around the nominal load RL:

.. math:: |\\Gamma| = (S-1)/(S+1), \\quad \\Gamma_k = |\\Gamma| e^{j 2\\pi k/N},
          \\quad Z_k = R_L (1+\\Gamma_k)/(1-\\Gamma_k)

(Pozar, *Microwave Engineering*, reflection coefficient and standing-wave
ratio), written to ``design.load`` (real part) and ``design.load_x`` (imaginary
part).

Tolerances (``--tolerance "C*=5%"``): shell-style patterns match a component's
kind-prefixed name (``C_tank``, ``L_feed``, ``Z0_line``, ``TD_line``), its
netlist element name (``T_line``) or its sizing name (``tank_l``). ``normal``: the percentage is three standard
deviations; ``uniform``: +/- the percentage.

Specs (``--spec "drain_efficiency>=0.7"``) and the yield's Clopper-Pearson interval.
"""

from __future__ import annotations

import fnmatch
import math
import re
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from netgen.design import (
    SCHEMA,
    parse_quantity,
    set_dotted,
)
from netgen.errors import DesignError

__all__ = ["MAX_AXIS_POINTS", "Variation", "Tolerance", "Spec", "parse_vary", "parse_vswr", "parse_tolerance", "parse_spec", "load_circle",
           "metric_value", "point_passes", "yield_interval", "KNOWN_METRICS", "format_value"]

#: Top-level numeric keys of metrics.json usable in ``--spec`` (plus ``hN_dbc``).
KNOWN_METRICS = (
    "drain_efficiency", "pae", "pout_w", "pdc_w", "pload_total_w", "peak_vd_v",
    "peak_vd_over_vdd", "peak_id_a", "cycles",
)
_HN = re.compile(r"^h([1-9][0-9]?)_dbc$")
#: most values one --vary (or --vswr) axis may have: every value is validated against the design
#: up front, and each becomes at least one simulation
MAX_AXIS_POINTS = 10_000


# ---------------------------------------------------------------- variations

@dataclass(frozen=True)
class Variation:
    """One axis of the grid.

    Attributes
    ----------
    name : str
        Axis name: the dotted key path, or ``load_phase_deg`` for the VSWR circle.
    sets : tuple[dict]
        Per axis value, the keys to set: ``{dotted path: value as written to the document}``.
    axis : tuple
        Per axis value, the number used for plots (SI float) or the text for text keys.
    unit : str
        SI unit of ``axis`` ('' for numbers or text).
    """

    name: str
    sets: tuple
    axis: tuple
    unit: str = ""

    def describe(self) -> dict:
        return {"name": self.name, "sets": list(self.sets), "axis": list(self.axis), "unit": self.unit}


def _schema_key(path: str):
    parts = path.split(".")
    if len(parts) == 3 and parts[:2] == ["network", "values"]:
        return None  # a component override: unit depends on the component kind
    if len(parts) != 2 or parts[0] not in SCHEMA or parts[1] not in SCHEMA[parts[0]]:
        set_dotted({}, path, None)  # raises DesignError naming the closest key
        raise DesignError(f"'{path}': not a key that can be varied.")  # pragma: no cover
    return SCHEMA[parts[0]][parts[1]]


def _split_quantity(text: str, path: str) -> tuple[float, str]:
    """(SI value, unit symbol) of a quantity written in a --vary range, e.g. '10nH' -> (1e-8, 'H')."""
    from quantiphy import QuantiPhyError, Quantity

    spice = re.sub(r"(?<=[0-9.\s])meg", "M", text.strip(), flags=re.IGNORECASE)
    try:
        q = Quantity(spice)
    except (QuantiPhyError, ValueError, TypeError):
        raise DesignError(f"{path}: cannot read {text!r} as a quantity in --vary; write e.g. 2.2nH.") from None
    number = float(q.real)
    if not math.isfinite(number):
        raise DesignError(f"{path}: {text!r} is not a finite number.")
    return number, (q.units or "").strip()


def format_value(value: float, unit: str) -> str:
    """Value text with unit that round-trips to the same float (10 significant digits)."""
    return f"{value:.10g} {unit}".strip()


def parse_vary(text: str) -> Variation:
    """Parse one ``--vary PATH=SPEC`` option.

    ``SPEC`` is ``start:stop:n`` (linear, ends included), ``start:stop:n:log``
    (geometric spacing, ``numpy.geomspace``) or a comma-separated list.

    Raises
    ------
    DesignError
        Naming the key for a malformed option, an unknown key, a unit that is
        not the key's unit, or a count below 2.

    Length: one branch per form of the grammar (range, log range, list; numeric and text keys),
    each with its own one-line error.
    """
    if "=" not in text:
        raise DesignError(f"--vary {text!r}: write PATH=START:STOP:N, PATH=START:STOP:N:log or PATH=V1,V2,...")
    path, spec = (s.strip() for s in text.split("=", 1))
    key = _schema_key(path)
    if not spec:
        raise DesignError(f"{path}: --vary has no values after '='.")
    unit = key.unit if key is not None else None
    if unit in ("values", "pins"):
        raise DesignError(f"{path}: cannot be varied as a whole; vary one component, e.g. network.values.tank_l=2nH:3nH:3.")
    if ":" in spec:
        parts = [p.strip() for p in spec.split(":")]
        log = len(parts) == 4 and parts[3].lower() == "log"
        if len(parts) not in (3, 4) or (len(parts) == 4 and not log):
            raise DesignError(f"{path}: range {spec!r} must be START:STOP:N or START:STOP:N:log.")
        try:
            n = int(parts[2])
        except ValueError:
            raise DesignError(f"{path}: the point count {parts[2]!r} in {spec!r} is not a whole number.") from None
        if n < 2:
            raise DesignError(f"{path}: a range needs at least 2 points (got {n}); give a single value as a list.")
        if n > MAX_AXIS_POINTS:
            raise DesignError(f"{path}: a range of {n} points exceeds the limit of {MAX_AXIS_POINTS} per axis; "
                              "every point is a simulation, so sample more coarsely.")
        if unit in ("str", "bool"):
            raise DesignError(f"{path}: a text key cannot take a range; list the values, e.g. {path}=a,b.")
        if unit is None:  # component override: unit from the text, must agree
            (a, ua), (b, ub) = _split_quantity(parts[0], path), _split_quantity(parts[1], path)
            if not ua or ua != ub:
                raise DesignError(f"{path}: start {parts[0]!r} and stop {parts[1]!r} need the same unit, e.g. 1nH:3nH:5.")
            unit = ua
        elif unit in ("", "int"):
            a, b = (parse_quantity(_num(p), "", path) for p in parts[:2])
        else:
            a, b = (parse_quantity(p, unit, path) for p in parts[:2])
        if log and (a <= 0 or b <= 0):
            raise DesignError(f"{path}: log spacing needs positive start and stop (got {parts[0]}, {parts[1]}).")
        values = np.geomspace(a, b, n) if log else np.linspace(a, b, n)
        if unit == "int":
            ints = [int(round(v)) for v in values]
            sets = tuple({path: v} for v in ints)
            axis = tuple(float(v) for v in ints)
            unit_out = ""
        elif unit == "":
            sets = tuple({path: float(v)} for v in values)
            axis = tuple(float(v) for v in values)
            unit_out = ""
        else:
            sets = tuple({path: format_value(float(v), unit)} for v in values)
            axis = tuple(float(v) for v in values)
            unit_out = unit
        return Variation(path, sets, axis, unit_out)
    items = [p.strip() for p in spec.split(",")]
    if any(not p for p in items):
        raise DesignError(f"{path}: empty value in the list {spec!r}.")
    sets, axis = [], []
    for item in items:
        if unit == "bool":
            if item.lower() not in ("true", "false"):
                raise DesignError(f"{path}: expected true or false, got {item!r}.")
            v: Any = item.lower() == "true"
            sets.append({path: v})
            axis.append(item.lower())
        elif unit in ("str",):
            sets.append({path: item})
            axis.append(item)
        elif unit == "int":
            v = parse_quantity(_num(item), "", path)
            if v != int(v):
                raise DesignError(f"{path}: {item!r} is not a whole number.")
            sets.append({path: int(v)})
            axis.append(float(v))
        elif unit == "":
            v = parse_quantity(_num(item), "", path)
            sets.append({path: v})
            axis.append(v)
        elif unit is None:
            v, _u = _split_quantity(item, path)
            sets.append({path: item})
            axis.append(v)
        else:
            v = parse_quantity(item, unit, path)
            sets.append({path: item})
            axis.append(v)
    unit_out = unit if unit not in (None, "", "int", "str", "bool") else ""
    return Variation(path, tuple(sets), tuple(axis), unit_out)


def _num(text: str) -> float | str:
    try:
        return float(text)
    except ValueError:
        return text


def load_circle(vswr: float, n: int, rl_ohm: float) -> list[tuple[float, float, float]]:
    """Loads on the circle of constant VSWR around a real ``rl_ohm``.

    Returns
    -------
    list of (phase_deg, r_ohm, x_ohm)
        ``Gamma = |G| exp(j phase)``, ``|G| = (S-1)/(S+1)``,
        ``Z = RL (1 + Gamma) / (1 - Gamma)`` (Pozar, *Microwave Engineering*).
    """
    mag = (vswr - 1.0) / (vswr + 1.0)
    out = []
    for k in range(n):
        phi = 2.0 * math.pi * k / n
        g = mag * complex(math.cos(phi), math.sin(phi))
        z = rl_ohm * (1 + g) / (1 - g)
        x = z.imag if abs(z.imag) > 1e-12 * rl_ohm else 0.0  # exactly real at 0 and 180 degrees
        out.append((math.degrees(phi), z.real, x))
    return out


def parse_vswr(text: str, rl_ohm: float) -> Variation:
    """Parse ``--vswr S:N`` into the ``load_phase_deg`` axis (sets design.load and design.load_x)."""
    parts = text.split(":")
    try:
        s, n = float(parts[0]), int(parts[1])
        if len(parts) != 2:
            raise ValueError
    except (ValueError, IndexError):
        raise DesignError(f"--vswr {text!r}: write VSWR:N, e.g. 2.0:12 (12 loads on the VSWR 2 circle).") from None
    if not (s > 1.0 and math.isfinite(s)):
        raise DesignError(f"--vswr {text!r}: the VSWR must be greater than 1.")
    if n < 1:
        raise DesignError(f"--vswr {text!r}: the number of loads must be at least 1.")
    if n > MAX_AXIS_POINTS:
        raise DesignError(f"--vswr {text!r}: {n} loads exceed the limit of {MAX_AXIS_POINTS}; give fewer loads.")
    pts = load_circle(s, n, rl_ohm)
    sets = tuple({"design.load": format_value(r, "ohm"), "design.load_x": format_value(x, "ohm")} for _, r, x in pts)
    return Variation("load_phase_deg", sets, tuple(p for p, _, _ in pts), "deg")


# ---------------------------------------------------------------- tolerances

@dataclass(frozen=True)
class Tolerance:
    """``pattern=pct%``.

    The pattern names what varies, in the names the user sees elsewhere: a component name of
    ``[network.values]`` (``tank_c``, ``line_z0``, ``line_td``; shell wildcards: ``*_c``,
    ``res*``), a kind selector (``C*``, ``L*``, ``R*``, ``Z0*``, ``TD*``: every component of that
    kind) or a numeric design key (``device.ron``, ``device.cout``, ``design.vdd``, ``design.f0``).
    """

    pattern: str
    fraction: float

    @property
    def is_key(self) -> bool:
        """Whether the pattern is a dotted design key (``device.ron``) rather than components."""
        return "." in self.pattern

    def matches(self, name: str, kind: str) -> bool:
        if self.is_key:
            return False
        if self.pattern in _KIND_SELECTORS:
            return _KIND_SELECTORS[self.pattern] == kind
        return fnmatch.fnmatchcase(name, self.pattern)


#: kind selectors of a tolerance pattern (every component of one kind)
_KIND_SELECTORS = {"C*": "C", "L*": "L", "R*": "R", "Z0*": "Z0", "TD*": "TD"}

#: design keys a tolerance may vary (numeric keys with a unit; the network is fixed by its values)
TOLERANCE_SECTIONS = ("design", "device")


def parse_tolerance(text: str) -> Tolerance:
    """Parse ``--tolerance PATTERN=PCT%`` (e.g. ``C*=5%``, ``tank_l=1%``, ``device.ron=10%``)."""
    if "=" not in text:
        raise DesignError(f"--tolerance {text!r}: write PATTERN=PERCENT, e.g. \"C*=5%\".")
    pattern, pct = (s.strip() for s in text.split("=", 1))
    m = re.fullmatch(r"([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*%", pct)
    if not pattern or not m:
        raise DesignError(f"--tolerance {text!r}: write PATTERN=PERCENT with a % sign, e.g. \"C*=5%\".")
    frac = float(m.group(1)) / 100.0
    if not 0.0 < frac < 1.0:
        raise DesignError(f"--tolerance {text!r}: the percentage must be above 0% and below 100%.")
    return Tolerance(pattern, frac)


# ---------------------------------------------------------------- specs and yield

@dataclass(frozen=True)
class Spec:
    """``metric OP limit`` with OP one of >=, <=, >, <."""

    metric: str
    op: str
    limit: float

    def __str__(self) -> str:
        return f"{self.metric}{self.op}{self.limit:g}"

    def check(self, metrics: dict) -> bool:
        v = metric_value(metrics, self.metric)
        if v is None or not math.isfinite(v):
            return False
        return {">=": v >= self.limit, "<=": v <= self.limit, ">": v > self.limit, "<": v < self.limit}[self.op]


def parse_spec(text: str) -> Spec:
    """Parse ``--spec "drain_efficiency>=0.70"``; a limit may end in % (70% = 0.70)."""
    m = re.fullmatch(r"\s*([A-Za-z_][A-Za-z0-9_]*)\s*(>=|<=|>|<)\s*(.+?)\s*", text)
    if not m:
        raise DesignError(f"--spec {text!r}: write METRIC>=LIMIT or METRIC<=LIMIT, e.g. \"drain_efficiency>=0.70\".")
    name, op, lim = m.groups()
    if name not in KNOWN_METRICS and not _HN.match(name):
        import difflib

        close = difflib.get_close_matches(name, KNOWN_METRICS + ("h2_dbc", "h3_dbc"), n=1)
        hint = f"; did you mean '{close[0]}'?" if close else f"; use one of {', '.join(KNOWN_METRICS)} or hN_dbc."
        raise DesignError(f"--spec {text!r}: unknown metric '{name}'{hint}")
    try:
        limit = float(lim[:-1]) / 100.0 if lim.endswith("%") else float(lim)
    except ValueError:
        raise DesignError(f"--spec {text!r}: the limit {lim!r} is not a number.") from None
    if not math.isfinite(limit):  # NaN passes no comparison and inf every one: never a limit
        raise DesignError(f"--spec {text!r}: the limit {lim!r} is not a finite number; give a value such as 0.70.")
    return Spec(name, op, limit)


def metric_value(metrics: dict | None, name: str) -> float | None:
    """A metric by name: a top-level key of metrics.json, or ``hN_dbc`` = harmonics[N-1].pload_dbc."""
    if not metrics:
        return None
    m = _HN.match(name)
    if m:
        n = int(m.group(1))
        harm = metrics.get("harmonics") or []
        if n > len(harm):
            return None
        v = harm[n - 1].get("pload_dbc")
    else:
        v = metrics.get(name)
    if v is None or isinstance(v, (dict, list, str)):
        return None
    return float(v)


def point_passes(status: str, metrics: dict | None, specs: Sequence[Spec]) -> bool:
    """True when the point ran, settled and meets every spec. A failed or not-settled point fails."""
    if status != "ok" or not metrics or not metrics.get("settled", False):
        return False
    return all(s.check(metrics) for s in specs)


def yield_interval(k: int, n: int, confidence: float = 0.95, method: str = "clopper-pearson") -> tuple[float, float]:
    """Two-sided confidence interval of a binomial proportion k/n.

    ``clopper-pearson`` (exact; Clopper & Pearson, Biometrika 26, 1934):
    lower = Beta^-1(a/2; k, n-k+1), upper = Beta^-1(1-a/2; k+1, n-k).
    ``wilson`` (score interval; Wilson, JASA 22, 1927):
    (p + z^2/2n +/- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n).
    """
    from scipy import stats

    if n <= 0:
        return (0.0, 1.0)
    if not 0 <= k <= n:
        raise ValueError(f"k={k} outside 0..n={n}")
    alpha = 1.0 - confidence
    if method == "clopper-pearson":
        lo = 0.0 if k == 0 else float(stats.beta.ppf(alpha / 2, k, n - k + 1))
        hi = 1.0 if k == n else float(stats.beta.ppf(1 - alpha / 2, k + 1, n - k))
        return lo, hi
    if method == "wilson":
        z = float(stats.norm.ppf(1 - alpha / 2))
        p = k / n
        den = 1 + z * z / n
        mid = (p + z * z / (2 * n)) / den
        half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
        return max(0.0, mid - half), min(1.0, mid + half)
    raise ValueError(f"unknown interval method {method!r}")


