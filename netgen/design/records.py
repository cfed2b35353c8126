"""Frozen records passed between pipeline stages.

``Design`` (netgen.design.schema) -> :class:`SizedDesign` (netgen.synthesis.sizing) -> netlist
text (netgen.netlist.renderer) -> :class:`Waveforms` (netgen.periodic.steady) -> metrics dict
(netgen.results.analysis, the metrics.json contract).

All floats are SI; names carry the unit.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from .schema import Design

__all__ = ["Component", "SizedDesign", "Waveforms", "COMPONENT_UNITS"]

#: component kind -> SI unit of its value
COMPONENT_UNITS = {"L": "H", "C": "F", "R": "ohm", "Z0": "ohm", "TD": "s"}


@dataclass(frozen=True)
class Component:
    """One sized component value.

    Attributes
    ----------
    name : str
        Identifier used by templates and by ``[network.values]`` overrides
        (``tank_l``, ``line_z0``).
    kind : str
        ``L`` (H), ``C`` (F), ``R`` (ohm), ``Z0`` (ohm, line impedance) or
        ``TD`` (s, line delay).
    value : float
        SI value.
    how : str
        One line saying how it was obtained: the formula and its source, or
        "set in [network.values]".
    role : str
        What it does in the circuit: ``feed`` (DC-feed choke), ``block``
        (DC block), ``tank``, ``resonator``, ``match``, ``line``, ``shunt``,
        ``series``, ``load``. The steady-state warm start uses ``feed`` and
        ``block``.
    lossy : bool
        Whether the template adds its loss (inductor Q, capacitor ESR).
    """

    name: str
    kind: str
    value: float
    how: str
    role: str = ""
    lossy: bool = True

    @property
    def unit(self) -> str:
        return COMPONENT_UNITS[self.kind]


@dataclass(frozen=True)
class SizedDesign:
    """A design with every component valued.

    Attributes
    ----------
    design : Design
    ropt_ohm : float
        Drain load resistance at f0 the network presents.
    components : Mapping[str, Component]
        In circuit order (drain to load).
    derived : Mapping[str, tuple[float, str, str]]
        Other derived numbers: name -> (SI value, unit, how), e.g. the
        physical length of a line, the expected Idc, the device imax.
    idc_est_a : float
        Expected DC supply current (for the warm start), A.
    pout_est_w : float
        Expected fundamental load power at the ideal bound, W.
    input_network : Mapping[str, Component]
        The gate side of a driven device (angelov: the input match, DC block and gate feed,
        netgen.synthesis.input_match), in circuit order from the source to the gate; empty
        without one. Not part of ``components`` (the output network).
    """

    design: Design
    ropt_ohm: float
    components: Mapping[str, Component]
    derived: Mapping[str, tuple] = field(default_factory=dict)
    idc_est_a: float = 0.0
    pout_est_w: float = 0.0
    input_network: Mapping[str, Component] = field(default_factory=dict)

    def value(self, name: str) -> float:
        """SI value of component ``name``."""
        return self.components[name].value

    def digest(self) -> str:
        """Short SHA-256 of every input and sized value; changes iff the sized design changes."""
        payload = {
            "design": {k: _digest_repr(k, v) for k, v in sorted(vars(self.design).items()) if k not in ("raw", "source")},
            "ropt": repr(self.ropt_ohm),
            "components": [(c.name, c.kind, repr(c.value), c.role, c.lossy) for c in self.components.values()],
            "derived": {k: repr(v[0]) for k, v in sorted(self.derived.items())},
        }
        if self.input_network:
            payload["input_network"] = [(c.name, c.kind, repr(c.value), c.role) for c in self.input_network.values()]
        return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()[:16]


#: device keys added after digests were first recorded, with the value that changes nothing: left
#: out of the digest at that value, so a design without them keeps its digest
_LATER_KEYS = {"ri_ohm": 0.0}


def _digest_repr(key: str, value) -> str:
    """``repr(value)``, except that a device with the linear drain-source capacitance (``cds_law``
    = "linear", the default) leaves out the junction law's keys, which do not change its netlist,
    and a key of :data:`_LATER_KEYS` at its neutral value is left out: the digest of every design
    without a junction Cds or an Ri stays what it was before the keys existed."""
    if key != "device" or not dataclasses.is_dataclass(value):
        return repr(value)
    linear = getattr(value, "cds_law", "linear") == "linear"
    kept = [f for f in dataclasses.fields(value) if f.repr and not (linear and f.name.startswith("cds_"))
            and not (f.name in _LATER_KEYS and getattr(value, f.name) == _LATER_KEYS[f.name])]
    # the dataclass repr's own form, so a device with every field kept gives repr(value)
    return f"{type(value).__name__}(" + ", ".join(f"{f.name}={getattr(value, f.name)!r}" for f in kept) + ")"


@dataclass(frozen=True)
class Waveforms:
    """Settled periodic waveforms, the input of the analysis stage.

    Attributes
    ----------
    f0_hz : float
    t_s : ndarray
        Uniform time grid over an integer number of periods (usually 2),
        starting at 0, ``points_per_cycle`` samples a period, end excluded.
    v : dict[str, ndarray]
        Node voltages, V. Always ``drain``, ``vdd`` and ``load``; ``gate`` for
        driven devices; the nodes of every ``RLOSS_*`` resistor.
    i : dict[str, ndarray]
        Currents, A: ``drain`` (into the device's drain terminal, including its
        output capacitance), ``switch`` (through the switch/channel only),
        ``supply`` (delivered by the Vdd source, positive when it supplies
        power), ``gate`` (into the gate, where driven).
    settled : bool
    cycles : int
        Cycles simulated in all.
    history : dict[str, ndarray]
        Per-cycle traces used to judge convergence (``pdc_w``, ``pload_w``), one
        value per simulated cycle.
    note : str
        Why it did not settle, or how it settled.
    peaks : dict[str, float]
        Extremes over the settled window taken from the simulator's own time
        points (not the resampled grid, which can step over a narrow switching
        spike): ``vd_max_v``, ``vd_min_v``, ``id_max_a``, ``id_min_a``. Empty
        when not available.
    fourier : dict[str, ndarray]
        Complex Fourier coefficients c_0..c_N over the settled window (N =
        sim.harmonics), computed exactly from the simulator's own piecewise-linear
        time points (no resampling): keys ``drain_v``, ``drain_i``, ``load_v``,
        ``supply_i`` and others where available. Convention x(t) = c_0 +
        sum |c_n| cos(n w0 t + angle c_n) (c_n, n >= 1, are peak amplitudes).
        Empty when not available (the analysis then uses the uniform grid).
    start : dict
        How the run started: ``method`` (``"periodic"``: on the periodic state computed from the
        netlist, netgen.periodic.estimator; ``"dc"``: the DC state of feed and block; ``"cold"``: from zero),
        ``reason`` (why not periodic, where it was not) and, for ``"periodic"``, the estimate's
        own ``pdc_w``, ``pout_w`` and ``pload_w`` (W), an independent check of ngspice's values.
    points : dict[str, ndarray]
        The simulator's own (non-uniform) time points over the averaged window, the same window
        as ``fourier``: ``t_s`` (s, from the window start) and ``v:<node>`` / ``i:<name>`` with
        the names and signs of ``v`` and ``i``. The analysis integrates powers and losses over
        them exactly (piecewise-linear, netgen.periodic.pwl_fourier) so that Pdc, Pout and every
        loss share one window and one quadrature. Empty when not available (the uniform grid
        is used).
    """

    f0_hz: float
    t_s: np.ndarray
    v: dict
    i: dict
    settled: bool
    cycles: int
    history: dict = field(default_factory=dict)
    note: str = ""
    peaks: dict = field(default_factory=dict)
    fourier: dict = field(default_factory=dict)
    start: dict = field(default_factory=dict)
    points: dict = field(default_factory=dict)
