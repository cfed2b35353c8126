"""Periodic steady state: a netlist run until its drain waveforms repeat, and the proof that they do.

Takes a sized design (or netlist makers); gives :class:`netgen.design.Waveforms` of settled
periods with the settled flag, the judge's history and how the run started. ``simulate`` is the
one entry point: it computes the periodic state directly (``estimator``), writes it back into the
netlist as initial conditions (``initial_state``), runs ngspice in chunks while the judge
(``settle``) decides, and falls back to a DC start with bias-mode nulling (``bias_nulling``)
where the estimate does not apply. ``fourier`` holds the exact Fourier integrals of
piecewise-linear waveforms used here and by the results.
"""

from importlib import import_module

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "PeriodicState": "estimator",
    "dc_initial_conditions": "bias_nulling",
    "estimate": "estimator",
    "fourier_series": "fourier",
    "fourier_pwl": "fourier",
    "periods_in": "fourier",
    "pwl_mean_square": "fourier",
    "simulate": "steady",
    "simulate_netlist": "steady",
    "with_initial_state": "initial_state",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    try:
        module = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return list(__all__)
