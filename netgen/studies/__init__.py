"""Studies: many variants of one design (sweeps, load circles, tolerance Monte Carlo) and their yield.

Takes a design and the variation text; gives a plan of points, runs them (local process pool or
a Dask cluster), keeps every point in a resumable SQLite store, and draws the study's plots.

Modules: ``grammar`` (variations, load circles, tolerances, specs and yield), ``plan`` (the points of a
study, Monte Carlo draws, the summary), ``execute``
(running points), ``store`` (the SQLite store, CSV), ``plots`` (sweep figures), ``fast`` (metrics from
the periodic estimate alone, confirmed in ngspice), ``tune`` (bounded optimisation toward targets),
``loadpull`` (harmonic load-pull at the intrinsic plane), ``closure_plots`` (their figures),
``compression`` (P1dB and P3dB of a drive sweep), ``small_signal`` (the linearised two-port's S-parameters, scikit-rf).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "CONFIRM_TOL": "fast",
    "STORE_NAME": "store",
    "SweepStore": "store",
    "confirm_sample": "fast",
    "confirm_study": "loadpull_run",
    "compression_points": "compression",
    "drive_compression": "compression",
    "small_signal_two_port": "small_signal",
    "evaluate_estimate": "fast",
    "evaluate_fast": "fast",
    "evaluate_ngspice": "fast",
    "fallback_reason": "fast",
    "IdealDevice": "loadpull",
    "drive_current": "loadpull",
    "free_open_harmonics": "loadpull",
    "loadpull_outputs": "loadpull_run",
    "make_loadpull_plan": "loadpull",
    "parse_extremum": "tune",
    "parse_free": "tune",
    "parse_limit": "tune",
    "parse_target": "tune",
    "run_loadpull": "loadpull_run",
    "tune_design": "tune",
    "write_tuning": "tune_report",
    "export_csv": "store",
    "make_plan": "plan",
    "parse_spec": "grammar",
    "plot_sweep": "plots",
    "run_sweep": "execute",
    "summarize": "plan",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
