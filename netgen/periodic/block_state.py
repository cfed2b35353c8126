"""The internal states of a Touchstone block's fitted subcircuit on the estimated periodic orbit.

ngspice runs a block as scikit-rf's state-space subcircuit (netgen.netlist.blockfit): per port j
and pole p_k a 1 F capacitor whose voltage x obeys ``dx/dt = p x + a_j`` (real pole) or, for a
conjugate pair, ``dz/dt = conj(p) z + 2 a_j`` with ``z = x_re + j x_im``, where
``a_j = (v_j + z0_j i_j)/(2 sqrt z0_j)`` is the incident power wave at port j (the gains of the
``G``/``F`` cards of that subcircuit). Started at zero these states would carry a transient as
slow as the block's slowest pole (a DC block with a feed choke: hundreds of cycles); started
here they begin on the orbit. In the trapezoidal rule's periodic steady state each DFT bin is
``X_k = b A_k / (s_k - p)`` with ``s_k = (2/h) j tan(pi k / M)`` (the bilinear transform, as in
netgen.periodic.estimator), for negative k too.
"""

from __future__ import annotations

import math
import re

import numpy as np

__all__ = ["block_initial_states", "with_block_states"]


def block_initial_states(state) -> dict[str, float]:
    """Capacitor name -> initial voltage (V) of every state capacitor of the block subcircuit at t = 0.

    Only for a subcircuit used by exactly one instance (each instance would need its own values
    in the one shared definition); empty otherwise.
    """
    out: dict[str, float] = {}
    by_sub: dict[str, list] = {}
    for inst, (blk, ports) in state.blocks.items():
        by_sub.setdefault(id(blk), []).append((inst, blk, ports))
    for uses in by_sub.values():
        if len(uses) != 1:
            continue
        inst, blk, ports = uses[0]
        M = state.points
        h = state.period_s / M
        k = np.fft.fftfreq(M, 1.0 / M)
        s = 1j * (2.0 / h) * np.tan(np.clip(math.pi * k / M, -math.pi / 2 * (1 - 1e-9), math.pi / 2 * (1 - 1e-9)))
        # sample index of t = 0 on the state's grid (grid point 0 is at t0_s)
        shift = np.exp(1j * 2 * math.pi * k * (-state.t0_s / state.period_s))
        for j, node in enumerate(ports):
            z0 = float(blk.z0_ohm[j])
            a = (state.voltage(node) + z0 * state.series[f"{inst.lower()}#p{j + 1}"]) / (2 * math.sqrt(z0))
            A = np.fft.fft(a) / M
            for n, p in enumerate(blk.fit.poles):
                if p.imag == 0:
                    out[f"CX{n + 1}_A{j + 1}"] = float(np.sum(A / (s - p.real) * shift).real)
                else:
                    z = complex(np.sum(2 * A / (s - np.conj(p)) * shift))
                    out[f"CX{n + 1}_RE_A{j + 1}"] = z.real
                    out[f"CX{n + 1}_IM_A{j + 1}"] = z.imag
    return out


def with_block_states(lines: list[str], subckt: str, ics: dict[str, float]) -> list[str]:
    """``lines`` with ``IC=`` on the state capacitors inside ``.subckt <subckt>``."""
    if not ics:
        return lines
    out, inside = [], False
    for ln in lines:
        low = ln.strip().lower()
        if low.startswith(".subckt") and len(low.split()) > 1 and low.split()[1] == subckt.lower():
            inside = True
        elif inside and low.startswith(".ends"):
            inside = False
        elif inside and ln[:1] in ("C", "c"):
            name = ln.split()[0].upper()
            if name in ics:
                ln = re.sub(r"\s+ic\s*=\s*\S+", "", ln, flags=re.IGNORECASE) + f" IC={ics[name]:.12g}"
        out.append(ln)
    return out
