"""Working with the key table: dotted key paths (``design.vdd``) and the key reference page.

Both read :data:`netgen.design.schema.SCHEMA`; sweeps and tolerances address keys by dotted
paths, and ``python -m netgen.design`` prints the reference (docs/design_reference.md).
"""

from __future__ import annotations

from typing import Any

from netgen.errors import DesignError

from .key_table import _INF, SCHEMA
from .schema import closest_hint, plain_toml

__all__ = ["get_dotted", "set_dotted", "reference_markdown"]


def get_dotted(doc: dict, path: str) -> Any:
    """Value at a dotted key path (``design.vdd``) of a raw design document."""
    node: Any = doc
    for part in path.split("."):
        if not isinstance(node, dict) or part not in node:
            raise KeyError(path)
        node = node[part]
    return node


def set_dotted(doc: dict, path: str, value: Any) -> dict:
    """A copy of ``doc`` with the key at dotted ``path`` set to ``value``.

    Raises DesignError when the path names no key of the schema (with the closest one).
    """
    parts = path.split(".")
    if len(parts) < 2:
        raise DesignError(f"'{path}': a key path has a section and a key, e.g. design.vdd.")
    section, key = parts[0], parts[1]
    if section not in SCHEMA:
        raise DesignError(f"'{path}': unknown section '{section}'{closest_hint(section, SCHEMA)}")
    if key not in SCHEMA[section]:
        raise DesignError(f"'{path}': unknown key{closest_hint(key, SCHEMA[section])}")
    if key in ("values", "srf") and len(parts) != 3:
        raise DesignError(f"'{path}': name the component, e.g. network.{key}.tank_l.")
    if key not in ("values", "srf") and len(parts) != 2:
        raise DesignError(f"'{path}': too many parts; a key path is section.key.")
    out = plain_toml(doc)
    node = out
    for part in parts[:-1]:
        node = node.setdefault(part, {})
    node[parts[-1]] = value
    return out


def reference_markdown() -> str:
    """The key reference page (docs/design_reference.md) generated from :data:`SCHEMA`."""
    lines = [
        "# Design file reference",
        "",
        "Generated from `netgen/design/key_table.py` (`python -m netgen.design > docs/design_reference.md`).",
        "Quantities are text with units: `\"915 MHz\"`, `\"2.2nH\"`, `\"1.5p\"` (SPICE-style scale suffix, unit implied),",
        "`\"50 ohm\"`. SI prefixes are case-sensitive (`M` mega, `m` milli); `meg` is accepted for mega.",
        "A bare number where a unit is expected is an error. Keys are addressed by dotted paths (`design.vdd`).",
        "",
    ]
    for section, keys in SCHEMA.items():
        lines += [f"## [{section}]", "", "| key | unit | default | range | meaning |", "| --- | --- | --- | --- | --- |"]
        for key, spec in keys.items():
            unit = {"str": "text", "bool": "true/false", "int": "whole number", "": "number", "values": "table", "srf": "table of frequencies", "pins": "list"}.get(spec.unit, spec.unit)
            default = "required" if spec.required else ("-" if spec.default is None else f"`{spec.default}`")
            if spec.choices:
                rng = " / ".join(spec.choices)
            elif spec.lo is not None or spec.hi is not None:
                rng = f"{'>' if spec.lo_open else '>='} {spec.lo:g}" if spec.lo is not None else ""
                if spec.hi is not None and spec.hi != _INF:
                    rng += f", <= {spec.hi:g}"
            else:
                rng = ""
            lines.append(f"| `{key}` | {unit} | {default} | {rng} | {spec.doc} |")
        lines.append("")
    return "\n".join(lines)

