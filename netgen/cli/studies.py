"""``pashape sweep``: grids, load circles and tolerance Monte Carlo into a resumable store.

Parses the options, calls :mod:`netgen.studies.plan` / :mod:`netgen.studies.store` /
:mod:`netgen.studies.plots`, prints a summary. No physics here.
"""

from __future__ import annotations

import importlib
import json
import sys
from pathlib import Path

import click

from netgen.errors import DesignError, NetgenError

__all__ = ["sweep_command"]

_HELP = """Run a design over a grid of values, a load circle or a tolerance Monte Carlo.

\b
Each point is the design with some keys changed, simulated to steady state;
metrics go to OUT/sweep.sqlite as each point finishes. Running the same
command again resumes: stored points are skipped.

\b
Variations (the grid is the product of all --vary and --vswr):
  --vary design.vdd=20V:28V:5              linear, 5 points, ends included
  --vary design.f0=850MHz:980MHz:14
  --vary network.feed_l=10nH:1uH:5:log     logarithmic spacing
  --vary design.vdd=20V,24V,28V            explicit list
  --vswr 2.0:12                            12 loads around the VSWR-2 circle
\b
Tolerance Monte Carlo (the nominal design is sized, then scaled per sample):
  --tolerance "C*=5%" --tolerance "L*=2%" --tolerance "tank_l=1%"
  --samples 200 --seed 1 --dist normal     (normal: 5% is 3 sigma; uniform: +/-5%)
\b
The network is built once: by default it is sized for the nominal design and
kept fixed while the supply, frequency, load or device vary (what a bench
measurement sees). Sweeping a sizing input (design.pout, design.ropt or a
network.* key) re-sizes it at every point; --resize / --fixed-network force
either behaviour.
\b
Specs (a failed or not-settled point fails them):
  --spec "drain_efficiency>=0.70" --spec "h2_dbc<=-30" --spec "peak_vd_over_vdd<=3.6"

\b
Fast path (--fast): every point from the periodic steady state computed
directly (no time stepping, tens of times faster); --confirm N points drawn at
random are re-run in ngspice and the disagreement reported; a point off by more
than 0.2 % in Pout or efficiency is flagged and its stored values become
ngspice's. Points the estimate cannot model run in ngspice and say so.

\b
Example:
  pashape sweep my_pa.toml --vary design.vdd=20V:28V:5 -o sweep_vdd/
  pashape sweep my_pa.toml --tolerance "C*=5%" --samples 200 \\
      --spec "drain_efficiency>=0.70" -o mc/
"""


def _load_evaluator(text: str | None):
    """``module:function`` for a custom evaluator (Design -> metrics dict)."""
    if not text:
        return None
    mod, _, fn = text.partition(":")
    try:
        return getattr(importlib.import_module(mod), fn)
    except (ImportError, AttributeError) as exc:
        raise click.BadParameter(f"cannot import {text!r} ({exc}).", param_hint="--evaluator") from None


@click.command("sweep", help=_HELP)
@click.argument("design_file", type=click.Path(path_type=Path, dir_okay=False), metavar="DESIGN.toml")
@click.option("--vary", multiple=True, metavar="PATH=SPEC", help="A key and its values (see above); repeatable.")
@click.option("--vswr", metavar="S:N", help="N loads equally spaced in phase on the VSWR-S circle around design.load.")
@click.option("--tolerance", multiple=True, metavar="PATTERN=PCT%", help="Component tolerance; repeatable; the last matching pattern wins.")
@click.option("--samples", type=int, default=None, help="Monte Carlo samples (default 100 with --tolerance).")
@click.option("--seed", type=int, default=1, show_default=True, help="Random seed of the Monte Carlo.")
@click.option("--dist", type=click.Choice(["normal", "uniform"]), default="normal", show_default=True,
              help="normal: the percentage is 3 sigma; uniform: +/- the percentage.")
@click.option("--spec", "specs", multiple=True, metavar="METRIC>=LIMIT", help="Pass/fail limit on a metric (top-level metrics key or hN_dbc); repeatable.")
@click.option("-o", "--out", type=click.Path(path_type=Path, file_okay=False), default=None,
              help="Output folder (default sweep_<design name>/); holds sweep.sqlite, sweep.csv and plots.")
@click.option("--workers", type=int, default=None, help="Local worker processes (default: the number of CPUs).")
@click.option("--cluster", metavar="tcp://HOST:PORT", default=None, help="Run the points on a Dask distributed scheduler instead.")
@click.option("--keep-waveforms", is_flag=True, help="Also write each point's settled waveforms to OUT/waveforms/point_<idx>.csv.")
@click.option("--resize/--fixed-network", "resize", default=None,
              help="Re-size the network at every point, or keep the nominal network (default: fixed, unless a sizing input is swept).")
@click.option("--no-plots", is_flag=True, help="Skip the PNG plots.")
@click.option("--attempts", type=int, default=3, show_default=True,
              help="Runs of a point cut short by the machinery (a killed or crashed worker, a lost scheduler) "
                   "before it is left out of the yield; a point that crashes its worker every time counts as failed.")
@click.option("--list", "list_only", is_flag=True, help="Print the points and exit without simulating.")
@click.option("--quiet", is_flag=True, help="No progress bar.")
@click.option("--fast", is_flag=True, help="Evaluate points on the periodic estimate, confirm a sample in ngspice (see above).")
@click.option("--confirm", "confirm_n", type=int, default=5, show_default=True,
              help="With --fast: points re-run in ngspice to confirm (drawn with --seed); 0 for none.")
@click.option("--evaluator", hidden=True, default=None, help="module:function evaluating a Design (tests, custom flows).")
def sweep_command(design_file, vary, vswr, tolerance, samples, seed, dist, specs, out, workers, cluster,
                  keep_waveforms, resize, attempts, no_plots, list_only, quiet, fast, confirm_n, evaluator):
    """
    Run a study (the help text is _HELP above). Length: a click command with many options; the
    body only checks them in order, calls the study and prints its summary (no physics).
    """
    from netgen.design import load_design
    from netgen.studies import (
        STORE_NAME,
        SweepStore,
        export_csv,
        make_plan,
        parse_spec,
        run_sweep,
        summarize,
    )

    if workers is not None and workers < 1:
        raise click.BadParameter("must be at least 1.", param_hint="--workers")
    if attempts < 1:
        raise click.BadParameter("must be at least 1.", param_hint="--attempts")
    design = load_design(design_file)
    spec_list = [parse_spec(s) for s in specs]
    if not vary and not vswr and not tolerance:
        raise DesignError("nothing to sweep; give --vary, --vswr or --tolerance (see pashape sweep --help).")
    plan = make_plan(design.raw, source=design.source, vary=vary, vswr=vswr, tolerance=tolerance,
                     samples=samples, seed=seed, dist=dist, resize=resize)
    if list_only:
        for idx in range(plan.n_points):
            click.echo(f"{idx}\t{json.dumps(plan.point(idx), sort_keys=True)}")
        return
    out = out or Path(f"sweep_{design.name}")
    fn = _load_evaluator(evaluator)
    spec = plan.spec()
    if fast:
        if evaluator or keep_waveforms:
            raise DesignError("--fast evaluates on the periodic estimate; do not combine it with "
                              + ("--evaluator." if evaluator else "--keep-waveforms (waveforms come from ngspice runs)."))
        if confirm_n < 0:
            raise click.BadParameter("must be 0 or more.", param_hint="--confirm")
        from netgen.studies import evaluate_fast as fn

        spec = {**spec, "engine": "estimate"}  # a fast sweep is stored apart from an ngspice one
    import tomlkit

    with SweepStore(out / STORE_NAME) as store:
        sid = store.open_sweep(plan.design_digest(), tomlkit.dumps(design.raw), spec, plan.n_points,
                               plan.seed if plan.tolerances else None)
        bar = None
        if not quiet:
            from tqdm import tqdm

            # on a terminal only (a log or a pipe gets the summary lines, not the bar's redraws)
            bar = tqdm(total=plan.n_points, initial=len(store.done_indices(sid)), file=sys.stderr,
                       unit="pt", desc="sweep", dynamic_ncols=True, disable=not sys.stderr.isatty())

        def progress(done, total, res):
            if bar is not None:
                bar.update(1)
                if res["status"] != "ok":
                    bar.set_postfix_str(f"point {res['idx']}: {res['status']}")

        try:
            counts = run_sweep(plan, store, sid, workers=workers, cluster=cluster, evaluator=fn,
                               wave_dir=(out / "waveforms") if keep_waveforms else None, progress=progress,
                               attempts=attempts)
        except KeyboardInterrupt:  # Ctrl-C or SIGTERM (errors say what to do themselves)
            if bar is not None:
                bar.close()
                bar = None
            try:
                have = len(store.done_indices(sid))
                click.echo(f"{have} of {plan.n_points} points have a result in {out / STORE_NAME}; "
                           "run the same command to resume.", err=True)
            except Exception:  # noqa: BLE001 - the store may be what failed; the error follows anyway
                pass
            raise
        finally:
            if bar is not None:
                bar.close()
        confirmation = None
        if fast and confirm_n:
            from netgen.studies import confirm_sample

            confirmation = confirm_sample(store, sid, plan.base_doc, confirm_n, seed=seed)
        summary = summarize(store.rows(sid), spec_list, plan.n_points)  # streamed, one row at a time
        if confirmation is not None:
            summary["confirmation"] = confirmation
        from netgen.studies import drive_compression

        compression = drive_compression(store.rows(sid))
        if compression is not None:
            summary["compression"] = compression
        first_failed = store.con.execute(
            "SELECT idx, error FROM points WHERE sweep_id = ? AND status = 'failed' ORDER BY idx LIMIT 1", (sid,)
        ).fetchone()
        first_lost = store.con.execute(
            "SELECT idx, error FROM points WHERE sweep_id = ? AND status = 'lost' ORDER BY idx LIMIT 1", (sid,)
        ).fetchone()
        given_up = sum(n >= attempts for n in store.lost_attempts(sid).values())
        in_ngspice = None
        if fast:  # points the estimate did not apply to (stored with engine ngspice and not confirmed)
            where = "FROM points WHERE sweep_id = ? AND engine = 'ngspice' AND confirmation IS NULL"
            (n_ng,) = store.con.execute(f"SELECT COUNT(*) {where}", (sid,)).fetchone()
            if n_ng:
                (text,) = store.con.execute(f"SELECT metrics {where} ORDER BY idx LIMIT 1", (sid,)).fetchone()
                in_ngspice = (n_ng, json.loads(text or "{}").get("engine_note"))
    csv_path = export_csv(out / STORE_NAME, out / "sweep.csv")
    made = {}
    if not no_plots:
        from netgen.studies import plot_sweep

        made = plot_sweep(out / STORE_NAME, out, spec_list)
    from netgen.fileio import atomic_write_text

    atomic_write_text(out / "summary.json", json.dumps(summary, indent=2, sort_keys=True) + "\n")
    lost = f", {summary['lost']} lost" if summary["lost"] else ""
    click.echo(f"{plan.n_points} points: {summary['ok']} ok, {summary['not_settled']} not settled, "
               f"{summary['failed']} failed{lost} ({counts['skipped']} already stored, {counts['ran']} run now).")
    _echo_compression(summary.get("compression"))
    for name, n_pass in summary["specs"].items():
        click.echo(f"  {name}: {n_pass}/{summary['results']} pass")
    if "yield" in summary:
        missing = (f"; {summary['missing']} point(s) without a result are left out" if summary["missing"] else "")
        click.echo(f"yield {100 * summary['yield']:.1f}% ({summary['passed']}/{summary['results']}), "
                   f"95% interval {100 * summary['yield_lo']:.1f}%..{100 * summary['yield_hi']:.1f}% "
                   f"(Clopper-Pearson; failed and not-settled points count as failing{missing})")
    if summary["lost"]:
        again = summary["lost"] - given_up
        click.echo(f"  {summary['lost']} point(s) lost to infrastructure faults, not to the design "
                   f"(first: point {first_lost[0]}: {first_lost[1].splitlines()[0]}); "
                   + (f"{again} will run again when the same command is repeated" if again else "")
                   + ("; " if again and given_up else "")
                   + (f"{given_up} were tried {attempts} times: repeat with a higher --attempts to try again"
                      if given_up else "") + ".")
    if fast:
        if in_ngspice:
            from netgen.studies import fallback_reason

            why = fallback_reason(in_ngspice[1])
            click.echo(f"fast path: {in_ngspice[0]} of {summary['results']} points ran in ngspice: {why}.")
        _echo_confirmation(summary.get("confirmation"))
    if first_failed:
        n_failed = summary["failed"]
        more = f" (and {n_failed - 1} more; see the error column of sweep.csv)" if n_failed > 1 else ""
        first_line = (str(first_failed[1] or "").splitlines() or ["no message stored"])[0]
        click.echo(f"  point {first_failed[0]} failed: {first_line}{more}")
    click.echo(f"wrote {out / STORE_NAME}, {csv_path}" + (f", {len(made)} plots" if made else ""))


def _echo_confirmation(conf: dict | None) -> None:
    """One line on the ngspice confirmation of a fast sweep."""
    if not conf or not conf["confirmed"]:
        click.echo("fast path: no point confirmed in ngspice (--confirm 0 or no estimate point).")
        return

    def pct(x):
        return "-" if x is None else f"{100 * x:.3f} %"

    click.echo(f"fast path: {conf['confirmed']} points confirmed in ngspice, largest difference "
               f"Pout {pct(conf['worst_pout_rel'])}, efficiency {pct(conf['worst_efficiency_rel'])}; "
               f"{conf['flagged']} beyond {100 * conf['tolerance']:.1f} % (flagged, re-run in ngspice)"
               + (f"; {conf['errors']} could not be run" if conf["errors"] else ""))


def main(argv=None) -> None:
    """Run the command alone (``python -m netgen.cli.studies``), errors as one line and exit code 2."""
    from netgen.lifeline import raise_on_sigterm

    raise_on_sigterm()
    try:
        sweep_command.main(args=argv, prog_name="pashape sweep", standalone_mode=False)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except NetgenError as exc:
        click.echo(f"Error: {exc}", err=True)
        sys.exit(exc.exit_code)
    except click.exceptions.Abort as exc:
        from netgen.lifeline import EXIT_SIGTERM, Terminated

        sys.exit(EXIT_SIGTERM if isinstance(exc.__cause__, Terminated) else 130)


if __name__ == "__main__":  # pragma: no cover
    main()


def _echo_compression(comp: dict | None) -> None:
    """The compression points of a drive sweep (netgen.studies.compression), one line."""
    if not comp:
        return
    parts = []
    for key, label in (("p1db", "P1dB"), ("p3db", "P3dB")):
        c = comp.get(key)
        parts.append(f"{label} at Pin {c['pin_dbm']:.2f} dBm, Pout {c['pout_dbm']:.2f} dBm" if c
                     else f"{label} not reached")
    g0 = comp.get("reference_gain_db")
    lead = f"peak gain {g0:.2f} dB; " if g0 is not None else ""
    click.echo("  " + lead + "; ".join(parts))
