"""The design description: what the designer asks for, parsed and checked.

Takes a TOML file (or a dict); gives a frozen :class:`Design` with every quantity in SI units.
Also holds the frozen records passed between the later stages (:class:`Component`,
:class:`SizedDesign`, :class:`Waveforms`), so every stage can depend on them.

Modules: ``quantities`` (text with units -> floats), ``key_table`` (the one table of keys and the file
limits), ``schema`` (loading, validation, defaults, the spec records), ``keys`` (dotted key paths; the key reference page, printed by
``python -m netgen.design``),
``records`` (the frozen records).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "BLOCK_SECTIONS": "key_table",
    "BlockSpec": "schema",
    "COMPONENT_UNITS": "records",
    "Component": "records",
    "Design": "schema",
    "DEVICE_PRESETS": "presets",
    "DeviceSpec": "schema",
    "DriveSpec": "schema",
    "SCHEMA": "key_table",
    "SimSpec": "schema",
    "SizedDesign": "records",
    "TOPOLOGIES": "key_table",
    "Waveforms": "records",
    "design_from_dict": "schema",
    "format_quantity": "quantities",
    "get_dotted": "keys",
    "load_design": "schema",
    "parse_quantity": "quantities",
    "reference_markdown": "keys",
    "set_dotted": "keys",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
