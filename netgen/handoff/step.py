"""Step dependence of golden metrics: which numbers are converged in the time step.

A golden compares a run with an earlier run at the same points per cycle, so a quantity that
depends on the time step (the sampled top of a capacitor-discharge spike in a hard-switched
stage: 52 A at 500 points per cycle, 56 A at 2000) passes or fails on where the samples happen
to fall, not on the circuit. When a golden is accepted, :func:`measure` compares the run with a
second run of the same design at ``STEP_FACTOR`` times the points per cycle and, per metric:

* keeps the default (or hand-edited) tolerance when ``STEP_K * |delta|`` fits inside it;
* widens it to ``STEP_K * |delta|`` (entry key ``step_abs``) when that is wider but within the
  exclusion limit;
* excludes the metric from the comparison (entry key ``excluded``, the reason) beyond the
  limit: it is not converged in the time step, and a tolerance wide enough to hold it would test
  nothing.

``STEP_K = 2``: for a quantity whose error falls in proportion to the step (first order), the
error of the coarse run is about twice the change from halving the step (Richardson
extrapolation: e(h) = (v_h - v_h/2) 2^p / (2^p - 1), p = 1; any numerical-analysis text); for
the second-order trapezoidal rule it is 4/3 of the change, so 2 covers both.
Format and rules: docs/regression.md.
"""

from __future__ import annotations

import math

__all__ = ["STEP_FACTOR", "STEP_K", "EXCLUDE_REL", "EXCLUDE_ABS_FACTOR", "EXCLUDE_DB", "STEP_KEYS",
           "measure", "describe_step"]

#: the second run of an accept has this many times the design's points per cycle
STEP_FACTOR = 2
#: a widened tolerance is this multiple of the measured change (module docstring)
STEP_K = 2.0
#: a metric whose widened tolerance would exceed this fraction of its value is excluded...
EXCLUDE_REL = 0.10
#: ...or this multiple of its default absolute part, whichever is larger
EXCLUDE_ABS_FACTOR = 5.0
#: harmonic levels (dBc): excluded beyond this widened tolerance, dB
EXCLUDE_DB = 3.0
#: keys of a golden entry written by the step measurement (re-measured on every accept)
STEP_KEYS = ("step", "step_abs", "excluded")


def _both_beyond(tol, coarse: float, fine: float) -> bool:
    """Both values at or below the floor, or at or above the ceiling (they agree whatever the step)."""
    if tol.floor is not None and coarse <= tol.floor and fine <= tol.floor:
        return True
    return tol.ceiling is not None and coarse >= tol.ceiling and fine >= tol.ceiling


def measure(values: dict[str, float], fine: dict[str, float], tolerances: dict, points: tuple[int, int]) -> dict[str, dict]:
    """Step-dependence entries per metric.

    Parameters
    ----------
    values, fine : metric -> value at ``points[0]`` and at ``points[1]`` points per cycle.
    tolerances : metric -> :class:`netgen.handoff.regress.Tolerance` (default or hand-edited).
    points : (coarse, fine) points per cycle.

    Returns
    -------
    metric -> dict of the golden entry keys to add: always ``step`` (``points_per_cycle``,
    ``fine_value``, ``delta``, ``action`` = "kept" | "widened" | "excluded"), and ``step_abs``
    (the widened half-width, in the metric's unit) or ``excluded`` (the reason) where they apply.
    """
    out: dict[str, dict] = {}
    p0, p1 = points
    for key, coarse in values.items():
        if key not in fine or fine[key] is None or not math.isfinite(fine[key]) or not math.isfinite(coarse):
            continue
        tol = tolerances[key]
        delta = float(fine[key]) - float(coarse)
        record = {"points_per_cycle": [int(p0), int(p1)], "fine_value": float(fine[key]), "delta": delta}
        need = STEP_K * abs(delta)
        base = tol.abs + tol.rel * abs(coarse)
        if _both_beyond(tol, coarse, fine[key]) or need <= base:
            out[key] = {"step": {**record, "action": "kept"}}
            continue
        limit = EXCLUDE_DB if key.endswith("_dbc") else max(EXCLUDE_REL * abs(coarse), EXCLUDE_ABS_FACTOR * tol.abs)
        if need <= limit:
            out[key] = {"step": {**record, "action": "widened"}, "step_abs": need}
        else:
            record["action"] = "excluded"
            out[key] = {"step": record, "excluded": describe_step(key, coarse, record)}
    return out


def describe_step(key: str, value: float, record: dict) -> str:
    """One phrase: the two values and their change (``record`` is an entry's ``step``)."""
    p0, p1 = record["points_per_cycle"]
    delta = record["delta"]
    if key.endswith("_dbc"):
        change = f"{delta:+.3g} dB"
    else:
        change = f"{delta:+.4g}" + (f", {100 * delta / abs(value):+.1f} %" if value else "")
    head = "not converged in the time step" if record.get("action") == "excluded" else "step dependence"
    return (f"{head}: {value:.5g} at {p0} points per cycle, {record['fine_value']:.5g} at {p1} ({change})"
            + ("; excluded from the comparison" if record.get("action") == "excluded" else ""))
