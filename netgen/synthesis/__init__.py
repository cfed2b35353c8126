"""Synthesis: a Design becomes a sized network, with the published formula behind every value.

Takes a :class:`netgen.design.Design`; gives a :class:`netgen.design.SizedDesign` (every component's
value and how it was derived), the ideal efficiency bound of its class and the network's drain
impedance Z(f) computed in numpy (ABCD matrices), independent of any simulator.

Modules: ``builder`` (the component builder and shared sizing formulas: Ropt, L-section,
quarter-wave), ``sizers`` (one sizing function per topology),
``topologies`` (the registry: name -> template, sizing, bound), ``theory`` (ideal bounds and
closed forms), ``network`` (the numpy network model), ``sizing`` (``size``: the entry point,
overrides, the sized TOML file).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "COUT_Q_WARN": "sizing",
    "TOPOLOGY_REGISTRY": "topologies",
    "bound_for": "theory",
    "class_e_fmax_hz": "intrinsic",
    "comp_branches": "network",
    "controlled_pattern": "intrinsic",
    "parasitics": "intrinsic",
    "to_intrinsic": "intrinsic",
    "z_intrinsic": "network",
    "element_name": "builder",
    "get_topology": "topologies",
    "line_plan": "network",
    "loss_ohm": "losses",
    "loss_net": "losses",
    "r_law_ohm": "losses",
    "line_r_law_ohm": "losses",
    "z_loss_net": "losses",
    "fit_harmonics": "losses",
    "match_orientation": "builder",
    "resolve_topology": "topologies",
    "size": "sizing",
    "sized_toml_text": "sizing",
    "tail_plan": "network",
    "topology_names": "topologies",
    "write_sized_toml": "sizing",
    "z_drain": "network",
    "z_drain_with_section": "network",
    "abcd_section": "network",
    "angelov_bias_point": "input_match",
    "angelov_input_z": "input_match",
    "input_loss_ohm": "input_match",
    "input_network_z": "input_match",
    "gate_voltage_ratio": "input_match",
    "junction_c": "input_match",
    "pozar_l_section": "input_match",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
