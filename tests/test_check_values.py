"""The outside values of docs/check_values.md, recomputed from first principles.

The other tests compare the tool against these numbers; here each table of that page is worked
out again (scipy's linear programming for Raab's limits, the class-E switching conditions solved
directly, Pozar's line formula), so the page and its sources can be checked by anyone. Nothing
here imports the tool: a mistake in the tool cannot hide a mistake in its references.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import fsolve, linprog

DOC = Path(__file__).resolve().parents[1] / "docs" / "check_values.md"
THETA = np.linspace(0.0, 2.0 * math.pi, 4001)


def _table(heading_start: str) -> list[list[str]]:
    """Rows (cells as text) of the first markdown table whose header row starts with ``heading_start``."""
    lines = DOC.read_text(encoding="utf-8").splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith(f"| {heading_start}"))
    rows = []
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        rows.append([c.strip() for c in line.strip("|").split("|")])
    return rows


def _largest_first_harmonic(harmonics: list[int]) -> float:
    """Largest a1 with 1 - a1 cos(theta) + sum a_k cos(k theta) >= 0 for all theta (Raab 2001)."""
    a_ub = np.column_stack([np.cos(THETA)] + [-np.cos(k * THETA) for k in harmonics])
    res = linprog([-1.0] + [0.0] * len(harmonics), A_ub=a_ub, b_ub=np.ones(THETA.size),
                  bounds=[(None, None)] * (1 + len(harmonics)))
    assert res.success
    return -res.fun


def test_raab_2001_efficiency_table_by_linear_programming():
    # Raab 2001 (IEEE T-MTT): efficiency = 1/2 (V1/Vdc)(I1/Idc), voltage with odd harmonics up to n,
    # current with even harmonics up to m, both non-negative; limits 4/pi and pi/2 (Fourier series)
    v1 = {str(n): _largest_first_harmonic(list(range(3, n + 1, 2))) for n in (1, 3, 5, 7)} | {"inf": 4 / math.pi}
    i1 = {str(m): _largest_first_harmonic(list(range(2, m + 1, 2))) for m in (1, 2, 4, 6)} | {"inf": math.pi / 2}
    assert v1["3"] == pytest.approx(2 / math.sqrt(3), rel=1e-4)  # closed form, docs/check_values.md
    assert v1["5"] == pytest.approx((1 + math.sqrt(2)) / 2, rel=1e-4)
    for row in _table("efficiency, m"):
        m, values = row[0], [float(x) for x in row[1:]]
        for n, value in zip(("1", "3", "5", "7", "inf"), values):
            assert 0.5 * v1[n] * i1[m] == pytest.approx(value, abs=6e-5), (m, n)
    (v_row,) = _table("largest V1/Vdc")
    assert [float(x) for x in v_row[1:]] == pytest.approx([v1[n] for n in ("1", "3", "5", "7", "inf")], abs=6e-5)
    (i_row,) = _table("largest I1/Idc")
    assert [float(x) for x in i_row[1:]] == pytest.approx([i1[m] for m in ("1", "2", "4", "6", "inf")], abs=6e-5)


def test_raab_1997_maximally_flat_waveforms():
    # Raab 1997: the maximally flat voltages touch zero and never go below it; efficiencies with a
    # half-sine current (I1/Idc = pi/2) are 0.8836 and 0.9204 (docs/check_values.md)
    c = np.cos(THETA)
    v3 = 1 - 9 / 8 * c + 1 / 8 * np.cos(3 * THETA)
    v35 = 1 - 15 / 8 * c + 5 / 4 * c**3 - 3 / 8 * c**5
    for v, v1, eff in ((v3, 9 / 8, 0.8836), (v35, 75 / 64, 0.9204)):
        assert v.min() == pytest.approx(0.0, abs=1e-9)
        assert np.trapezoid(v * np.cos(THETA), THETA) / math.pi == pytest.approx(-v1, rel=1e-6)
        assert 0.5 * v1 * math.pi / 2 == pytest.approx(eff, abs=6e-5)


def _class_e_off_interval(params, points=20001):
    """Capacitor current Idc - Im sin(theta + phi) over the off half period, and the voltage it builds."""
    amplitude, phi = params
    theta = np.linspace(math.pi, 2 * math.pi, points)
    i_c = 1.0 - amplitude * np.sin(theta + phi)
    v = np.concatenate([[0.0], np.cumsum((i_c[1:] + i_c[:-1]) / 2 * np.diff(theta))])
    return theta, v, i_c


def test_sokal_class_e_values_from_the_switching_conditions():
    # Sokal & Sokal 1975; Raab 1977: v = 0 and dv/dt = 0 at turn-on fix the load current
    # Im sin(theta + phi); the rest follows (docs/check_values.md, Ideal class E)
    def conditions(p):
        _, v, i_c = _class_e_off_interval(p)
        return [v[-1], i_c[-1]]

    amplitude, phi = fsolve(conditions, [-1.8, -0.5])
    theta_off, v_off, _ = _class_e_off_interval((amplitude, phi))
    assert abs(amplitude) == pytest.approx(math.sqrt(1 + math.pi**2 / 4), rel=1e-6)
    assert math.tan(phi) == pytest.approx(-2 / math.pi, rel=1e-6)
    vdd = np.trapezoid(v_off, theta_off) / (2 * math.pi)  # the on half contributes 0 V
    assert v_off.max() / vdd == pytest.approx(3.562, rel=2e-4)
    theta_on = np.linspace(0, math.pi, 10001)
    assert (1 - amplitude * np.sin(theta_on + phi)).max() == pytest.approx(2.862, rel=2e-4)
    theta = np.concatenate([theta_on[:-1], theta_off])
    v = np.concatenate([np.zeros(theta_on.size - 1), v_off]) / vdd
    harmonics = [abs(np.trapezoid(v * np.exp(-1j * n * theta), theta)) / math.pi for n in range(1, 6)]
    assert harmonics == pytest.approx([1.639, 0.8477, 0.2222, 0.1432, 0.0800], rel=5e-4)
    # Vdd = Idc = 1: P = 1 W; the fundamental voltage over the load current gives R + jX
    v1 = np.trapezoid(v * np.exp(-1j * theta), theta) / math.pi
    z = v1 / (amplitude * -1j * np.exp(1j * phi))
    assert z.real == pytest.approx(0.5768, rel=2e-4)  # R = 0.5768 Vdd^2/P
    assert z.imag / z.real == pytest.approx(1.1525, rel=2e-4)  # excess reactance X = 1.1525 R
    assert z.real * vdd == pytest.approx(0.1836, rel=2e-4)  # omega C R (v = integral i_C / (omega C))


def test_pozar_quarter_wave_worked_example():
    # Pozar, Microwave Engineering: Zin of a terminated lossless line; the table of docs/check_values.md
    f0, z0 = 1e9, 70.71
    for row in _table("tank C"):
        c_f = float(re.match(r"[\d.]+", row[0]).group()) * 1e-12
        l_h = 1 / ((2 * math.pi * f0) ** 2 * c_f)
        for n, text in enumerate(row[1:], start=1):
            w = 2 * math.pi * n * f0
            zl = 1 / (1 / 50 + 1j * w * c_f + 1 / (1j * w * l_h))
            t = math.tan(n * math.pi / 2) if n % 2 == 0 else None
            zin = z0**2 / zl if t is None else z0 * (zl + 1j * z0 * t) / (z0 + 1j * zl * t)
            assert abs(zin) == pytest.approx(float(text), rel=1e-3), (row[0], n)


def test_quarter_wave_in_air_at_1ghz():
    # common practice: lambda/4 = c0/(4 f0), about 75 mm at 1 GHz in air (docs/check_values.md)
    assert 299_792_458 / (4 * 1e9) == pytest.approx(0.075, rel=1e-3)
