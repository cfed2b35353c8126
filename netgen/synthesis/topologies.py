"""The topology registry: name -> template file, sizing function, ideal bound, description.

A design may name its own template (``design.topology = "my_net.j2"``); such a template says
which built-in sizing it uses with a Jinja comment on any line, e.g. ``{# sizing: class_f_line #}``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Callable

from netgen.design import Design
from netgen.errors import DesignError, RenderError

from . import sizers

__all__ = ["Topology", "TOPOLOGY_REGISTRY", "get_topology", "resolve_topology", "topology_names"]


@dataclass(frozen=True)
class Topology:
    """One built-in topology.

    Attributes
    ----------
    name : str
    template : str
        Template file name inside the ``netgen.templates`` package.
    sizer : callable
        ``sizer(builder, ropt_ohm)`` from :mod:`netgen.synthesis.sizing`.
    wave_class : str
        ``F``, ``invF``, ``B`` or ``E``: the Ropt formula used.
    bound : str
        Key of the ideal efficiency bound (read by :mod:`netgen.synthesis.theory`).
    description : str
    """

    name: str
    template: str
    sizer: Callable
    wave_class: str
    bound: str
    description: str


TOPOLOGY_REGISTRY: dict[str, Topology] = {
    t.name: t
    for t in (
        Topology("class_f_line", "class_f_line.j2", sizers.size_class_f_line, "F", "class_f",
                 "Class F: quarter-wave series line Z0 = sqrt(Ropt RL) with a parallel f0 tank at the load."),
        Topology("class_f_feed", "class_f_feed.j2", sizers.size_class_f_feed, "F", "class_f",
                 "Class F: quarter-wave line as the DC feed, series f0 resonator and L-section match."),
        Topology("class_f_lumped", "class_f_lumped.j2", sizers.size_class_f_lumped, "F", "class_f",
                 "Class F, lumped: series parallel-resonators at 3f0..(2N+1)f0, shunt f0 tank, L-section match."),
        Topology("inverse_f_line", "inverse_f_line.j2", sizers.size_inverse_f_line, "invF", "inverse_f",
                 "Inverse class F: quarter-wave line ending in a series f0 resonator in series with the load."),
        Topology("class_e", "class_e.j2", sizers.size_class_e, "E", "class_e",
                 "Class E (Sokal): shunt C, series-tuned load with excess reactance, L-section match."),
        Topology("class_b_tuned", "class_b_tuned.j2", sizers.size_class_b_tuned, "B", "class_b",
                 "Tuned-load class B: DC block, parallel f0 tank (at the drain for RF), L-section match."),
    )
}

_SIZING_TAG = re.compile(r"\{#-?\s*sizing:\s*([A-Za-z_][A-Za-z0-9_]*)\s*-?#\}")


def topology_names() -> list[str]:
    """Built-in topology names in registry order."""
    return list(TOPOLOGY_REGISTRY)


def get_topology(name: str) -> Topology:
    """The built-in topology ``name``.

    Raises
    ------
    DesignError
        Naming ``design.topology`` and the valid names.
    """
    try:
        return TOPOLOGY_REGISTRY[name]
    except KeyError:
        raise DesignError(
            f"design.topology: '{name}' is not a built-in topology; use one of {', '.join(TOPOLOGY_REGISTRY)}."
        ) from None


def user_template_sizing(text: str, path: str) -> str:
    """The built-in sizing a user template declares with ``{# sizing: <topology> #}``."""
    m = _SIZING_TAG.search(text)
    if not m:
        raise RenderError(
            f"{path}: a user template must say which sizing it uses, e.g. a line '{{# sizing: class_f_line #}}'."
        )
    if m.group(1) not in TOPOLOGY_REGISTRY:
        raise RenderError(f"{path}: sizing '{m.group(1)}' is not a built-in topology; use one of {', '.join(TOPOLOGY_REGISTRY)}.")
    return m.group(1)


def resolve_topology(design: Design) -> Topology:
    """The registry entry whose sizing ``design`` uses (a user template names one)."""
    if design.topology in TOPOLOGY_REGISTRY:
        return TOPOLOGY_REGISTRY[design.topology]
    try:
        path = design.template_path
        found = path is not None and path.is_file()
    except (OSError, ValueError):  # e.g. a name too long for the file system
        found = False
    if not found:
        raise DesignError("design.topology: the template file named there was not found next to the design; check the path.")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise DesignError(f"design.topology: cannot read template '{design.topology}' ({exc}); check the file.") from None
    return TOPOLOGY_REGISTRY[user_template_sizing(text, str(path))]
