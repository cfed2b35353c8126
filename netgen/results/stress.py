"""Stress on every part: peak voltage across each capacitor, peak and RMS current through each
inductor and capacitor, dissipation in each lossy part (metrics.json ``stress``).

Read from the settled waveforms (the uniform grid over the stored periods) and the transient
netlist: each ``L``/``C`` element's nodes, the inductor branch currents the run saved
(``Waveforms.i[<element>]``), and the ``RLOSS_<component>`` resistor in series with a lossy part
(docs/netlist_conventions.md). A capacitor's current is its ``RLOSS`` current where it has one,
else ``C dv/dt`` (periodic central difference). Peak voltage ``v_peak_v`` is max |v| (the DC
across a DC block included); ``v_ac_peak_v`` is max |v - mean v| (the RF swing alone).
A rating margin is the designer's (common practice: derate capacitors to about half their
rated voltage, inductors to their rated current); these are the values to derate from.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["part_stress", "stress_summary", "buildability_warnings", "acting_harmonic", "MIN_LUMPED_L_H", "MIN_LUMPED_C_F",
           "SRF_MARGIN"]

#: smallest lumped parts a designer can buy or build with a defined value (our rule of thumb: the
#: smallest catalogue chip parts are about 0.5 nH and 0.2 pF, and a pad or a via adds that much)
MIN_LUMPED_L_H = 0.5e-9
MIN_LUMPED_C_F = 0.2e-12
#: a lumped part is a distributed one above this fraction of a wavelength (common practice: lambda/10)
MAX_LUMPED_FRACTION = 0.1
#: a part's self-resonant frequency should be at least this many times the highest frequency it acts
#: at (common practice, recalled from memory: chip inductor and capacitor application notes ask for an
#: SRF well above the operating frequency, commonly 1.5-2 x or more; below that the effective value
#: drifts fast, L_eff = L/(1 - (f/SRF)^2), 33 % high at SRF/2)
SRF_MARGIN = 2.0


def _elements(netlist_text: str) -> dict[str, list[str]]:
    out = {}
    for raw in netlist_text.splitlines():
        line = raw.strip()
        if not line or line[0] in "*+.;":
            continue
        tok = line.split()
        out[tok[0].upper()] = tok
    return out


def _value(text: str) -> float | None:
    from netgen.netlist import parse_spice_number

    try:
        return parse_spice_number(text.split("=", 1)[-1])
    except ValueError:
        return None


def _v(wf, node: str):
    if node in ("0", "gnd"):
        return np.zeros_like(np.asarray(wf.t_s, float))
    got = wf.v.get(node, wf.v.get(node.lower()))
    return None if got is None else np.asarray(got, float)


def fast_mean(x: np.ndarray) -> float:
    """``float(np.mean(x))`` of a float array, bit for bit (np.mean is np.add.reduce divided by
    the count), without np.mean's argument handling (the analysis takes dozens a point)."""
    x = np.asarray(x, dtype=float)
    return float(np.add.reduce(x, axis=None) / x.size)


def _entries(parts: list[tuple]) -> dict[str, dict]:
    """The stress entries of ``parts`` [(element, kind, v or None, i or None, p_loss or None)]:
    peaks, the AC peak about the mean and the rms current, each reduction taken over all the parts
    at once (row by row, bit for bit the one-array reductions: np.max and fast_mean)."""
    out = {}
    for element, kind, _v, _i, p_loss in parts:
        out[element] = {"element": element, "kind": kind, "v_peak_v": None, "v_ac_peak_v": None, "i_peak_a": None,
                        "i_rms_a": None, "p_loss_w": None if p_loss is None else float(p_loss)}
    with_v = [(p[0], p[2]) for p in parts if p[2] is not None]
    if with_v:
        V = np.stack([v for _, v in with_v])
        mean = np.add.reduce(V, axis=1) / V.shape[1]
        for (element, _), peak, ac in zip(with_v, np.abs(V).max(axis=1).tolist(),
                                          np.abs(V - mean[:, None]).max(axis=1).tolist()):
            out[element]["v_peak_v"], out[element]["v_ac_peak_v"] = peak, ac
    with_i = [(p[0], p[3]) for p in parts if p[3] is not None]
    if with_i:
        current = np.stack([i for _, i in with_i])
        ms = np.add.reduce(current**2, axis=1) / current.shape[1]
        for (element, _), peak, m in zip(with_i, np.abs(current).max(axis=1).tolist(), ms.tolist()):
            out[element]["i_peak_a"], out[element]["i_rms_a"] = peak, math.sqrt(m)
    return out


def part_stress(wf, netlist_text: str, losses: dict | None = None) -> dict[str, dict]:
    """Element name -> ``element``, ``kind``, ``v_peak_v``, ``v_ac_peak_v``, ``i_peak_a``, ``i_rms_a``,
    ``p_loss_w`` (null where the run lacks a vector), for every L and C of the transient netlist.

    ``losses``: the loss budget (``RLOSS_<key>`` -> W, exact integrals over the averaged window,
    netgen.results.analysis); a part's dissipation is taken from it, so the two always agree.
    """
    el = _elements(netlist_text)
    dt = (wf.t_s[1] - wf.t_s[0]) if len(wf.t_s) > 1 else 1.0
    currents = {k.upper(): np.asarray(v, float) for k, v in wf.i.items()}
    budget = {k.lower(): w for k, w in (losses or {}).items()}
    rloss_at: dict[str, tuple] = {}  # first node -> the first RLOSS_* card from it, in netlist order
    for k, t in el.items():
        if k.startswith("RLOSS_") and len(t) >= 4:
            rloss_at.setdefault(t[1].lower(), (k, t))
    parts: list[tuple] = []
    for name, tok in el.items():
        kind = name[0]
        if kind not in "LC" or len(tok) < 4 or "__" in name:  # '__': a loss-ladder section (docs/losses.md)
            continue
        a, b = tok[1].lower(), tok[2].lower()
        va, vb = _v(wf, a), _v(wf, b)
        v = None if va is None or vb is None else va - vb
        # the series loss resistor of this part: RLOSS_* from node b (x_<component>) onwards
        # (RLOSS_<part>, not a ladder section RLOSS_<part>__s<k>, which carries only part of the current)
        rl_name, rl = rloss_at.get(b, (None, None)) if b.startswith("x_") else (None, None)
        sensed = rl_name is not None and "__" not in rl_name
        part_key = b[2:] if b.startswith("x_") else None
        i_r, p_loss = None, None
        if rl is not None:
            r = _value(rl[3])
            vr_a, vr_b = _v(wf, rl[1].lower()), _v(wf, rl[2].lower())
            if sensed and r and vr_a is not None and vr_b is not None:
                i_r = (vr_a - vr_b) / r
            if part_key in budget:
                p_loss = float(budget[part_key])
            elif i_r is not None:
                p_loss = float(fast_mean((vr_a - vr_b) ** 2) / r)
        if kind == "L":
            i = currents.get(name, i_r)
        else:
            c = _value(tok[3])
            i = i_r
            if i is None and v is not None and c:
                i = c * (np.roll(v, -1) - np.roll(v, 1)) / (2.0 * dt)
        parts.append((tok[0], kind, v, i, p_loss))
    return _entries(parts)


def stress_summary(stress: dict[str, dict]) -> dict:
    """The worst part of each kind (sweep columns and ``--spec``): ``stress_cap_v_peak_v`` (and its
    element), ``stress_ind_i_peak_a``, ``stress_max_loss_w``."""
    def worst(kind, key):
        rows = [(r[key], n) for n, r in stress.items() if r["kind"] == kind and r.get(key) is not None]
        return max(rows) if rows else (None, None)

    cv, cn = worst("C", "v_peak_v")
    li, ln = worst("L", "i_peak_a")
    losses = [(r["p_loss_w"], n) for n, r in stress.items() if r.get("p_loss_w") is not None]
    pl, pn = max(losses) if losses else (None, None)
    return {"stress_cap_v_peak_v": cv, "stress_cap_v_peak_part": cn, "stress_ind_i_peak_a": li,
            "stress_ind_i_peak_part": ln, "stress_max_loss_w": pl, "stress_max_loss_part": pn}


def acting_harmonic(sized) -> int:
    """Highest harmonic n the output network's parts must act at (as an L or a C), for the SRF check.

    The highest harmonic the topology controls (netgen.synthesis.controlled_pattern: class F opens
    and shorts, tuned-B shorts), at least f0; class E controls none by name, but its shunt capacitor
    and series resonator shape the switch current's harmonics: 3 f0 there (our rule).
    """
    from netgen.synthesis import controlled_pattern, resolve_topology

    topo = resolve_topology(sized.design)
    pattern = controlled_pattern(topo.name, sized.design)
    n = max(pattern) if pattern else 1
    if topo.wave_class == "E":
        n = max(n, min(3, int(sized.design.sim.harmonics)))
    return n


def buildability_warnings(sized) -> list[str]:
    """Parts that cannot be bought or built as lumped parts at this frequency, with what to do.

    Flags an inductor below :data:`MIN_LUMPED_L_H` or a capacitor below :data:`MIN_LUMPED_C_F`
    (parasitics of that size swamp them), and a part whose self-resonant frequency
    (``[network.srf]``, from its datasheet) is below :data:`SRF_MARGIN` times the highest harmonic
    it acts at (:func:`acting_harmonic`): near its SRF a part's reactance is no longer omega L or
    1/(omega C), and above it an inductor is a capacitor and a capacitor an inductor.
    """
    out = []
    d = sized.design
    n_act = acting_harmonic(sized)
    f_act = n_act * d.f0_hz
    for c in sized.components.values():
        if c.role == "comp":
            fix = "realise this Cout compensator branch as a transmission-line stub, or lower network.harmonics"
        else:
            fix = "choose a line-based topology or change network.loaded_q"
        if c.kind == "L" and c.value < MIN_LUMPED_L_H:
            out.append(f"part {c.name} = {c.value * 1e12:.3g} pH at {d.f0_hz / 1e6:.6g} MHz is below the smallest buildable "
                       f"inductor (about {MIN_LUMPED_L_H * 1e9:g} nH): {fix}")
        elif c.kind == "C" and c.value < MIN_LUMPED_C_F:
            out.append(f"part {c.name} = {c.value * 1e15:.3g} fF at {d.f0_hz / 1e6:.6g} MHz is below the smallest buildable "
                       f"capacitor (about {MIN_LUMPED_C_F * 1e12:g} pF): {fix}")
        srf = d.network.srf_hz.get(c.name)
        if srf is not None and srf < SRF_MARGIN * f_act:
            where = "below" if srf < f_act else "within a factor " + f"{SRF_MARGIN:g} of"
            kind = "inductor" if c.kind == "L" else "capacitor"
            out.append(f"part {c.name} ({kind}, {_value_text(c)}) has a self-resonant frequency of {srf / 1e6:.6g} MHz, "
                       f"{where} {n_act} f0 = {f_act / 1e6:.6g} MHz, the highest harmonic it acts at: choose a part with an SRF "
                       f"above {SRF_MARGIN * f_act / 1e6:.6g} MHz (a smaller case size or a smaller value), or a line-based "
                       "topology")
    return out


def _value_text(c) -> str:
    if c.kind == "L":
        return f"{c.value * 1e9:.4g} nH"
    return f"{c.value * 1e12:.4g} pF"
