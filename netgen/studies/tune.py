"""Tuning a design toward targets: bounded optimisation on the fast path, confirmed in ngspice.

A tuning problem is a few free keys with bounds (``--free network.values.tank_c=1pF:20pF``),
targets (``--target pout=8W``, ``--target zvs``), metrics to maximise or minimise and limits
(``--limit "h2_dbc<-40"``, ``--limit "peak_vd<3.2*vdd"``). The network is pinned as sized
(:func:`netgen.studies.plan.pin_network`: the parts on the board), the free keys written over it,
and each candidate evaluated on the periodic estimate (:func:`netgen.studies.fast.evaluate_fast`).

Objective (minimised; our own weighting)::

    J = W * sum_t ((m_t - target_t) / s_t)^2  +  W * sum_l (violation_l / s_l)^2  -  sum_max m  +  sum_min m

with ``s`` the target's magnitude (``ZERO_SCALE`` for a zero target) and ``W`` = :data:`WEIGHT`,
so a 1 % miss of a target costs as much as one unit of a maximised metric (a drain efficiency of
100 %). Free keys are mapped to [0, 1] (logarithmically when the bounds span more than a factor
of :data:`LOG_SPAN`). The search is scipy.optimize.differential_evolution (Storn and Price,
J. Global Optimization, 1997) with a small population, then Nelder-Mead within the bounds
(Nelder and Mead, Computer Journal, 1965; scipy's bounded variant) from the best point.
"""

from __future__ import annotations

import collections
import math
import re
import time
from dataclasses import dataclass, field

import numpy as np

from netgen.design import design_from_dict, set_dotted
from netgen.errors import DesignError, NetgenError

from .grammar import _split_quantity, format_value, metric_value
from .plan import pin_network

__all__ = [
    "METRIC_ALIASES",
    "WEIGHT",
    "Free",
    "Goal",
    "TuneProblem",
    "TuneResult",
    "objective",
    "parse_extremum",
    "parse_free",
    "parse_limit",
    "parse_target",
    "tune_design",
]

#: target/limit weight (see the module docstring)
WEIGHT = 1e4
#: scale of a target or limit whose value is 0 (ZVS: 1 % of Vdd, or of Vdd per radian)
ZERO_SCALE = 0.01
#: bounds spanning more than this factor are searched on a logarithmic scale
LOG_SPAN = 4.0
#: objective of a candidate that failed to evaluate
FAILED_J = 1e9

#: short names accepted on the command line -> metrics.json keys (docs/metrics.md)
METRIC_ALIASES = {
    "pout": "pout_w", "pdc": "pdc_w", "efficiency": "drain_efficiency", "eff": "drain_efficiency",
    "peak_vd": "peak_vd_v", "peak_id": "peak_id_a", "idc": "idc_a", "pae": "pae",
    "zvs_v": "zvs_v_over_vdd", "zvs_slope": "zvs_slope_over_vdd",
}
#: metric key suffix -> unit a target or limit may be written in
_UNITS = {"_w": "W", "_v": "V", "_a": "A", "_ohm": "ohm", "_hz": "Hz"}


def _metric(name: str, text: str) -> str:
    key = METRIC_ALIASES.get(name, name)
    if not re.fullmatch(r"[a-z][a-z0-9_]*", key):
        raise DesignError(f"{text!r}: '{name}' is not a metric name; use e.g. pout, drain_efficiency, h2_dbc, peak_vd.")
    return key


def _unit_of(key: str) -> str:
    return next((u for suffix, u in _UNITS.items() if key.endswith(suffix)), "")


@dataclass(frozen=True)
class Free:
    """A free key: dotted path, bounds (SI) and the unit written back."""

    path: str
    lo: float
    hi: float
    unit: str

    @property
    def log(self) -> bool:
        return self.lo > 0 and self.hi / self.lo > LOG_SPAN

    def value(self, u: float) -> float:
        """SI value at the normalised coordinate u in [0, 1]."""
        u = min(max(float(u), 0.0), 1.0)
        return self.lo * (self.hi / self.lo) ** u if self.log else self.lo + u * (self.hi - self.lo)

    def coordinate(self, x: float) -> float:
        """Inverse of :meth:`value` (clipped to [0, 1])."""
        u = math.log(x / self.lo) / math.log(self.hi / self.lo) if self.log else (x - self.lo) / (self.hi - self.lo)
        return min(max(u, 0.0), 1.0)


def parse_free(text: str) -> Free:
    """``PATH=LO:HI`` with units, e.g. ``network.values.tank_c=1pF:20pF``."""
    m = re.fullmatch(r"\s*([A-Za-z_][\w.]*)\s*=\s*([^:]+):([^:]+)\s*", text)
    if not m:
        raise DesignError(f"--free {text!r}: write PATH=LOW:HIGH, e.g. network.values.tank_c=1pF:20pF.")
    path, a, b = m.groups()
    lo, ua = _split_quantity(a, path)
    hi, ub = _split_quantity(b, path)
    if ua != ub:
        raise DesignError(f"--free {text!r}: the bounds have different units ({ua or 'none'}, {ub or 'none'}); write both alike.")
    if not lo < hi:
        raise DesignError(f"--free {text!r}: the low bound must be below the high bound.")
    return Free(path, lo, hi, ua)


@dataclass(frozen=True)
class Goal:
    """A target (``op`` '='), a limit (``<``, ``<=``, ``>``, ``>=``) or an extremum (``max``/``min``).

    ``value`` is SI; with ``per_vdd`` it is a multiple of the design's Vdd (``peak_vd<3.2*vdd``).
    """

    metric: str
    op: str
    value: float = 0.0
    per_vdd: bool = False
    text: str = ""

    def bound(self, vdd_v: float) -> float:
        return self.value * vdd_v if self.per_vdd else self.value


def _rhs(rhs: str, key: str, text: str) -> tuple[float, bool]:
    m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*\*\s*vdd\s*", rhs, re.IGNORECASE)
    if m:
        try:
            return float(m.group(1)), True
        except ValueError:
            raise DesignError(f"{text!r}: cannot read {m.group(1)!r} as a number.") from None
    if rhs.strip().endswith("%"):
        try:
            return float(rhs.strip()[:-1]) / 100.0, False
        except ValueError:
            raise DesignError(f"{text!r}: cannot read {rhs!r} as a percentage.") from None
    try:
        return float(rhs), False
    except ValueError:
        pass
    value, unit = _split_quantity(rhs, key)
    want = _unit_of(key)
    if unit and unit != want:
        raise DesignError(f"{text!r}: {key} is in {want or 'no unit'}, not {unit}.")
    return value, False


def parse_target(text: str) -> list[Goal]:
    """``METRIC=VALUE`` (``pout=8W``, ``drain_efficiency=80%``) or ``zvs`` (zero-voltage and
    zero-slope switching: ``zvs_v_over_vdd = 0`` and ``zvs_slope_over_vdd = 0``)."""
    if text.strip().lower() == "zvs":
        return [Goal("zvs_v_over_vdd", "=", 0.0, text="zvs"), Goal("zvs_slope_over_vdd", "=", 0.0, text="zvs")]
    m = re.fullmatch(r"\s*([A-Za-z_]\w*)\s*=\s*(.+?)\s*", text)
    if not m:
        raise DesignError(f"--target {text!r}: write METRIC=VALUE, e.g. pout=8W, or zvs.")
    key = _metric(m.group(1), text)
    value, per_vdd = _rhs(m.group(2), key, text)
    return [Goal(key, "=", value, per_vdd, text)]


def parse_limit(text: str) -> Goal:
    """``METRIC<VALUE`` etc. (``h2_dbc<-40``, ``peak_vd<3.2*vdd``, ``drain_efficiency>=0.7``)."""
    m = re.fullmatch(r"\s*([A-Za-z_]\w*)\s*(<=|>=|<|>)\s*(.+?)\s*", text)
    if not m:
        raise DesignError(f"--limit {text!r}: write METRIC<VALUE or METRIC>VALUE, e.g. \"h2_dbc<-40\".")
    key = _metric(m.group(1), text)
    value, per_vdd = _rhs(m.group(3), key, text)
    return Goal(key, m.group(2), value, per_vdd, text)


def parse_extremum(name: str, sense: str) -> Goal:
    """``--maximise drain_efficiency`` / ``--minimise peak_vd``."""
    return Goal(_metric(name.strip(), name), sense, text=f"{sense} {name.strip()}")


@dataclass
class TuneProblem:
    """The free keys, the goals and the base document (network pinned as sized)."""

    base_doc: dict
    source: object
    free: list[Free]
    goals: list[Goal]
    vdd_v: float

    def doc_at(self, x_si) -> dict:
        doc = self.base_doc
        for f, x in zip(self.free, x_si):
            doc = set_dotted(doc, f.path, format_value(float(x), f.unit) if f.unit else float(x))
        return doc

    def design_at(self, x_si):
        return design_from_dict(self.doc_at(x_si), source=self.source, where=f"{self.source or 'design'} (tuning)")


def objective(metrics: dict | None, goals, vdd_v: float) -> float:
    """J of one evaluated candidate (see the module docstring); :data:`FAILED_J` without metrics
    or with a goal's metric missing."""
    if not metrics:
        return FAILED_J
    j = 0.0
    for g in goals:
        m = metric_value(metrics, g.metric)
        if m is None or not math.isfinite(m):
            return FAILED_J
        if g.op == "max":
            j -= m
        elif g.op == "min":
            j += m
        else:
            b = g.bound(vdd_v)
            scale = abs(b) if b != 0 else ZERO_SCALE
            if g.op == "=":
                miss = m - b
            elif g.op in ("<", "<="):
                miss = max(0.0, m - b)
            else:
                miss = max(0.0, b - m)
            j += WEIGHT * (miss / scale) ** 2
    return j


@dataclass
class TuneResult:
    """What a tuning produced: the start and end values (SI), their metrics (fast path), the
    history of every evaluation, and counts."""

    problem: TuneProblem
    x0: list[float]
    x: list[float]
    metrics0: dict | None
    metrics: dict | None
    j0: float
    j: float
    history: list[dict] = field(default_factory=list)
    seconds: float = 0.0
    method: str = ""


def _evaluator():
    from .fast import evaluate_fast

    return evaluate_fast


def tune_design(doc: dict, free: list[Free], goals: list[Goal], *, source=None, budget: int = 300, seed: int = 1,
         evaluate=None, sizer=None, progress=None) -> TuneResult:
    """Minimise the objective over the free keys (see the module docstring).

    Parameters
    ----------
    doc : dict
        The design document (``Design.raw``).
    free, goals
        From :func:`parse_free`, :func:`parse_target`, :func:`parse_limit`, :func:`parse_extremum`.
    budget : int
        Evaluations allowed in all, a hard cap (about two thirds for the global search, the rest for
        the polish; the search ends where the next evaluation would exceed it).
    seed : int
        Seed of the global search.
    evaluate : callable(Design) -> metrics, optional
        Default :func:`netgen.studies.fast.evaluate_fast`.
    progress : callable(done, budget, entry), optional
        Called after each new evaluation with its history entry (``engine`` says what computed
        it: ``estimate``, or ``ngspice`` where the estimate does not apply; ``seconds`` its time).

    Returns
    -------
    TuneResult
    """
    from scipy.optimize import differential_evolution, minimize

    from netgen.periodic import blas_single_thread

    if not free:
        raise DesignError("nothing to tune; give at least one --free PATH=LOW:HIGH.")
    if not goals:
        raise DesignError("no goal; give --target, --maximise, --minimise or --limit.")
    base = design_from_dict(doc, source=source, where=str(source or "design"))
    problem = TuneProblem(pin_network(doc, base, sizer), source, list(free), list(goals), float(base.vdd_v))
    x0 = [_start_value(problem, base, f, sizer) for f in free]
    for f, x in zip(free, x0):
        problem.design_at([x if g is f else 0.5 * (g.lo + g.hi) for g in free])  # each key is settable
    evaluate = evaluate or _evaluator()
    history: list[dict] = []
    cache: dict[tuple, tuple[float, dict | None]] = {}
    start_failure: list[Exception] = []  # the start point's exception, raised below
    t_start = time.perf_counter()

    def run(x_si, stage: str) -> float:
        key = _key(x_si)
        if key not in cache:
            if len(history) >= budget:
                raise _BudgetSpent
            t0 = time.perf_counter()
            try:
                metrics = evaluate(problem.design_at(x_si))
            except Exception as exc:  # noqa: BLE001 - a candidate that fails is a bad candidate
                metrics = None
                err = f"{type(exc).__name__}: {exc}"
                if stage == "start":  # kept to be raised: the design itself fails
                    start_failure.append(exc)
            else:
                err = None
            j = objective(metrics, goals, problem.vdd_v)
            cache[key] = (j, metrics)
            best = min([h["j"] for h in history] + [j])
            history.append({"n": len(history) + 1, "stage": stage, "x": [float(v) for v in x_si], "j": j,
                            "best": best, "error": err,
                            "engine": (metrics or {}).get("engine"), "engine_note": (metrics or {}).get("engine_note"),
                            "seconds": time.perf_counter() - t0,
                            "metrics": {g.metric: metric_value(metrics, g.metric) for g in goals}})
            if progress is not None:
                progress(len(history), budget, history[-1])
        return cache[key][0]

    def fu(u, stage):
        return run([f.value(ui) for f, ui in zip(free, u)], stage)

    j0 = run(x0, "start")
    if history[0]["error"] is not None:  # the design itself fails: no search would find anything
        exc = start_failure[0]
        if isinstance(exc, NetgenError):
            raise exc
        raise NetgenError(f"the start point of the tuning fails ({history[0]['error']}); run the design "
                          "with pashape run to see why.") from exc
    d = len(free)
    pop = max(5, 8 // d)  # population = pop * d candidates a generation
    gens = max(2, int(0.65 * budget) // (pop * d) - 1)
    u0 = np.array([f.coordinate(x) for f, x in zip(free, x0)])
    init = np.random.default_rng(seed).uniform(size=(pop * d, d))
    init[0] = u0
    with blas_single_thread():  # the estimate's small solves, limited once for the whole search
        try:  # the budget is a hard cap: the search stops at the evaluation that would exceed it
            de = differential_evolution(fu, [(0.0, 1.0)] * d, args=("global",), popsize=pop, maxiter=gens,
                                        init=init, seed=seed, polish=False, tol=1e-8, mutation=(0.5, 1.0),
                                        recombination=0.9)
            if budget - len(history) > d:  # room for a simplex and a step of the polish
                minimize(fu, de.x, args=("polish",), method="Nelder-Mead", bounds=[(0.0, 1.0)] * d,
                         options={"maxfev": budget - len(history), "xatol": 1e-6, "fatol": 1e-9,
                                  "initial_simplex": _simplex(de.x, 0.05)})
        except _BudgetSpent:
            pass
    best = min(history, key=lambda h: h["j"])  # the first of equals: the start point when nothing beat it
    x = list(best["x"])
    j = run(x, "final")  # evaluated already: from the cache
    engines = engine_counts(history)
    where = ("on the periodic estimate" if engines.get("ngspice", 0) == 0 else
             "in ngspice (the periodic estimate does not apply)" if engines.get("estimate", 0) == 0 else
             f"on the periodic estimate ({engines['ngspice']} of {len(history)} evaluations in ngspice)")
    return TuneResult(problem=problem, x0=x0, x=x, metrics0=cache[_key(x0)][1], metrics=cache[_key(x)][1],
                      j0=j0, j=j, history=history, seconds=time.perf_counter() - t_start,
                      method=(f"differential_evolution (scipy.optimize; population {pop * d}, {gens} generations, "
                              f"seed {seed}) then bounded Nelder-Mead, {len(history)} of {budget} evaluations, {where}"))


def engine_counts(history: list[dict]) -> dict[str, int]:
    """Evaluations of a tuning history by what computed them (``estimate``, ``ngspice``, ``failed``)."""
    return dict(collections.Counter(h.get("engine") or "failed" for h in history))


class _BudgetSpent(Exception):
    """Raised by the objective when the evaluation budget is used up (ends the search)."""


def _key(x) -> tuple:
    return tuple(round(float(v), 12) for v in x)


def _simplex(u: np.ndarray, step: float) -> np.ndarray:
    """A starting simplex around u inside [0, 1] (steps turned inward at a bound)."""
    pts = [u.copy()]
    for k in range(len(u)):
        p = u.copy()
        p[k] = u[k] + step if u[k] + step <= 1.0 else u[k] - step
        pts.append(p)
    return np.array(pts)


def _start_value(problem: TuneProblem, base, f: Free, sizer) -> float:
    """The free key's value in the design as given (the pinned network value, or the design key),
    clipped into the bounds; the middle of the range where the design has none."""
    from netgen.design import get_dotted, parse_quantity

    try:
        raw = get_dotted(problem.base_doc, f.path)
    except (KeyError, DesignError):
        raw = None
    x = None
    if raw is not None:
        try:
            x = parse_quantity(raw, f.unit or "", f.path)
        except (DesignError, ValueError):
            x = None
    if x is None:
        return 0.5 * (f.lo + f.hi) if not f.log else math.sqrt(f.lo * f.hi)
    return min(max(x, f.lo), f.hi)

