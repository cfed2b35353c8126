"""Netlists: a sized design rendered to SPICE text, and rendered text read back.

Takes a :class:`netgen.design.SizedDesign`; gives deterministic netlist text in the ngspice or
the portable SPICE3 dialect (sandboxed Jinja, StrictUndefined). Reading back: the cards,
parameters, source waveforms and device expressions of a netlist, as the periodic estimate and
the analysis need them.

Modules: ``renderer`` (Jinja environment, dialects, header), ``portable`` (the strict portable
subset checker), ``safety`` (what a netlist and its model files may hold: no control
command, no file outside the design folder), ``cards`` (reading a netlist back; SPICE numbers), ``touchstone`` (Touchstone
blocks: read, check, evaluate) and ``blockfit`` (their rational fit and SPICE subcircuit).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "Block": "touchstone",
    "BLOCK_SUBCKT": "touchstone",
    "Card": "cards",
    "GROUND": "cards",
    "SourceWaveform": "cards",
    "Unsupported": "cards",
    "card_params": "cards",
    "cds_junction": "renderer",
    "check_model_file": "safety",
    "check_netlist_text": "safety",
    "check_portable": "portable",
    "design_block": "touchstone",
    "device_expression": "cards",
    "format_problems": "portable",
    "loss_elements": "renderer",
    "model_cards": "cards",
    "netlist_elements": "cards",
    "parse_spice_number": "cards",
    "portable_cards": "portable",
    "read_cards": "cards",
    "render": "renderer",
    "source_waveform": "cards",
    "spice_value": "cards",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
