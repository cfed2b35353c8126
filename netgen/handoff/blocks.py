"""Touchstone files of a design's own network sections, and a block's files in a hand-off pack.

:func:`section_touchstone_text` writes the 2-port of a named section (``network``: drain to the
top of RLOAD without the DC feed; ``match``: the L-section match and load reactance) from the
numpy ABCD model (netgen.synthesis.network), so a design's ideal network can be re-imported as a
``[block]`` (the round trip of tests/test_touchstone.py). :func:`block_pack_files` gives the
files a pack carries for a design with a block: the original Touchstone file as it was read and
the fitted subcircuit ngspice ran.
"""

from __future__ import annotations

import numpy as np

__all__ = ["section_touchstone_text", "section_grid_hz", "block_pack_files", "DC_EVAL_FRACTION"]

#: the 0 Hz point is evaluated at this fraction of f0 (series capacitors are opens to ~1e-9 relative)
DC_EVAL_FRACTION = 1e-9


def section_grid_hz(f0_hz: float, n_max: int, steps_per_f0: int = 20) -> np.ndarray:
    """0 Hz, then f0/steps_per_f0 .. (n_max + 0.5) f0 in f0/steps_per_f0 steps (every n f0 on it), Hz."""
    k = np.arange(0, steps_per_f0 * n_max + steps_per_f0 // 2 + 1)
    return f0_hz * k / steps_per_f0


def section_touchstone_text(sized, section: str = "network", f_hz=None, z0_ohm: float = 50.0) -> str:
    """A 2-port Touchstone (v1.0, RI) of the sized design's ``section``, port 1 on the drain side.

    ABCD -> S with scikit-rf (``Network(a=...)``; the conversion of Pozar, "Microwave
    Engineering", table of two-port conversions). The 0 Hz point, where series capacitors make
    the ABCD matrix infinite, is evaluated at :data:`DC_EVAL_FRACTION` x f0 (said in the file's
    comment).
    """
    import skrf

    from netgen.synthesis import abcd_section

    d = sized.design
    f = section_grid_hz(d.f0_hz, d.sim.harmonics) if f_hz is None else np.asarray(f_hz, dtype=float)
    f_eval = np.where(f == 0, DC_EVAL_FRACTION * d.f0_hz, f)
    abcd = abcd_section(sized, f_eval, section)
    freq = skrf.Frequency.from_f(f, unit="Hz")
    comment = (f"pashape design {d.name}: section '{section}' of {d.topology} (port 1 drain side, port 2 at RLOAD), "
               f"ideal parts; 0 Hz evaluated at {DC_EVAL_FRACTION:g} f0; digest {sized.digest()}")
    ntw = skrf.Network(frequency=freq, a=abcd, z0=z0_ohm, name=f"{d.name}_{section}", comments=comment)
    return ntw.write_touchstone(return_string=True, form="ri", skrf_comment=False)


def block_pack_files(block, name: str) -> dict[str, str]:
    """Pack files of a block: ``<name>_block_<file>`` (the original, byte for byte as text) and
    ``<name>_block_fit.sub`` (the fitted subcircuit both netlists carry inline)."""
    original = block.path.read_text(encoding="utf-8", errors="strict")
    fit = block.fit
    head = (f"* pashape: rational fit of {block.name} (sha256 {block.sha256}), order {fit.order}, "
            f"worst |dS| {fit.worst_error:.3g} from DC to {block.n_required} f0, {fit.passivity}")
    return {f"{name}_block_{block.name}": original, f"{name}_block_fit.sub": head + "\n" + block.subckt + "\n"}

