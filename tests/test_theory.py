"""Ideal bounds and closed forms against published values (docs/check_values.md gives the sources)."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from netgen.design.schema import Design, NetworkSpec
from netgen.design.records import SizedDesign
from netgen.synthesis.theory import (
    CLASS_B_EFFICIENCY,
    bound_for,
    class_e_ideal,
    half_sine_harmonics,
    max_i1_over_idc,
    max_v1_over_vdc,
    maxflat_efficiency,
    maxflat_voltage_coefficients,
    raab_max_efficiency,
    square_wave_harmonics,
)

INF = math.inf

# Raab, "Maximum efficiency and output of class-F power amplifiers", IEEE Trans. MTT, 2001
# (values as listed in docs/check_values.md; tests/test_check_values.py recomputes them by linear programming)
RAAB_V1 = {1: 1.0, 3: 1.1547, 5: 1.2071, 7: 1.2311, INF: 4 / math.pi}
RAAB_I1 = {1: 1.0, 2: 1.4142, 4: 1.5000, 6: 1.5307, INF: math.pi / 2}
RAAB_ETA = {
    1: [0.5000, 0.5774, 0.6036, 0.6155, 0.6366],
    2: [0.7071, 0.8165, 0.8536, 0.8705, 0.9003],
    4: [0.7500, 0.8660, 0.9053, 0.9233, 0.9549],
    INF: [0.7854, 0.9069, 0.9481, 0.9669, 1.0000],
}


@pytest.mark.parametrize("n", list(RAAB_V1))
def test_max_v1(n):
    # Raab 2001 table (docs/check_values.md); table values are rounded to 4 decimals
    assert_allclose(max_v1_over_vdc(n), RAAB_V1[n], rtol=1e-3)


def test_max_v1_closed_forms():
    # Raab 2001: n = 3 gives 2/sqrt(3) (V3/V1 = 1/6); n = 5 gives (1 + sqrt 2)/2
    assert_allclose(max_v1_over_vdc(3), 2 / math.sqrt(3), rtol=1e-6)
    assert_allclose(max_v1_over_vdc(5), (1 + math.sqrt(2)) / 2, rtol=1e-6)


@pytest.mark.parametrize("m", list(RAAB_I1))
def test_max_i1(m):
    # Raab 2001 table (docs/check_values.md)
    assert_allclose(max_i1_over_idc(m), RAAB_I1[m], rtol=1e-3)


@pytest.mark.parametrize("m", list(RAAB_ETA))
def test_raab_efficiency_table(m):
    # Raab 2001 efficiency table, rows m, columns n = 1, 3, 5, 7, inf (docs/check_values.md), 1e-3 relative
    got = [raab_max_efficiency(n, m) for n in (1, 3, 5, 7, INF)]
    assert_allclose(got, RAAB_ETA[m], rtol=1e-3)


def test_maxflat_class_f():
    # Raab 1997, maximally flat: n = 3: V1 = 9/8 Vdc, V3 = Vdc/8, eta 88.36 %; n = 5: V1 = 75/64, eta 92.04 %
    assert_allclose(maxflat_voltage_coefficients(3), [-9 / 8, 1 / 8], rtol=1e-12)
    assert_allclose(maxflat_voltage_coefficients(5), [-15 / 8 + 5 / 4 * 3 / 4 - 3 / 8 * 10 / 16,
                                                      5 / 4 / 4 - 3 / 8 * 5 / 16, -3 / 8 / 16], rtol=1e-12)
    assert_allclose(-maxflat_voltage_coefficients(5)[0], 75 / 64, rtol=1e-12)
    assert_allclose(maxflat_efficiency(3), 0.8836, rtol=1e-3)
    assert_allclose(maxflat_efficiency(5), 0.9204, rtol=1e-3)


def test_maxflat_waveform_is_flat_and_nonnegative():
    # definition of maximal flatness (Raab 1997): v >= 0 with v(0) = v''(0) = 0
    th = np.linspace(-math.pi, math.pi, 10001)
    a = maxflat_voltage_coefficients(5)
    v = 1 + sum(ak * np.cos(k * th) for ak, k in zip(a, (1, 3, 5)))
    assert v.min() > -1e-12
    assert abs(v[5000]) < 1e-12


def test_ideal_waveform_series():
    # Fourier series (docs/check_values.md): square V1 = 1.2732 Vdd, V3 = 0.4244, V5 = 0.2546;
    # half sine Idc = 0.3183 Imax, I1 = 0.5, I2 = 0.2122, I4 = 0.04244
    sq = square_wave_harmonics(5, 1.0)
    assert_allclose(sq[[0, 1, 3, 5]], [1.0, 1.2732, 0.4244, 0.2546], rtol=1e-3)
    assert sq[2] == 0 and sq[4] == 0
    hs = half_sine_harmonics(5, 1.0)
    assert_allclose(hs[[0, 1, 2, 4]], [0.3183, 0.5, 0.2122, 0.04244], rtol=1e-3)
    assert hs[3] == 0 and hs[5] == 0
    # numerical cross-check with numpy's FFT of the sampled half sine
    n = 4096
    th = np.arange(n) * 2 * math.pi / n
    x = np.maximum(np.cos(th), 0.0)
    spec = np.abs(np.fft.rfft(x)) / n * 2
    assert_allclose(spec[1:5], hs[1:5], atol=1e-5)


def test_class_e_ideal_values():
    # Sokal & Sokal 1975; Raab 1977 (docs/check_values.md)
    e = class_e_ideal()
    assert_allclose(e["vdd_check"], 1.0, rtol=1e-6)
    assert_allclose(e["r_norm"], 0.5768, rtol=1e-3)
    assert_allclose(e["wcr"], 0.1836, rtol=1e-3)
    assert_allclose(e["x_over_r"], 1.1525, rtol=1e-3)
    assert_allclose(e["peak_v_over_vdd"], 3.562, rtol=1e-3)
    assert_allclose(e["peak_i_over_idc"], 2.862, rtol=1e-3)
    assert_allclose(e["im_over_idc"], math.sqrt(1 + math.pi**2 / 4), rtol=1e-6)
    assert_allclose(math.tan(e["phi_rad"]), -2 / math.pi, rtol=1e-12)
    assert_allclose(e["efficiency"], 1.0, rtol=1e-6)
    assert_allclose(e["v_harmonics_over_vdd"], [1.639, 0.8477, 0.2222, 0.1432, 0.0800], rtol=1e-3)


def _sized(topology, harmonics=2):
    d = Design(name="t", topology=topology, f0_hz=1e9, vdd_v=10.0, network=NetworkSpec(harmonics=harmonics))
    return SizedDesign(design=d, ropt_ohm=100.0, components={})


def test_bound_for_topologies():
    # ideal bounds: class F / inverse F 100 % (Raab 2001, n = m = inf); class E 100 % (Sokal 1975);
    # tuned class B pi/4 (Cripps); lumped class F with N resonators: Raab 2001 eta(2N+1, inf)
    assert bound_for(_sized("class_f_line"))["efficiency"] == 1.0
    assert bound_for(_sized("class_f_feed"))["efficiency"] == 1.0
    assert bound_for(_sized("inverse_f_line"))["efficiency"] == 1.0
    assert bound_for(_sized("class_e"))["efficiency"] == 1.0
    assert_allclose(bound_for(_sized("class_b_tuned"))["efficiency"], 0.7854, rtol=1e-4)
    assert CLASS_B_EFFICIENCY == pytest.approx(math.pi / 4)
    assert_allclose(bound_for(_sized("class_f_lumped", 1))["efficiency"], 0.9069, rtol=1e-3)
    assert_allclose(bound_for(_sized("class_f_lumped", 2))["efficiency"], 0.9481, rtol=1e-3)
    assert_allclose(bound_for(_sized("class_f_lumped", 3))["efficiency"], 0.9669, rtol=1e-3)
    b = bound_for(_sized("class_f_lumped", 2))
    assert "5f0" in b["name"] and "Raab" in b["source"]
    user = bound_for(_sized("my_templates/pa.j2"))
    assert user["efficiency"] is None
    # works from a Design too
    assert bound_for(replace(_sized("class_e").design))["efficiency"] == 1.0


def test_bound_for_user_template_uses_declared_sizing(tmp_path):
    # a user template declaring class_b_tuned sizing inherits the tuned class-B bound pi/4 (Cripps)
    tpl = tmp_path / "my_pa.j2"
    tpl.write_text("{# sizing: class_b_tuned #}\n* my network\n", encoding="utf-8")
    d = Design(name="t", topology="my_pa.j2", f0_hz=1e9, vdd_v=10.0, source=tmp_path / "pa.toml")
    b = bound_for(SizedDesign(design=d, ropt_ohm=50.0, components={}))
    assert_allclose(b["efficiency"], math.pi / 4, rtol=1e-12)
    assert "user template" in b["name"]
