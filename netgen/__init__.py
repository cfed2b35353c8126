"""netgen: size, render and simulate RF power-amplifier output networks.

Pipeline (one module per stage): ``design`` (TOML -> Design) -> ``sizing``
(Design -> SizedDesign) -> ``render`` (SizedDesign -> netlist text) ->
``steady`` / ``engine`` (netlist -> settled Waveforms) -> ``analysis``
(Waveforms -> metrics dict) -> ``plots`` / ``report``.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
