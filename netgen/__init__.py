"""pashape: size, render and simulate RF power-amplifier output networks.

The pipeline, one sub-package per stage (DEVELOPERS.md has the map): ``design`` (TOML ->
Design) -> ``synthesis`` (Design -> SizedDesign) -> ``netlist`` (SizedDesign -> netlist text) ->
``simulator`` and ``periodic`` (netlist -> settled Waveforms) -> ``results`` (Waveforms ->
metrics, plots, report); ``pipeline`` runs one design through all of it; ``studies`` and
``handoff`` run many; ``cli`` is the command line.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
