"""Periodic steady state: a netlist run until its drain waveforms repeat, and the proof that they do.

Takes a sized design (or netlist makers); gives :class:`netgen.design.Waveforms` of settled
periods with the settled flag, the judge's history and how the run started. ``simulate`` is the
one entry point: it computes the periodic state directly (``estimator``), writes it back into the
netlist as initial conditions (``initial_state``), runs ngspice in chunks while the judge
(``settle``) decides, and falls back to a DC start with bias-mode nulling (``bias_nulling``)
where the estimate does not apply. ``pwl_fourier`` holds the exact Fourier integrals of
piecewise-linear waveforms used here and by the results.
"""

from netgen.lazy import lazy_exports

# bound eagerly: the function ``fourier`` shares its name with the module defining it, and a later
# ``import netgen.periodic.pwl_fourier`` (first load) would otherwise leave the module in its place
from .pwl_fourier import fourier  # noqa: F401

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "PeriodicState": "estimator",
    "blas_single_thread": "collocation",
    "dc_initial_conditions": "bias_nulling",
    "estimate": "estimator",
    "fourier": "pwl_fourier",
    "fourier_pwl": "pwl_fourier",
    "periods_in": "pwl_fourier",
    "pwl_mean_square": "pwl_fourier",
    "pwl_mean_product": "pwl_fourier",
    "pwl_point_energy": "pwl_fourier",
    "simulate": "steady",
    "simulate_netlist": "steady",
    "with_initial_state": "initial_state",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
