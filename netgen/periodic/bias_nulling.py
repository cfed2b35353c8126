"""The DC warm start with bias-mode nulling (the start where netgen.periodic.estimator does not apply).

:func:`dc_initial_conditions` sets every inductor and capacitor to its DC state (a DC operating
point of the passive network sinking the estimated device current); :func:`with_aux_sources`
adds zero-valued auxiliary DC sources across the feed inductors and in series with the DC
blocks, and :class:`BiasNulling` steers them at a few cycle boundaries so that the slow
choke-block mode sits at its periodic value (docs/simulation.md, "Nulling the slow bias mode").
"""

from __future__ import annotations

from dataclasses import dataclass, field

from netgen import simulator
from netgen.netlist import netlist_elements

from .settle import LATE_CHUNK_CYCLES, SettleCheck

__all__ = ["AuxSource", "with_aux_sources", "BiasNulling", "dc_initial_conditions", "CORRECT_AT"]

#: cycle boundaries (cycles completed) at which the auxiliary bias sources are corrected
CORRECT_AT = (6, 10, 14, 18, 22)


@dataclass(frozen=True)
class AuxSource:
    """One auxiliary DC source added for the bias correction (see :func:`with_aux_sources`).

    ``kind`` is ``"feed"`` (a current source across a feed element, A) or ``"block"`` (a voltage
    source in series with a DC-block capacitor, V); ``element`` its netlist name; ``node`` the
    node whose cycle mean it steers (the block's DC side) or the saved feed current vector
    (``l_feed#branch``); ``base``, ``slope``: that quantity's periodic cycle mean is
    ``base + slope*Idc`` (from two DC operating points).
    """

    kind: str
    element: str
    vector: str
    base: float
    slope: float


def with_aux_sources(netlist: str, feeds, blocks, dc_a: dict, dc_b: dict, idc_a: float,
                     idc_b: float) -> tuple[str, list[AuxSource]]:
    """The transient netlist with zero-valued auxiliary DC sources at the feed and DC-block elements.

    ``I_AUX_FEED<k> a b DC 0`` in parallel with each feed element ``X a b`` and
    ``V_AUX_BLOCK<k> d aux_blk<k> DC 0`` in series with each block capacitor on its DC side
    ``d`` (the node with the larger DC voltage). At zero they change nothing; a constant value
    changes no periodic voltage or current of the real circuit except the split of DC current
    between the feed and its source, and the DC voltage of the capacitor (both dissipate no
    average power in the periodic state: their DC quantity times a zero-mean partner).

    Parameters
    ----------
    feeds, blocks : sequence of str
        Element names (``L_feed``, ``C_block``); names not in the netlist are skipped.
    dc_a, dc_b : dict
        DC operating points of the passive network (``run_op`` vectors) with the drain sinking
        ``idc_a`` and ``idc_b`` A; the periodic cycle means are affine in the mean drain current
        (the network is linear; over a period an inductor's mean voltage and a capacitor's mean
        current vanish, so the cycle means satisfy the DC equations).

    Returns
    -------
    (netlist, sources)
    """
    lines = netlist.splitlines()
    index = {}
    for n, raw in enumerate(lines):
        toks = raw.split()
        if toks and not raw.lstrip().startswith(("*", "+", ".")):
            index[toks[0].upper()] = n
    out_extra: list[str] = []
    sources: list[AuxSource] = []
    span = idc_b - idc_a

    def affine(key: str) -> tuple[float, float]:
        a, b = float(dc_a.get(key, 0.0)), float(dc_b.get(key, 0.0))
        slope = (b - a) / span
        return a - slope * idc_a, slope

    for k, name in enumerate(feeds):
        n = index.get(name.upper())
        if (n is None or not name.upper().startswith("L")
                or n + 1 < len(lines) and lines[n + 1].lstrip().startswith("+")):
            continue
        toks = lines[n].split()
        src = f"I_AUX_FEED{k or ''}"
        out_extra.append(f"{src} {toks[1]} {toks[2]} DC 0")
        vec = f"{toks[0].lower()}#branch"
        base, slope = affine(vec)
        sources.append(AuxSource("feed", src.lower(), vec, base, slope))
    for k, name in enumerate(blocks):
        n = index.get(name.upper())
        if n is None or n + 1 < len(lines) and lines[n + 1].lstrip().startswith("+"):
            continue
        toks = lines[n].split()
        va = 0.0 if toks[1] in ("0", "gnd") else float(dc_a.get(toks[1].lower(), 0.0))
        vb = 0.0 if toks[2] in ("0", "gnd") else float(dc_a.get(toks[2].lower(), 0.0))
        side = 1 if abs(va) >= abs(vb) else 2
        node = toks[side]
        if node in ("0", "gnd"):
            continue
        src, aux = f"V_AUX_BLOCK{k or ''}", f"aux_blk{k}"
        toks[side] = aux
        lines[n] = " ".join(toks)
        out_extra.append(f"{src} {node} {aux} DC 0")
        base, slope = affine(node.lower())
        sources.append(AuxSource("block", src.lower(), node.lower(), base, slope))
    if not sources:
        return netlist, []
    at = max(i for i, ln in enumerate(lines) if ln.strip()) if lines else 0
    if lines[at].strip().lower().startswith(".end"):
        lines[at:at] = out_extra
    else:
        lines += out_extra
    return "\n".join(lines) + "\n", sources


@dataclass
class BiasNulling(SettleCheck):
    """A :class:`SettleCheck` that also steers the auxiliary bias sources at cycle boundaries.

    At each cycle count in ``correct_at`` (a deadbeat step on the two slow states):
    Idc = cycle-mean drain current; each block source moves by the error of its DC node's cycle
    mean against ``base + slope*Idc``; each feed source is set so that feed element + source
    carry ``base + slope*Idc``. Cycle means are extrapolated half a cycle to the boundary with
    the last two cycles' trend. After the last correction the sources stay constant (the circuit
    is then exactly equivalent to the real one) and the judge sees only the cycles after it.
    """

    sources: list = field(default_factory=list)
    correct_at: tuple = CORRECT_AT
    late_chunk_cycles: int = LATE_CHUNK_CYCLES
    values: dict = field(default_factory=dict)
    log: list = field(default_factory=list)
    scale_idc: bool = True
    def _end(self, name: str, k: int) -> float:
        """Cycle mean of ``name`` extrapolated to the boundary after cycle k: two-cycle means
        (a period-2 component of line designs cancels), trend from the two pairs before."""
        m = self.means[name] if name != "vidrain#branch" else self.idrain_a
        last, prev = 0.5 * (m[k - 1] + m[k - 2]), 0.5 * (m[k - 3] + m[k - 4])
        return last + 0.5 * (last - prev)

    def __call__(self, t_end: float, vecs):
        ok, message = super().__call__(t_end, vecs)
        n = len(self.pdc_w)
        T = self.period_s
        pending = [c for c in self.correct_at if c > n]
        if n in self.correct_at and self.sources and n >= 4 and len(self.idrain_a) >= n:
            idc = self._end("vidrain#branch", n)
            if self.scale_idc:
                feed = [x for x in self.sources if x.kind == "feed"]
                blk = [x for x in self.sources if x.kind == "block"]
                if feed and blk:
                    f_now = self._end(feed[0].vector, n) + self.values.get(feed[0].element, 0.0)
                    vd = self._end(blk[0].vector, n)
                    vt = blk[0].base + blk[0].slope * f_now
                    idc = f_now * vt / vd if vd > 0 else idc
            cmds = []
            for src in self.sources:
                target = src.base + src.slope * idc
                old = self.values.get(src.element, 0.0)
                if src.kind == "block":
                    new = old - (self._end(src.vector, n) - target)
                else:
                    new = target - self._end(src.vector, n)
                self.values[src.element] = new
                cmds.append(f"alter {src.element} dc = {new:.12g}")
            self.log.append((n, idc, dict(self.values)))
            self.judge_from = n
            ok, self.settled = False, False
            message += f"; bias correction at cycle {n}"
            nxt = pending[0] if pending else n + self.late_chunk_cycles
            return False, message, simulator.Resume(tuple(cmds), (nxt + 1e-6) * T)
        if ok:
            return ok, message
        nxt = pending[0] if pending else n + self.late_chunk_cycles
        return False, message, simulator.Resume((), (nxt + 1e-6) * T)


# ---------------------------------------------------------------- warm start

def dc_initial_conditions(op_netlist: str, tran_netlist: str, *, backend: str = "shared",
                          timeout_s: float = 60.0, op: dict | None = None) -> dict[str, float]:
    """Initial conditions from a DC operating point of the passive network.

    Every inductor of the op netlist gets its DC branch current (A), every capacitor
    its DC voltage (V, first node minus second); the device's ``COUT`` gets the DC
    drain voltage. Only elements that exist in ``tran_netlist`` are returned, keyed
    by their netlist spelling (``L_feed``). ``op``: the op netlist's vectors when already run.
    """
    if op is None:
        op = simulator.run_op(op_netlist, backend=backend, timeout_s=timeout_s)
    elems = netlist_elements(op_netlist)
    tran = {k.upper(): v for k, v in netlist_elements(tran_netlist).items()}

    def volt(node: str) -> float:
        node = node.lower()
        return 0.0 if node in ("0", "gnd") else float(op.get(node, 0.0))

    ic: dict[str, float] = {}
    for key, tokens in elems.items():
        if key not in tran:
            continue
        name = tran[key][0]
        if key.startswith("L"):
            ic[name] = float(op.get(key.lower() + "#branch", 0.0))
        elif key.startswith("C"):
            ic[name] = volt(tokens[1]) - volt(tokens[2])
    if "COUT" in tran:
        ic[tran["COUT"][0]] = volt("drain")
    return ic
