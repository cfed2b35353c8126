"""The text of `pashape check`: one design's table, the why-lines of excluded and widened
metrics, the closing summary, and what an accept's step measurement decided.

Reads :class:`netgen.handoff.regress.CheckResult` records and golden documents (format in
docs/regression.md); prints nothing itself.
"""

from __future__ import annotations

from . import step

__all__ = ["format_number", "format_result", "format_summary", "step_lines"]


def step_lines(doc: dict) -> list[str]:
    """What the step measurement of a new golden decided (widened / excluded metrics), indented."""
    check = doc.get("step_check") or {}
    if check.get("not_measured"):
        return [f"  step dependence not measured: {check['not_measured']}"]
    if "points_per_cycle" not in check:
        return []
    p0, p1 = check["points_per_cycle"]
    out = []
    for key, entry in doc["metrics"].items():
        if entry.get("excluded"):
            out.append(f"  {key}: excluded: {entry['excluded']}")
        elif entry.get("step_abs"):
            out.append(f"  {key}: tolerance widened to +/-{entry['step_abs']:.3g} "
                       f"({step.describe_step(key, entry['value'], entry['step'])})")
    return [f"  step dependence measured at {p0} and {p1} points per cycle: "
            + ("every metric within its tolerance" if not out else f"{len(out)} metric(s) widened or excluded")] + out


def format_number(x: float | None) -> str:
    return "-" if x is None else f"{x:.6g}"


def format_result(r, *, only_failures: bool = False) -> str:
    """A pass/fail table for one design (``r``: a netgen.handoff.regress.CheckResult): metric, golden,
    new, deviation, tolerance, result; then why each excluded or widened metric is so."""
    status = "PASS" if r.ok else "FAIL"
    if r.ok and not r.rows and not r.golden_path.is_file():
        status = "NEW "
    head = f"{status}  {r.design_path}"
    lines = [head]
    for note in r.notes:
        lines.append(f"  note: {note}")
    if r.error:
        lines.append(f"  error: {r.error}")
        return "\n".join(lines)
    rows = [row for row in r.rows if not (only_failures and row.ok)]
    if rows:
        table = [("metric", "golden", "new", "deviation", "tolerance", "result")]
        table += [(row.metric, format_number(row.golden), format_number(row.new), row.deviation,
                   "not compared" if row.excluded else
                   row.tolerance.describe(*(("dB", "dBc") if row.metric.endswith("_dbc") else ("", "")), golden=row.golden),
                   row.result) for row in rows]
        widths = [max(len(t[i]) for t in table) for i in range(6)]
        for t in table:
            lines.append("  " + "  ".join(c.ljust(w) for c, w in zip(t, widths)).rstrip())
    for row in r.rows:  # why a metric is excluded or widened, always shown
        if row.excluded:
            lines.append(f"  excluded: {row.metric}: {row.excluded}")
        elif row.widened and not (only_failures and row.ok):
            lines.append(f"  widened: {row.metric}: {row.widened}")
    return "\n".join(lines)


def format_summary(results: list) -> str:
    """One closing line: how many designs passed."""
    failed = [r.design_path.name for r in results if not r.ok]
    text = f"{len(results) - len(failed)} of {len(results)} designs pass"
    if failed:
        text += "; failed: " + ", ".join(failed)
    return text
