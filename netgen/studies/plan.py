"""Sweeps, load-circle studies and tolerance Monte Carlo over a design document.

One *point* is the base design document (``Design.raw``) with some keys set at
dotted paths (and, for tolerance Monte Carlo, sized component values scaled by
random factors written as ``[network.values]`` overrides), validated by
:func:`netgen.design.schema.design_from_dict` and evaluated by
:func:`netgen.pipeline.evaluate` (or an injected evaluator).

The plan (:class:`SweepPlan`) is a pure function of the base document and the
variation text: point ``idx`` always has the same inputs, whatever the number
of workers or the order points finish in, so an interrupted sweep resumes
exactly (see :mod:`netgen.studies.store`).

The grammar of variations, load circles, tolerances and specs is :mod:`netgen.studies.grammar`.
Tolerance factors come from
``numpy.random.default_rng(seed)`` drawn once, in the planning process.
"""

from __future__ import annotations

import hashlib
import json
import operator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

import numpy as np

from netgen.design import (
    COMPONENT_UNITS,
    design_from_dict,
    set_dotted,
)
from netgen.errors import DesignError

from .grammar import (
    TOLERANCE_SECTIONS,
    Spec,
    Tolerance,
    Variation,
    parse_tolerance,
    parse_vary,
    parse_vswr,
    point_passes,
    yield_interval,
)

__all__ = ["MAX_POINTS", "MAX_SEED", "SweepPlan", "make_plan", "pin_network", "tolerance_key_value", "summarize",
           "SIZING_INPUTS", "Evaluator", "ProgressFn"]

#: swept keys that are inputs of the sizing: sweeping them re-sizes the network at every point
SIZING_INPUTS = ("design.pout", "design.ropt")
#: most points one sweep may have (grid x samples): each is a simulation, and the plan holds
#: samples x components random factors in memory (8 bytes each)
MAX_POINTS = 1_000_000
#: the seed is stored as an SQLite INTEGER (signed 64-bit)
MAX_SEED = 2**63 - 1

Evaluator = Callable[[Any], dict]
ProgressFn = Callable[[int, int, dict], None]


# ---------------------------------------------------------------- the plan

@dataclass
class SweepPlan:
    """Every point of a sweep, computed on demand from the index (memory does not grow with size).

    Point ``idx`` = grid index * samples + sample index (samples = 1 without tolerances);
    the grid is the cartesian product of ``variations`` in the order given, last fastest.
    """

    base_doc: dict
    source: Path | None
    variations: list[Variation] = field(default_factory=list)
    tolerances: list[Tolerance] = field(default_factory=list)
    samples: int = 1
    seed: int = 1
    dist: str = "normal"
    #: components perturbed: (name, kind), in circuit order
    components: list[tuple[str, str]] = field(default_factory=list)
    #: samples x len(components) multiplicative factors
    factors: np.ndarray | None = None
    #: Design -> SizedDesign used for tolerances (None: netgen.synthesis.sizing.size); module-level function
    sizer: Callable | None = None

    @property
    def grid_shape(self) -> tuple[int, ...]:
        return tuple(len(v.sets) for v in self.variations)

    @property
    def n_grid(self) -> int:
        return int(np.prod(self.grid_shape)) if self.variations else 1

    @property
    def n_points(self) -> int:
        return self.n_grid * self.samples

    def spec(self) -> dict:
        """Canonical description of the variations (the sweep's identity in the store)."""
        return {
            "variations": [v.describe() for v in self.variations],
            "tolerances": [[t.pattern, t.fraction] for t in self.tolerances],
            "samples": self.samples if self.tolerances else 0,
            "seed": self.seed if self.tolerances else None,
            "dist": self.dist if self.tolerances else None,
        }

    def design_digest(self) -> str:
        return hashlib.sha256(json.dumps(self.base_doc, sort_keys=True, default=str).encode()).hexdigest()[:16]

    def point(self, idx: int) -> dict:
        """Inputs of point ``idx``: ``set`` {path: value}, ``axes`` {axis name: number/text},
        ``sample`` (int or None) and ``scale`` {component: factor}."""
        if not 0 <= idx < self.n_points:
            raise IndexError(idx)
        g, s = divmod(idx, self.samples)
        sets: dict = {}
        axes: dict = {}
        if self.variations:
            for var, j in zip(self.variations, np.unravel_index(g, self.grid_shape)):
                sets.update(var.sets[int(j)])
                axes[var.name] = var.axis[int(j)]
        out = {"set": sets, "axes": axes, "sample": None, "scale": {}}
        if self.tolerances:
            out["sample"] = s
            out["scale"] = {name: float(f) for (name, _k), f in zip(self.components, self.factors[s])}
        return out


def make_plan(
    base_doc: dict,
    *,
    source: Path | None = None,
    vary: Iterable[str] = (),
    vswr: str | None = None,
    tolerance: Iterable[str] = (),
    samples: int | None = None,
    seed: int = 1,
    dist: str = "normal",
    sizer: Callable | None = None,
    resize: bool | None = None,
) -> SweepPlan:
    """Build and check a plan from the command-line texts.

    Every axis value is validated against the base design (a wrong unit is a
    DesignError naming the key) before anything runs. With tolerances the
    nominal design is sized once (``sizer``, default :func:`netgen.synthesis.sizing.size`)
    to find the components the patterns match.

    ``resize``: whether every point re-sizes its network. A built network does not
    change when the supply, the frequency, the load or the device change, so by
    default (``None``) the nominal network is sized once and its values are pinned
    into every point (``[network.values]``) -- unless a swept key is itself a sizing
    input (``design.pout``, ``design.ropt``, any ``network.*`` key), which asks for
    a design exploration where each point is sized anew.

    Length: the plan's kinds (grid, load circle, Monte Carlo) and their checks in one place, so
    a plan is a pure function of its inputs (resumable sweeps rely on that).
    """
    try:
        seed = operator.index(seed)
    except TypeError:
        seed = -1
    if not 0 <= seed <= MAX_SEED:
        raise DesignError(f"--seed {seed}: give a whole number from 0 to {MAX_SEED}.")
    if samples is not None and int(samples) > MAX_POINTS:
        raise DesignError(f"--samples {samples}: exceeds the limit of {MAX_POINTS} points per sweep "
                          f"(about {_gib(int(samples) * 8 * 16)} of random factors for 16 components); take fewer samples.")
    variations = [parse_vary(v) for v in vary]
    _check_count([len(v.sets) for v in variations], samples)
    base = design_from_dict(base_doc, source=source, where=str(source or "design"))
    swept = {p for v in variations for s in v.sets for p in s}
    if resize is None:
        resize = any(p in SIZING_INPUTS or (p.startswith("network.") and not p.startswith("network.values."))
                     for p in swept)
    if not resize:
        base_doc = pin_network(base_doc, base, sizer)
    if vswr:
        touched = {p for v in variations for s in v.sets for p in s}
        if touched & {"design.load", "design.load_x"}:
            raise DesignError("--vswr sets design.load and design.load_x; do not also --vary them.")
        variations.append(parse_vswr(vswr, base.load_ohm))
    _check_count([len(v.sets) for v in variations], samples if tolerance else None)
    names = [v.name for v in variations]
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise DesignError(f"--vary {sorted(dup)[0]}: given twice; combine the values into one --vary.")
    for var in variations:  # validate each value against the base design
        for sets in var.sets:
            doc = base_doc
            for path, value in sets.items():
                doc = set_dotted(doc, path, value)
            if not any(p.startswith("network.values.") for p in sets):
                design_from_dict(doc, source=source, where=str(source or "design"))
    tols = [parse_tolerance(t) for t in tolerance]
    if dist not in ("normal", "uniform"):
        raise DesignError(f"--dist {dist!r}: use normal or uniform.")
    plan = SweepPlan(base_doc=base_doc, source=source, variations=variations, seed=int(seed), dist=dist)
    if samples is not None and not tols:
        raise DesignError("--samples needs at least one --tolerance (what to vary from sample to sample).")
    if tols:
        n = 100 if samples is None else int(samples)
        if n < 1:
            raise DesignError(f"--samples {n}: give at least 1 sample.")
        size_fn = sizer
        if size_fn is None:
            from netgen.synthesis import size as size_fn
        sized = size_fn(base)
        comps = []
        for comp in sized.components.values():
            frac = None
            for t in tols:  # the last matching pattern wins
                if t.matches(comp.name, comp.kind):
                    frac = t.fraction
            if frac is not None:
                comps.append((comp.name, comp.kind, frac))
        keys = {}
        for t in tols:
            if t.is_key:
                tolerance_key_value(base, t.pattern)  # checks the key
                keys[t.pattern] = t.fraction  # the last one given wins
            elif not any(t.matches(c.name, c.kind) for c in sized.components.values()):
                listing = ", ".join(c.name for c in sized.components.values())
                raise DesignError(f"--tolerance {t.pattern!r}: matches no component; the components are {listing} "
                                  "(kind selectors C*, L*, Z0*, TD*; design keys such as device.ron, device.cout, "
                                  "design.vdd, design.f0).")
        comps += [(path, "key", frac) for path, frac in keys.items()]
        rng = np.random.default_rng(int(seed))
        frac = np.array([c[2] for c in comps])
        if dist == "normal":  # the percentage is 3 sigma
            draws = rng.standard_normal((n, len(comps)))
            factors = 1.0 + draws * (frac / 3.0)
        else:  # uniform within +/- the percentage
            draws = rng.uniform(-1.0, 1.0, (n, len(comps)))
            factors = 1.0 + draws * frac
        plan.tolerances = tols
        plan.samples = n
        plan.components = [(c[0], c[1]) for c in comps]
        plan.factors = factors
        plan.sizer = sizer
    return plan


def _gib(n_bytes: int) -> str:
    return f"{n_bytes / 2**30:.3g} GiB"


def _check_count(axis_lengths: list[int], samples: int | None) -> None:
    """Refuse, before anything is built, a sweep of more than MAX_POINTS points."""
    n = 1
    for k in axis_lengths:
        n *= max(int(k), 1)
    n *= max(int(samples or 1), 1)
    if n > MAX_POINTS:
        raise DesignError(f"the sweep would have {n} points, more than the limit of {MAX_POINTS} (each point is a "
                          "simulation); vary fewer keys or use fewer values per --vary.")


def pin_network(base_doc: dict, base, sizer: Callable | None = None) -> dict:
    """``base_doc`` with every sized component value written into ``[network.values]``.

    Values the user already set stay as written; the load reactance (role ``load``)
    is left to follow ``design.load_x``. The result sizes to the same network whatever
    the supply, frequency, load or device of a point.
    """
    size_fn = sizer
    if size_fn is None:
        from netgen.synthesis import size as size_fn
    sized = size_fn(base)
    user = dict(base.network.values)
    doc = base_doc
    if base.network.match_shunt == "auto":
        # the L-section keeps the nominal orientation at every point (which side the shunt
        # element is on would otherwise follow each point's Ropt against RL)
        from netgen.synthesis import match_orientation

        doc = set_dotted(doc, "network.match_shunt", match_orientation(sized.components))
    for comp in sized.components.values():
        if comp.name in user or comp.role == "load":
            continue
        doc = set_dotted(doc, f"network.values.{comp.name}", f"{comp.value:.12g} {COMPONENT_UNITS[comp.kind]}")
    return doc


def tolerance_key_value(design, path: str) -> tuple[float, str]:
    """The value (SI) and unit of the numeric design key ``path`` a tolerance varies.

    Raises
    ------
    DesignError
        When ``path`` is not a numeric key with a unit of ``[design]`` or ``[device]``, or has no
        value in this design.
    """
    from netgen.design import SCHEMA

    section, _, key = path.partition(".")
    spec = SCHEMA.get(section, {}).get(key) if section in TOLERANCE_SECTIONS else None
    if spec is None or spec.unit in ("str", "bool", "int", "values", "pins", "") or key in ("pout", "ropt"):
        raise DesignError(f"--tolerance {path!r}: not a design key a tolerance can vary; use a numeric key with a "
                          "unit of [design] or [device] (design.vdd, design.f0, design.load, device.ron, device.cout, "
                          "...) or a component name of [network.values].")
    value = getattr(design if section == "design" else getattr(design, section), spec.attr)
    if value is None or not isinstance(value, (int, float)):
        raise DesignError(f"--tolerance {path!r}: this design has no value for {path}; set it in the design file first.")
    return float(value), spec.unit


# ---------------------------------------------------------------- summary

def summarize(rows: Iterable[dict], specs: Sequence[Spec], n_points: int,
              confidence: float = 0.95, method: str = "clopper-pearson") -> dict:
    """Counts, per-spec pass counts and the yield with its confidence interval.

    ``rows`` are stored points (``status``, ``metrics``). Only points with a result count:
    ``ok``, ``not_settled`` and ``failed`` (a failed or not-settled point fails every spec).
    A point lost to an infrastructure fault has no result, like a point not yet run: both are
    left out of the yield and counted in ``missing``, so a crash of the machinery cannot bias
    the yield.

    Returns
    -------
    dict
        ``points`` (in the plan), ``stored`` (rows), ``results`` (rows with a result),
        ``missing`` (points without a result), ``ok``, ``not_settled``, ``failed``, ``lost``,
        ``specs`` {spec: passes}; with specs and results also ``passed``, ``yield``,
        ``yield_lo``, ``yield_hi``, ``confidence``, ``interval``.
    """
    counts = {"ok": 0, "not_settled": 0, "failed": 0, "lost": 0}
    per_spec = {str(s): 0 for s in specs}
    passed = 0
    stored = 0
    for row in rows:
        stored += 1
        counts[row["status"]] = counts.get(row["status"], 0) + 1
        if row["status"] == "lost":
            continue
        ok = point_passes(row["status"], row["metrics"], ())
        for s in specs:
            per_spec[str(s)] += bool(ok and s.check(row["metrics"]))
        passed += point_passes(row["status"], row["metrics"], specs)
    n = counts["ok"] + counts["not_settled"] + counts["failed"]
    out = {"points": n_points, "stored": stored, "results": n, "missing": n_points - n, **counts, "specs": per_spec}
    if specs and n:
        lo, hi = yield_interval(passed, n, confidence, method)
        out.update({"passed": passed, "yield": passed / n, "yield_lo": lo, "yield_hi": hi,
                    "confidence": confidence, "interval": method})
    return out
